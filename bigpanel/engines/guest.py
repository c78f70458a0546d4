"""A fit inside the caller's own DuckDB connection: private names, everything dropped after, no setting changed.

The statements of a fit name their temporary objects ``bp_source``, ``bp_filtered``,
``bp_lev_1``, ... (``bigpanel/sql``). In a connection of its own that is harmless; in a
caller's connection those names could meet the caller's objects or another fit's. So
:class:`GuestDuckDBEngine` rewrites every bare ``bp_`` word of a statement (outside quoted
identifiers, string literals and comments: user column names are always quoted) to
``bigpanel_<16 hex digits>_...``, unique to the fit, and records each temporary view, table
and macro the fit creates. :meth:`GuestDuckDBEngine.close` drops them all, and is called on
success, error and interrupt alike (``estimators.base.opened`` closes its engine in a
``finally``); the caller's connection stays open.

Settings: the engine changes none of the connection's settings. The session set-up of
bigpanel's own connections (``sql/session_settings.sql``: no extension auto-install or
auto-load, configuration locked) is global to a DuckDB database and, for the lock,
irreversible, so it is not applied to a caller's connection: there the caller's
configuration rules, and the filter's allow-list (``model.spec``) is what keeps a filter from
reaching files or extensions. DuckDB's own progress percent is shown only when the caller's
connection has ``enable_progress_bar`` on.
"""

from __future__ import annotations

import re
import secrets
from dataclasses import dataclass, field
from typing import ClassVar, Iterator

import duckdb
import pyarrow as pa

from ..sql.text import ident, render
from .duckdb import DuckDBEngine

_TOKENS = re.compile(r"'(?:[^']|'')*'|\"(?:[^\"]|\"\")*\"|--[^\n]*|\bbp_(\w+)")
_CREATED = re.compile(r'^\s*CREATE\s+(?:OR\s+REPLACE\s+)?(?:TEMP|TEMPORARY)\s+(VIEW|TABLE|MACRO)\s+"?(\w+)"?',
                      re.IGNORECASE | re.MULTILINE)
PREFIX = "bigpanel_"


def private_prefix() -> str:
    """``bigpanel_<16 random hex digits>_``: the names of one fit's objects."""
    return f"{PREFIX}{secrets.token_hex(8)}_"


def rename(sql: str, prefix: str) -> str:
    """``sql`` with every bare ``bp_name`` written ``<prefix>name``; quoted text and comments untouched."""
    return _TOKENS.sub(lambda m: prefix + m.group(1) if m.group(1) is not None else m.group(0), sql)


@dataclass
class GuestDuckDBEngine(DuckDBEngine):
    """A :class:`DuckDBEngine` over a connection that belongs to the caller (see the module docstring)."""

    title: ClassVar[str] = "DuckDB (your connection)"

    prefix: str = field(default_factory=private_prefix)
    created: list[tuple[str, str]] = field(default_factory=list)

    def private(self, name: str) -> str:
        """The fit's own name for the internal object ``name`` (``bp_source`` -> ``bigpanel_<hex>_source``)."""
        return rename(name, self.prefix)

    def _note(self, sql: str) -> str:
        for kind, name in _CREATED.findall(sql):
            if name.startswith(self.prefix) and (kind.upper(), name) not in self.created:
                self.created.append((kind.upper(), name))
        return sql

    def _execute(self, sql: str, params: dict) -> None:
        super()._execute(self._note(rename(sql, self.prefix)), params)

    def _fetch(self, sql: str, params: dict) -> pa.Table:
        return super()._fetch(rename(sql, self.prefix), params)

    def _stream(self, sql: str, params: dict) -> Iterator[pa.RecordBatch]:
        return super()._stream(rename(sql, self.prefix), params)

    def _put(self, name: str, table: pa.Table) -> None:
        target = self.private(name)
        view = f"{target}_arrow"
        self.con.register(view, table)
        try:
            self.con.execute(self._note(render("store_arrow", table=ident(target), view=ident(view)))).fetchall()
        finally:
            self.con.unregister(view)

    def create_source(self, select: str) -> None:
        """The view ``bp_source`` (under its private name) over ``select``, a query over the caller's objects
        that is placed as given: it is not renamed, so the caller's own ``bp_`` names keep their meaning."""
        sql = f"CREATE TEMP VIEW {self.private('bp_source')} AS\nSELECT * FROM (\n{select}\n)"
        self._run("open the source", False, sql, lambda: self.con.execute(self._note(sql)).fetchall())

    def close(self) -> None:
        """Drop every object the fit created, newest first; the connection stays open."""
        for kind, name in reversed(self.created):
            try:
                self.con.execute(f"DROP {kind} IF EXISTS {ident(name)}").fetchall()
            except duckdb.Error:
                continue  # one that cannot be dropped does not keep the others
        self.created.clear()


def leftovers(con: duckdb.DuckDBPyConnection) -> list[str]:
    """Names of objects in ``con`` that some fit made and did not drop (there should be none)."""
    rows = con.execute(render("private_objects"), {"prefix": PREFIX}).fetchall()
    return sorted(r[0] for r in rows)
