"""A thin wrapper over the DuckDB connection that names and counts the passes.

A *raw pass* is a query that reads the rows of the panel (as opposed to the
small level tables); the count is reported with every fit.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any, Callable

import duckdb
import pyarrow as pa

from .errors import BigPanelError
from .sqltext import ident, render


@dataclass
class Engine:
    """Run SQL on one connection; keep the raw-pass count, per-step timings and the statements."""

    con: duckdb.DuckDBPyConnection
    on_step: Callable[[str], None] | None = None
    raw_passes: int = 0
    timings: dict[str, float] = field(default_factory=dict)
    statements: list[str] = field(default_factory=list)

    def _run(self, label: str, raw: bool, sql: str, fn: Callable[[], Any]) -> Any:
        self.statements.append(sql)
        if self.on_step is not None:
            self.on_step(label)
        start = time.perf_counter()
        try:
            out = fn()
        except duckdb.InterruptException:
            raise KeyboardInterrupt from None
        except duckdb.Error as exc:
            lines = str(exc).strip().splitlines()
            raise BigPanelError(f"{label} failed in DuckDB: {lines[0] if lines else exc}") from None
        self.timings[label] = self.timings.get(label, 0.0) + time.perf_counter() - start
        if raw:
            self.raw_passes += 1
        return out

    def execute(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> None:
        """Run a statement whose result is not needed."""
        self._run(label, raw, sql, lambda: self.con.execute(sql, params or {}).fetchall())

    def one(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> dict:
        """Run a query returning one row; return it as a dict."""

        def fetch() -> dict:
            cur = self.con.execute(sql, params or {})
            names = [d[0] for d in cur.description]
            row = cur.fetchall()[0]
            return dict(zip(names, row))

        return self._run(label, raw, sql, fetch)

    def arrow(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> pa.Table:
        """Run a query returning a (small) table as Arrow."""
        return self._run(label, raw, sql, lambda: self.con.sql(sql, params=params or None).to_arrow_table())

    def put_table(self, name: str, table: pa.Table) -> None:
        """Copy a small Arrow table into a temporary DuckDB table ``name``."""
        view = f"{name}_arrow"
        self.con.register(view, table)
        try:
            self.execute(f"store {name}", render("store_arrow", table=ident(name), view=ident(view)))
        finally:
            self.con.unregister(view)
