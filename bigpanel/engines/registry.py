"""One place that picks the engine for a fit from the source's location and ``--engine``.

Light on purpose (the CLI imports it for its choices): the engine modules, and
their drivers, are imported only when a session opens.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Callable

from ..errors import BigPanelError

if TYPE_CHECKING:
    from .base import Engine
    from .source import Source

# --engine values; "memory" loads the used columns into numpy through the SQL engine of the location
ENGINES = ("duckdb", "postgresql", "spark", "memory")
POSTGRES_PREFIXES = ("postgresql://", "postgres://")

# option -> (its flag, the SQL engines it applies to)
OPTIONS = {
    "memory_limit": ("--memory-limit", ("duckdb",)),
    "temp_dir": ("--temp-dir", ("duckdb",)),
    "threads": ("--threads", ("duckdb",)),
    "delimiter": ("--delimiter", ("duckdb",)),
    "spark_master": ("--spark-master", ("spark",)),
    "allow_remote": ("--allow-remote", ("duckdb",)),
}


def is_postgres(location: str) -> bool:
    """Whether ``location`` is a PostgreSQL URL."""
    return str(location).startswith(POSTGRES_PREFIXES)


def sql_engine(location: str, engine: str | None) -> str:
    """The SQL engine that holds the rows: ``engine`` checked against the location, or the location's own.

    A ``postgresql://`` URL runs on PostgreSQL (``--engine postgresql`` or ``memory``, or none);
    anything else on DuckDB unless ``--engine spark``.
    """
    if engine is not None and engine not in ENGINES:
        raise BigPanelError(f"unknown engine {engine!r}: choose one of {', '.join(ENGINES)}")
    if is_postgres(location):
        if engine in ("duckdb", "spark"):
            raise BigPanelError(f"--engine {engine} cannot read a postgresql:// source: it runs in PostgreSQL "
                                "(drop --engine)")
        return "postgresql"
    if engine == "postgresql":
        raise BigPanelError(f"--engine postgresql needs a postgresql:// URL as the source, not {location}")
    return "spark" if engine == "spark" else "duckdb"


def check_options(where: str, engine: str | None, **options: object) -> None:
    """Refuse an option that the SQL engine ``where`` does not use, in one line."""
    for key, value in options.items():
        flag, applies = OPTIONS[key]
        if value is not None and where not in applies:
            shown = f"--engine {engine}" if engine else f"a {where} source"
            raise BigPanelError(f"{flag} applies to {' and '.join(applies)} only, not to {shown}")


def open_session(
    location: object,
    table: object = None,
    *,
    engine: str | None = None,
    on_step: Callable[[str], None] | None = None,
    **options: object,
) -> tuple[Engine, Source]:
    """An engine holding the view ``bp_source`` over ``location``, and the source's schema.

    ``options`` are ``memory_limit``, ``temp_dir``, ``threads``, ``delimiter``, ``allow_remote``
    (DuckDB) and ``spark_master`` (Spark); one given to another engine is an error. ``location``
    may also be an in-process object (:mod:`bigpanel.engines.inprocess`), read by DuckDB; a remote
    URL is read only with ``allow_remote`` (:mod:`bigpanel.engines.remote`). The caller closes the engine.
    """
    from .inprocess import kind_of

    held = kind_of(location)
    if held is not None:
        if engine not in (None, "duckdb", "memory"):
            raise BigPanelError(f"a {held} is read by DuckDB: drop --engine {engine}")
        check_options("duckdb", engine, **options)
        from .inprocess import open_inprocess

        return open_inprocess(location, table, on_step, options)
    location = str(location)
    where = sql_engine(location, engine)
    check_options(where, engine, **options)
    if where == "postgresql":
        from .postgres import open_postgres

        return open_postgres(str(location), table, on_step=on_step)
    if where == "spark":
        from .spark import open_spark

        return open_spark(str(location), table, master=options.get("spark_master"), on_step=on_step)
    return _open_duckdb(location, table, on_step, options)


def _open_duckdb(location: str, table: str | None, on_step: Callable[[str], None] | None,
                 options: dict) -> tuple[Engine, Source]:
    from .duckdb import DuckDBEngine, connect
    from .remote import check_remote, enable_remote, is_remote
    from .source import open_source

    check_remote(location, options.get("allow_remote"))
    prepare = (lambda con: enable_remote(con, location)) if is_remote(location) else None
    con = connect(options.get("memory_limit"), options.get("temp_dir"), options.get("threads"), prepare=prepare)
    try:
        src = open_source(con, location, table, options.get("delimiter"))
    except BaseException:
        con.close()
        raise
    return DuckDBEngine(con, on_step=on_step), src
