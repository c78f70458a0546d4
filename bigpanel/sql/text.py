"""SQL templates under ``bigpanel/sql/`` and the quoting rules for filling them.

Templates hold ``{{name}}`` slots. A slot is filled only with SQL fragments that
this package generates from quoted identifiers (:func:`ident`) or quoted string
literals (:func:`literal`); run-time numbers travel as bound ``$name`` parameters
or as rows of small helper tables, never as pasted text.
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


def render(name: str, **slots: str) -> str:
    """Fill every ``{{slot}}`` of template ``name``; unknown or missing slots are an error."""
    text = template(name)
    wanted = set(_SLOT.findall(text))
    if wanted != set(slots):
        raise KeyError(f"template {name}: slots {sorted(wanted)} but got {sorted(slots)}")
    return _SLOT.sub(lambda m: slots[m.group(1)], text)


def ident(name: str) -> str:
    """Quote an identifier, doubling any double quote inside it."""
    return '"' + name.replace('"', '""') + '"'


def literal(value: str) -> str:
    """Quote a string literal, doubling any single quote inside it."""
    return "'" + value.replace("'", "''") + "'"


def join(parts: list[str], sep: str = ",\n       ") -> str:
    """Join generated fragments for a slot."""
    return sep.join(parts)


def grouping_sets(sets: list[list[str]]) -> str:
    """The body of ``GROUP BY GROUPING SETS (...)``: ``(a, b), (c)`` for the column lists ``sets``."""
    return join(["(" + ", ".join(s) + ")" for s in sets], ", ")


def grouping_id(columns: list[str], grouped: list[str]) -> int:
    """The value of ``GROUPING(columns...)`` on the rows of the grouping set ``grouped``: the first
    column is the most significant bit, and a bit is 1 where its column is not grouped."""
    width = len(columns)
    return sum(1 << (width - 1 - i) for i, c in enumerate(columns) if c not in grouped)


def render_variant(name: str, dialect: str, **slots: str) -> str:
    """Render ``sql/<name>.<dialect>.sql`` when that variant exists, else ``sql/<name>.sql``."""
    variant = f"{name}.{dialect}"
    return render(variant if (SQL_DIR / f"{variant}.sql").is_file() else name, **slots)
