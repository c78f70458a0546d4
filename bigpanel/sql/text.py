"""SQL templates under ``bigpanel/sql/`` and the quoting rules for filling them.

Templates hold ``{{name}}`` slots. A slot is filled only with a :class:`Fragment`:
SQL that this package generates from quoted identifiers (:func:`ident`), quoted
string literals (:func:`literal`) and internal names, joined by the helpers here
(:func:`join`, :func:`names`, :func:`level_joins`, :func:`grouping_sets`);
``render`` refuses plain text. Run-time numbers travel as bound ``$name``
parameters or as rows of small helper tables, never as pasted text.
"""

from __future__ import annotations

import re
from functools import lru_cache
from pathlib import Path

_SLOT = re.compile(r"\{\{(\w+)\}\}")


SQL_DIR = Path(__file__).resolve().parent


@lru_cache(maxsize=None)
def template(name: str) -> str:
    """Return the text of ``sql/<name>.sql``."""
    return (SQL_DIR / f"{name}.sql").read_text()


class Fragment(str):
    """SQL text this package generated: quoted identifiers and literals, internal names, bound
    ``$name`` parameters and the expressions built from them (and the user's filter once
    parsed and re-rendered). :func:`render` fills slots with nothing else, so that a plain
    ``str`` (text that has not been through one of these helpers) cannot reach a query."""

    __slots__ = ()


class Identifier(Fragment):
    """A quoted identifier (:func:`ident`)."""

    __slots__ = ()


def render(name: str, **slots: Fragment) -> str:
    """Fill every ``{{slot}}`` of template ``name``; unknown or missing slots, or a slot that is
    not a :class:`Fragment`, are an error."""
    text = template(name)
    wanted = set(_SLOT.findall(text))
    if wanted != set(slots):
        raise KeyError(f"template {name}: slots {sorted(wanted)} but got {sorted(slots)}")
    loose = sorted(k for k, v in slots.items() if not isinstance(v, Fragment))
    if loose:
        raise TypeError(f"template {name}: slots {loose} hold plain text, not SQL fragments")
    return _SLOT.sub(lambda m: slots[m.group(1)], text)


def ident(name: str) -> Identifier:
    """Quote an identifier, doubling any double quote inside it."""
    return Identifier('"' + name.replace('"', '""') + '"')


def literal(value: str) -> Fragment:
    """Quote a string literal, doubling any single quote inside it."""
    return Fragment("'" + value.replace("'", "''") + "'")


def join(parts: list[str], sep: str = ",\n       ") -> Fragment:
    """Join generated fragments for a slot."""
    return Fragment(sep.join(parts))


def names(parts: list[str]) -> Fragment:
    """A comma-separated list of internal column names on one line (``fd_1, fd_2``)."""
    return Fragment(", ".join(parts))


def level_joins(table: str, keys: dict[int, list[str]], alias: str | None = None, indent: str = "") -> Fragment:
    """``JOIN <table>_<d+1> [AS <alias><d+1>] USING (<keys of d>)``, a line per effect d of
    ``keys`` (effect index -> its internal key columns): the one way a per-level table
    (``bp_lev_d``, ``bp_alpha_d``, ...) is joined back to rows or cells."""
    lines = []
    for d, cols in keys.items():
        named = f" AS {alias}{d + 1}" if alias else ""
        lines.append(f"{indent}JOIN {table}_{d + 1}{named} USING ({', '.join(cols)})")
    return Fragment("\n".join(lines))


def grouping_sets(sets: list[list[str]]) -> Fragment:
    """The body of ``GROUP BY GROUPING SETS (...)``: ``(a, b), (c)`` for the column lists ``sets``."""
    return join(["(" + ", ".join(s) + ")" for s in sets], ", ")


def grouping_id(columns: list[str], grouped: list[str]) -> int:
    """The value of ``GROUPING(columns...)`` on the rows of the grouping set ``grouped``: the first
    column is the most significant bit, and a bit is 1 where its column is not grouped."""
    width = len(columns)
    return sum(1 << (width - 1 - i) for i, c in enumerate(columns) if c not in grouped)


def grouped_columns(gid: int, width: int) -> tuple[int, ...]:
    """The inverse of :func:`grouping_id`: the indices of the ``width`` columns that the grouping
    set with ``GROUPING(...) = gid`` groups by (bit 0, counted from the most significant)."""
    return tuple(j for j in range(width) if not (gid >> (width - 1 - j)) & 1)


def render_variant(name: str, dialect: str, **slots: Fragment) -> str:
    """Render ``sql/<name>.<dialect>.sql`` when that variant exists, else ``sql/<name>.sql``."""
    variant = f"{name}.{dialect}"
    return render(variant if (SQL_DIR / f"{variant}.sql").is_file() else name, **slots)
