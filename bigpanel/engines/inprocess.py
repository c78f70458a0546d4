"""Panels already held by the calling program: a DuckDB connection (with a table, view or relation),
a DuckDB relation, a pyarrow Table or Dataset, a pandas or a polars DataFrame.

* **Frames** (Arrow, pandas, polars): a DuckDB connection of bigpanel's own (set up as for a
  file) registers the object, which DuckDB scans where it lies without copying it (a
  polars LazyFrame is collected by each scan; a pandas frame with columns of Python
  objects is converted once, see :func:`scannable`), and ``bp_source`` is a view over it.
* **A caller's DuckDB connection**: the fit runs in that connection through a
  :class:`~bigpanel.engines.guest.GuestDuckDBEngine` (private names, everything dropped after,
  no setting changed). ``table`` names a table or view the connection sees (temporary ones
  and registered frames included; ``schema.table`` or ``database.schema.table`` when the name
  alone is ambiguous), or is a relation of that connection.
* **A relation** alone runs in the connection it belongs to when that is DuckDB's default
  connection (``duckdb.sql(...)``); a relation of another connection needs it:
  ``bigpanel.fit(con, ..., table=rel)``.

A relation is read through its SQL text (``sql_query()``), which DuckDB re-plans on every pass.
"""

from __future__ import annotations

from typing import Any, Callable

import duckdb

from ..errors import BigPanelError
from ..sql.text import ident, render
from .base import Engine, first_line
from .duckdb import DuckDBEngine, connect
from .guest import GuestDuckDBEngine, private_prefix
from .source import Source

# the kind of each in-process object, from its type's module and name (nothing is imported to tell)
KINDS = {
    ("duckdb", "DuckDBPyConnection"): "DuckDB connection",
    ("duckdb", "DuckDBPyRelation"): "DuckDB relation",
    ("pyarrow", "Table"): "Arrow table",
    ("pyarrow", "FileSystemDataset"): "Arrow dataset",
    ("pyarrow", "UnionDataset"): "Arrow dataset",
    ("pyarrow", "InMemoryDataset"): "Arrow dataset",
    ("pandas", "DataFrame"): "pandas DataFrame",
    ("polars", "DataFrame"): "polars DataFrame",
    ("polars", "LazyFrame"): "polars LazyFrame",
}
SETTINGS_OF_OWN_CONNECTION = ("memory_limit", "temp_dir", "threads")


def kind_of(source: object) -> str | None:
    """The in-process kind of ``source`` (``"pandas DataFrame"``, ...), or None for a path or URL."""
    if isinstance(source, (str, bytes)) or hasattr(source, "__fspath__"):
        return None
    cls = type(source)
    found = KINDS.get((cls.__module__.split(".")[0].lstrip("_"), cls.__name__))
    if found is None:
        raise BigPanelError(f"cannot read a {cls.__module__}.{cls.__name__} as a panel: give a path or URL, a DuckDB "
                            "connection with table=, a DuckDB relation, a pyarrow Table or Dataset, or a pandas or "
                            "polars DataFrame")
    return found


def open_inprocess(source: object, table: object, on_step: Callable[[str], None] | None,
                   options: dict[str, Any]) -> tuple[Engine, Source]:
    """An engine holding the view ``bp_source`` over the in-process ``source``, and its schema."""
    kind = kind_of(source)
    if options.get("delimiter") is not None:
        raise BigPanelError(f"--delimiter applies to CSV files, not to this {kind}")
    if kind in ("DuckDB connection", "DuckDB relation"):
        given = [k for k in SETTINGS_OF_OWN_CONNECTION if options.get(k) is not None]
        if given:
            raise BigPanelError(f"{given[0]} does not apply to a fit in your own DuckDB connection: set it there "
                                f"(SET {given[0]} = ...)")
        con, select, shown = _guest_source(source, table, kind)
        eng: DuckDBEngine = GuestDuckDBEngine(con, on_step=on_step)
        try:
            eng.create_source(select)
            return eng, _described(eng, shown)
        except BaseException:
            eng.close()
            raise
    if table is not None:
        raise BigPanelError(f"table= names a table of a DuckDB connection or database file; this {kind} is itself "
                            "the table: drop table=")
    own = connect(options.get("memory_limit"), options.get("temp_dir"), options.get("threads"))
    try:
        own.register("bp_frame", scannable(source, kind))
        eng = DuckDBEngine(own, on_step=on_step)
        eng.execute("open the source", render("source_frame"))
        return eng, _described(eng, f"{kind} in memory")
    except BaseException:
        own.close()
        raise


def scannable(frame: Any, kind: str) -> Any:
    """``frame`` as DuckDB should scan it on every pass. A pandas column of Python objects (dates and mixed
    values have no numpy type) is converted by DuckDB row by row, holding the GIL, on every pass (a date
    effect made a two-effect fit of 5M rows nine times slower than from Parquet); such a frame goes through
    ``pyarrow.Table.from_pandas`` once, which converts those columns and leaves numeric ones zero-copy.
    A frame Arrow cannot convert is scanned as it is."""
    if kind != "pandas DataFrame" or not any(str(dtype) == "object" for dtype in frame.dtypes):
        return frame
    import pyarrow as pa

    try:
        return pa.Table.from_pandas(frame, preserve_index=False)
    except (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError):
        return frame


def _described(eng: Engine, shown: str) -> Source:
    columns = {r["column_name"]: r["column_type"] for r in eng.arrow("columns", render("describe_source")).to_pylist()}
    if not columns:
        raise BigPanelError(f"{shown} has no columns")
    return Source(location=shown, kind="table", columns=columns)


def _guest_source(source: Any, table: object, kind: str) -> tuple[Any, str, str]:
    """The caller's connection, the query ``bp_source`` is a view of, and how the source is shown."""
    if kind == "DuckDB relation":
        if table is not None:
            raise BigPanelError("a DuckDB relation is itself the table: drop table=")
        return _owner(source, duckdb.default_connection()), source.sql_query(), "DuckDB relation"
    if table is None:
        raise BigPanelError("a DuckDB connection as the source needs table=: the name of a table or view, or a "
                            "relation of that connection")
    if kind_of(table) == "DuckDB relation":
        return _owner(table, source), table.sql_query(), "DuckDB relation"
    if not isinstance(table, str):
        raise BigPanelError(f"table= must be a table or view name or a DuckDB relation, not a {type(table).__name__}")
    return source, "SELECT * FROM " + _qualified(source, table), f"DuckDB connection: {table}"


def _owner(rel: Any, con: Any) -> Any:
    """``con`` when the relation ``rel`` belongs to it (a marker view made through the relation is seen there)."""
    marker = private_prefix() + "probe"
    rel.query("bigpanel_relation", f"CREATE TEMP VIEW {marker} AS SELECT 1 AS one")
    try:
        seen = con.execute(render("private_objects"), {"prefix": marker}).fetchall()
    finally:
        rel.query("bigpanel_relation", f"DROP VIEW IF EXISTS {marker}")
    if not seen:
        raise BigPanelError("this DuckDB relation belongs to a connection bigpanel was not given: pass the "
                            "connection as the source and the relation as table= (bigpanel.fit(con, ..., table=rel))")
    return con


def _qualified(con: Any, name: str) -> str:
    """``database.schema.name`` of the table or view ``name`` that ``con`` sees, each part quoted, so that
    no temporary name of the fit can shadow it; ``name`` may itself be qualified with dots."""
    try:
        found = con.execute(render("find_relation"), {"name": name}).fetchall()
    except duckdb.Error as exc:
        raise BigPanelError(f"cannot list the tables of your DuckDB connection: {first_line(exc)}") from None
    if not found:
        raise BigPanelError(f"no table or view {name!r} in your DuckDB connection (a Python variable is not a table: "
                            "pass the frame itself as the source)")
    if len(found) > 1:
        places = ", ".join(".".join(row[:3]) for row in found[:4])
        raise BigPanelError(f"{name!r} names several tables or views ({places}): qualify it as schema.table")
    return ".".join(ident(part) for part in found[0][:3])
