"""A thin wrapper over the DuckDB connection that names and counts the passes.

A *raw pass* is a query that reads the rows of the panel (as opposed to the
small level tables); the count is reported with every fit.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any, Callable, Iterator

import duckdb
import pyarrow as pa

from ..errors import BigPanelError
from ..sqltext import ident, render

STREAM_BATCH = 1 << 20  # rows per batch of a streamed result


class EngineError(BigPanelError):
    """A statement failed in the engine; ``detail`` holds the engine's own first line."""

    def __init__(self, label: str, detail: str, engine: str) -> None:
        super().__init__(f"{label} failed in {engine}: {detail}")
        self.detail = detail


@dataclass
class Engine:
    """Run SQL on one connection; keep the raw-pass count, per-step timings and the statements.

    This class talks to DuckDB. Another engine subclasses it and overrides the
    primitives ``_execute``, ``_fetch``, ``_put`` and ``close``, translating the DuckDB-dialect templates on the way.
    """

    con: Any
    on_step: Callable[[str], None] | None = None
    raw_passes: int = 0
    timings: dict[str, float] = field(default_factory=dict)
    statements: list[str] = field(default_factory=list)
    name: str = "DuckDB"
    bytes_to_client: int = 0
    count_scans: bool = False  # whether count(*) over a table reads its rows (not a metadata lookup)

    def _execute(self, sql: str, params: dict) -> None:
        self.con.execute(sql, params).fetchall()

    def _fetch(self, sql: str, params: dict) -> pa.Table:
        return self.con.sql(sql, params=params or None).to_arrow_table()

    def _stream(self, sql: str, params: dict) -> Iterator[pa.RecordBatch]:
        yield from self.con.sql(sql, params=params or None).to_arrow_reader(STREAM_BATCH)

    def _put(self, name: str, table: pa.Table) -> None:
        """Upload ``table`` as the temporary table ``name`` (the statement shown is ``store_arrow``)."""
        view = f"{name}_arrow"
        self.con.register(view, table)
        try:
            self._execute(render("store_arrow", table=ident(name), view=ident(view)), {})
        finally:
            self.con.unregister(view)

    def close(self) -> None:
        self.con.close()

    def _run(self, label: str, raw: bool, sql: str, fn: Callable[[], Any], record: bool = True) -> Any:
        if record:
            self.statements.append(sql)
            if self.on_step is not None:
                self.on_step(label)
        start = time.perf_counter()
        try:
            out = fn()
        except duckdb.InterruptException:
            raise KeyboardInterrupt from None
        except duckdb.Error as exc:
            raise EngineError(label, _first_line(exc), self.name) from None
        except RuntimeError as exc:  # this DuckDB reports an interrupted query as a plain RuntimeError
            if "interrupted" in str(exc).lower():
                raise KeyboardInterrupt from None
            raise
        if record:
            self.timings[label] = self.timings.get(label, 0.0) + time.perf_counter() - start
        if raw:
            self.raw_passes += 1
        return out

    def execute(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> None:
        """Run a statement whose result is not needed."""
        self._run(label, raw, sql, lambda: self._execute(sql, params or {}))

    def arrow(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> pa.Table:
        """Run a query returning a (small) table as Arrow; its size adds to ``bytes_to_client``."""
        table = self._run(label, raw, sql, lambda: self._fetch(sql, params or {}))
        self.bytes_to_client += table.nbytes
        return table

    def stream(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> Iterator[pa.RecordBatch]:
        """Run a query whose (large) result is consumed batch by batch; the bytes add to
        ``bytes_to_client``. The query counts as a pass when ``raw``; its time is the time to
        exhaust the iterator."""
        self.statements.append(sql)
        if self.on_step is not None:
            self.on_step(label)
        start = time.perf_counter()
        batches = self._run(label, raw, sql, lambda: iter(self._stream(sql, params or {})), record=False)
        while True:
            batch = self._run(label, False, sql, lambda: next(batches, None), record=False)
            if batch is None:
                break
            self.bytes_to_client += batch.nbytes
            yield batch
        self.timings[label] = self.timings.get(label, 0.0) + time.perf_counter() - start

    def one(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> dict:
        """Run a query returning one row; return it as a dict."""
        return self.arrow(label, sql, params, raw).slice(0, 1).to_pylist()[0]

    def put_table(self, name: str, table: pa.Table) -> None:
        """Copy a small Arrow table into a temporary table ``name``."""
        shown = render("store_arrow", table=ident(name), view=ident(f"{name}_arrow"))
        self._run(f"store {name}", False, shown, lambda: self._put(name, table))


def _first_line(exc: BaseException) -> str:
    lines = str(exc).strip().splitlines()
    return lines[0] if lines else type(exc).__name__
