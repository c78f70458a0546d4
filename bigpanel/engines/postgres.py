"""The same fit on a PostgreSQL table: the passes run inside the server.

The table stays where it is; ``bp_source`` is a temporary view over it, and
the intermediate tables (cells, levels, effects) are temporary tables of the
session. Only the level tables and the K x K moments come back, as Arrow.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Callable, ClassVar
from urllib.parse import unquote

import pyarrow as pa

from ..errors import BigPanelError
from ..sql.text import ident, join
from .base import Engine, first_line
from .dialect import TranslatingEngine
from .source import Source

CONNECT_TIMEOUT = 10  # seconds, unless the URL sets connect_timeout

# PostgreSQL types (information_schema data_type) under the DuckDB names the spec checks.
_DUCK_TYPES = {
    "double precision": "DOUBLE",
    "real": "FLOAT",
    "bigint": "BIGINT",
    "integer": "INTEGER",
    "smallint": "SMALLINT",
    "boolean": "BOOLEAN",
    "text": "VARCHAR",
    "character varying": "VARCHAR",
    "character": "VARCHAR",
    "name": "VARCHAR",
    "date": "DATE",
    "timestamp without time zone": "TIMESTAMP",
    "timestamp with time zone": "TIMESTAMP WITH TIME ZONE",
    "time without time zone": "TIME",
    "interval": "INTERVAL",
    "uuid": "UUID",
    "bytea": "BLOB",
    "json": "JSON",
    "jsonb": "JSON",
}

# Result columns by PostgreSQL type name; others (numeric) are inferred by pyarrow.
_ARROW_TYPES = {
    "bool": pa.bool_(),
    "int2": pa.int16(),
    "int4": pa.int32(),
    "int8": pa.int64(),
    "float4": pa.float32(),
    "float8": pa.float64(),
    "text": pa.string(),
    "varchar": pa.string(),
    "bpchar": pa.string(),
    "name": pa.string(),
    "date": pa.date32(),
    "timestamp": pa.timestamp("us"),
    "timestamptz": pa.timestamp("us", tz="UTC"),
    "bytea": pa.binary(),
}


def _column_type(field: pa.Field) -> str:
    """The DuckDB-dialect column type for an Arrow field of an uploaded table."""
    t = field.type
    if pa.types.is_decimal(t):
        return f"DECIMAL({t.precision}, {t.scale})"
    if pa.types.is_timestamp(t):
        return "TIMESTAMPTZ" if t.tz else "TIMESTAMP"
    for test, name in (
        (pa.types.is_boolean, "BOOLEAN"),
        (pa.types.is_int16, "SMALLINT"),
        (pa.types.is_int32, "INTEGER"),
        (pa.types.is_integer, "BIGINT"),
        (pa.types.is_float32, "REAL"),
        (pa.types.is_floating, "DOUBLE"),
        (pa.types.is_date, "DATE"),
        (pa.types.is_binary, "BLOB"),
    ):
        if test(t):
            return name
    return "VARCHAR"


# a temporary table made by a statement (its name as written there); ANALYZE gives it row counts
_CREATED = re.compile(r"^CREATE TEMPORARY TABLE (\S+) AS ")


@dataclass
class PostgresEngine(TranslatingEngine):
    """An :class:`Engine` over one autocommit psycopg 3 connection.

    Statements are translated to PostgreSQL (:mod:`bigpanel.engines.dialect`); results
    come back as Arrow tables; ``_put`` creates a temporary table and COPYs the
    rows in.
    """

    name: ClassVar[str] = "postgresql"
    title: ClassVar[str] = "PostgreSQL"
    dialect: ClassVar[str] = "postgres"

    def _execute(self, sql: str, params: dict) -> None:
        with self.con.cursor() as cur:
            for step in self.steps(sql):
                cur.execute(step.sql, params)
                made = _CREATED.match(step.sql)
                if made:  # row counts for the planner: without them a one-row table counts as ~1,000 rows
                    cur.execute(f"ANALYZE {made.group(1)}")

    def _fetch(self, sql: str, params: dict) -> pa.Table:
        with self.con.cursor() as cur:
            for step in self.steps(sql):
                cur.execute(step.sql, params)
            return _to_arrow(cur.description, cur.fetchall())

    def _put(self, name: str, table: pa.Table) -> None:
        from psycopg import sql as pgsql

        columns = join([f"{ident(f.name)} {_column_type(f)}" for f in table.schema], ", ")
        self._execute(self.render("store_arrow", table=ident(name), columns=columns), {})
        with self.con.cursor() as cur:
            with cur.copy(pgsql.SQL("COPY {} FROM STDIN").format(pgsql.Identifier(name))) as copy:
                for row in zip(*(col.to_pylist() for col in table.columns)):
                    copy.write_row(row)
            cur.execute(pgsql.SQL("ANALYZE {}").format(pgsql.Identifier(name)))

    def close(self) -> None:
        self.con.close()

    def driver_errors(self) -> tuple[type[BaseException], ...]:
        import psycopg

        return (psycopg.Error,)


def _to_arrow(description: Any, rows: list[tuple]) -> pa.Table:
    """Rows of a psycopg cursor as an Arrow table, typed by the result columns' PostgreSQL types."""
    from psycopg.postgres import types

    arrays = []
    for j, col in enumerate(description):
        info = types.get(col.type_code)
        arrays.append(_array([row[j] for row in rows], _ARROW_TYPES.get(info.name if info else "")))
    return pa.Table.from_arrays(arrays, names=[col.name for col in description])


def _array(values: list, typ: pa.DataType | None) -> pa.Array:
    """One result column; a type without a fixed Arrow counterpart (numeric) is inferred, else float64."""
    if typ is not None:
        return pa.array(values, type=typ)
    try:
        return pa.array(values) if values else pa.array([], pa.float64())
    except (pa.ArrowInvalid, pa.ArrowTypeError):  # e.g. a numeric 'NaN'
        return pa.array([None if v is None else float(v) for v in values], pa.float64())


def _duck_type(row: dict) -> str:
    kind = row["data_type"]
    if kind == "numeric":
        p, s = row["numeric_precision"], row["numeric_scale"]
        return f"DECIMAL({p},{s})" if p is not None else "DECIMAL"
    return _DUCK_TYPES.get(kind, str(row["udt_name"]).upper())


_USERINFO = re.compile(r"^(?P<scheme>[A-Za-z][A-Za-z0-9+.-]*://)(?P<user>[^:@/]*):(?P<password>[^@]*)@")
_QUERY_PASSWORD = re.compile(r"(?i)(password=)([^&]*)")


def _secrets(url: str) -> list[str]:
    """The password(s) a URL holds, read by pattern so that a URL the driver rejects still gives them up."""
    found = [m.group("password") for m in [_USERINFO.match(url)] if m]
    found += [m.group(2) for m in _QUERY_PASSWORD.finditer(url)]
    secrets = {s for s in found if s}
    return sorted(secrets | {unquote(s) for s in secrets}, key=len, reverse=True)


def _redacted(url: str) -> str:
    """``url`` with its password(s) replaced by ***."""
    return _scrub(url, url)


def _scrub(text: str, url: str) -> str:
    """``text`` with every password of ``url`` replaced by *** (for messages that quote the URL)."""
    for secret in _secrets(url):
        text = text.replace(secret, "***")
    return text


def _where(url: str) -> tuple[dict, str]:
    """The URL's connection settings and 'postgresql://user@host:port/database' (no password) for messages."""
    import psycopg
    from psycopg.conninfo import conninfo_to_dict

    try:
        info = conninfo_to_dict(url)
    except psycopg.Error as exc:
        raise BigPanelError(f"bad PostgreSQL URL {_redacted(url)}: {_scrub(first_line(exc), url)}") from None
    user = f"{info['user']}@" if info.get("user") else ""
    host = info.get("host") or "localhost"
    return info, f"postgresql://{user}{host}:{info.get('port') or 5432}/{info.get('dbname') or ''}"


def _resolve(eng: Engine, table: str, where: str) -> tuple[str, str]:
    """(schema, name) of ``table``: an exact name in one schema, or ``schema.name``."""
    listed = eng.arrow("list tables", eng.render("list_tables")).to_pylist()
    pairs = [(r["table_schema"], r["table_name"]) for r in listed]
    named = [p for p in pairs if p[1] == table]
    if len(named) == 1:
        return named[0]
    if len(named) > 1:
        raise BigPanelError(
            f"table {table!r} exists in several schemas of {where} ({', '.join(s for s, _ in named)}): "
            f"name it as schema.table"
        )
    schema, _, name = table.partition(".")
    if name and (schema, name) in pairs:
        return schema, name
    shown = sorted(f"{s}.{n}" if s != "public" else n for s, n in pairs)
    raise BigPanelError(
        f"table {table!r} not found in {where}"
        + (f" (tables: {', '.join(shown)})" if shown else " (it holds no tables)")
    )


def open_postgres(
    url: str, table: str | None, on_step: Callable[[str], None] | None = None
) -> tuple[Engine, Source]:
    """Connect to ``url``, create the view ``bp_source`` over ``table`` and read its schema."""
    try:
        import psycopg
    except ImportError:
        raise BigPanelError("PostgreSQL sources need psycopg: pip install 'bigpanel[postgres]'") from None
    info, where = _where(url)
    if not table:
        raise BigPanelError(f"a PostgreSQL source needs the table to fit: give --table NAME ({where})")
    timeout = {} if "connect_timeout" in info else {"connect_timeout": CONNECT_TIMEOUT}
    try:
        con = psycopg.connect(url, autocommit=True, application_name="bigpanel", **timeout)
    except psycopg.Error as exc:
        raise BigPanelError(f"cannot connect to PostgreSQL at {where}: {_scrub(first_line(exc), url)}") from None
    eng = PostgresEngine(con, on_step=on_step)
    try:
        schema, name = _resolve(eng, table, where)
        eng.execute("source view", eng.render("source_table", table=join([ident(schema), ident(name)], ".")))
        described = eng.arrow("source columns", eng.render("describe_source"), {"schema": schema, "table": name})
    except BaseException:
        eng.close()
        raise
    columns = {row["column_name"]: _duck_type(row) for row in described.to_pylist()}
    if not columns:
        eng.close()
        raise BigPanelError(f"table {table!r} in {where} has no columns")
    return eng, Source(location=where, kind="table", columns=columns)
