"""The DuckDB engine: an in-process connection, the reference dialect of every template."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, ClassVar, Iterator

import duckdb
import pyarrow as pa

from ..errors import BigPanelError
from ..options import size_in_bytes
from ..sql.text import ident, render
from .base import STREAM_BATCH, Engine, first_line


@dataclass
class DuckDBEngine(Engine):
    """An :class:`Engine` over one DuckDB connection; statements run as written."""

    name: ClassVar[str] = "duckdb"
    title: ClassVar[str] = "DuckDB"
    dialect: ClassVar[str] = "duckdb"
    count_scans: ClassVar[bool] = False  # count(*) over a Parquet view reads the footers only
    ordered_scans: ClassVar[bool] = True  # preserve_insertion_order, DuckDB's default

    def _execute(self, sql: str, params: dict) -> None:
        self.con.execute(sql, params).fetchall()

    def _fetch(self, sql: str, params: dict) -> pa.Table:
        return self.con.sql(sql, params=params or None).to_arrow_table()

    def _stream(self, sql: str, params: dict) -> Iterator[pa.RecordBatch]:
        yield from self.con.sql(sql, params=params or None).to_arrow_reader(STREAM_BATCH)

    def _put(self, name: str, table: pa.Table) -> None:
        view = f"{name}_arrow"
        self.con.register(view, table)
        try:
            self._execute(render("store_arrow", table=ident(name), view=ident(view)), {})
        finally:
            self.con.unregister(view)

    def close(self) -> None:
        self.con.close()

    def error_types(self) -> tuple[type[BaseException], ...]:
        return (duckdb.Error,)

    def query_progress(self) -> float | None:
        """DuckDB's own estimate of the running query's progress (-1 when it has none)."""
        try:
            done = float(self.con.query_progress())
        except (duckdb.Error, RuntimeError):
            return None
        return done if done >= 0 else None

    def interrupted(self, exc: BaseException) -> bool:
        # this DuckDB reports an interrupted query as InterruptException or as a plain RuntimeError;
        # while Arrow batches stream, pyarrow hands it on as OSError("INTERRUPT Error: Interrupted!")
        if isinstance(exc, duckdb.InterruptException):
            return True
        if isinstance(exc, OSError) and str(exc).startswith("INTERRUPT Error"):
            return True
        return isinstance(exc, RuntimeError) and not isinstance(exc, duckdb.Error) and "interrupted" in str(exc).lower()


def connect(
    memory_limit: str | None = None, temp_dir: str | None = None, threads: int | None = None,
    prepare: Callable[[duckdb.DuckDBPyConnection], None] | None = None,
) -> duckdb.DuckDBPyConnection:
    """An in-process DuckDB connection with the user's memory, spill and thread settings;
    ``prepare`` runs on it before its configuration is locked (remote sources load httpfs there)."""
    # Hand freed memory back to the system as a fit goes (not only at exit): without it the
    # sort buffers of the row-codes pass stayed resident while numpy built its tables (200M rows
    # of store x week: peak 6.4 GB, with it 4.3 GB).
    config: dict[str, str | int | bool] = {"allocator_flush_threshold": "64MB", "allocator_background_threads": True}
    if memory_limit:
        config["memory_limit"] = memory_limit
    if temp_dir:
        Path(temp_dir).mkdir(parents=True, exist_ok=True)
        config["temp_directory"] = temp_dir
    threads = threads or _threads_for(memory_limit)
    if threads:
        config["threads"] = int(threads)
    try:
        con = duckdb.connect(":memory:", config=config)
    except duckdb.Error as exc:
        raise BigPanelError(f"bad engine setting ({first_line(exc)})") from None
    if prepare is not None:
        try:
            prepare(con)
        except BaseException:
            con.close()
            raise
    con.execute(render("session_settings")).fetchall()
    return con


MEMORY_PER_THREAD = 256 * 2**20  # bytes of --memory-limit per DuckDB thread, at least


def _threads_for(memory_limit: str | None) -> int | None:
    """Threads under a tight memory limit: one per ``MEMORY_PER_THREAD`` (at least 1, at most the cores).

    Every thread builds its own partition of a grouped pass's hash table before
    spilling; under 100MB with two threads the 10M-row three-effect demo ran out
    of memory where one thread spilled and finished. None (DuckDB's default, all
    cores) when no limit is set or the limit leaves every core its share.
    """
    if not memory_limit:
        return None
    size = size_in_bytes(memory_limit)
    if size is None:
        return None  # DuckDB's own parser judges (and names) the value
    cores = os.cpu_count() or 1
    wanted = max(1, int(size // MEMORY_PER_THREAD))
    return wanted if wanted < cores else None


