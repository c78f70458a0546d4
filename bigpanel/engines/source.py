"""Open a panel where it lies in DuckDB: Parquet files or globs, CSV files, DuckDB tables.

Nothing is copied: the source becomes the temporary view ``bp_source`` over the
files, and every later pass reads through it.
"""

from __future__ import annotations

import csv
import glob as globlib
import gzip
import os
import re
from dataclasses import dataclass

import duckdb

from ..errors import BigPanelError
from ..sql.text import Fragment, ident, join, literal, render
from .base import first_line
from .remote import is_remote, redacted

PARQUET_SUFFIXES = (".parquet", ".parq", ".pq")
_CSV = (".csv", ".tsv", ".csv.gz", ".tsv.gz", ".txt")
_DATABASE = (".duckdb", ".ddb", ".db")


@dataclass(frozen=True)
class Source:
    """Where the panel lives and what it holds."""

    location: str
    kind: str  # "parquet", "csv" or "table"
    columns: dict[str, str]  # column name -> DuckDB type, in source order


def _kind_of(location: str, table: str | None) -> str:
    low = location.lower().split("?", 1)[0] if is_remote(location) else location.lower()
    if table is not None and low.endswith(_CSV + PARQUET_SUFFIXES):
        raise BigPanelError(
            f"--table names a table inside a database file; {location} is a file of its own: drop --table"
        )
    if table is not None:
        return "table"
    if low.endswith(PARQUET_SUFFIXES) or os.path.isdir(location):
        return "parquet"
    if low.endswith(_CSV):
        return "csv"
    if low.endswith(_DATABASE):
        raise BigPanelError(f"{location} is a database file: name the table with --table")
    raise BigPanelError(
        f"cannot tell the format of {location}: use a .parquet, .csv or database file (with --table)"
    )


def parquet_files(location: str) -> list[str]:
    """The Parquet files of a file, a folder (searched recursively) or a glob, sorted; none is an error."""
    if os.path.isdir(location):
        pattern = os.path.join(location, "**", "*.parquet")
        files = sorted(globlib.glob(pattern, recursive=True))
        if not files:
            raise BigPanelError(f"folder {location} holds no .parquet files")
        return files
    if globlib.has_magic(location):
        files = sorted(globlib.glob(location, recursive=True))
        if not files:
            raise BigPanelError(f"no file matches {location}")
        return files
    if not os.path.exists(location):
        raise BigPanelError(f"file not found: {location}")
    return [location]


def _check_not_empty(path: str) -> None:
    if os.path.getsize(path) == 0:
        raise BigPanelError(f"file {path} is empty")


def _check_header(path: str, delim: str) -> None:
    """A CSV header naming a column twice is refused (the reader would rename the second silently)."""
    opener = gzip.open if path.lower().endswith(".gz") else open
    try:
        with opener(path, "rt", newline="", encoding="utf-8", errors="replace") as fh:
            header = next(csv.reader(fh, delimiter=delim), [])
    except (OSError, csv.Error):
        return  # the reader's own error names the problem
    names = [h.strip() for h in header]
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise BigPanelError(f"CSV {path}: the header names column {repeated[0]!r} more than once; rename one of them")


def _check_same_schema(con: duckdb.DuckDBPyConnection, files: list[str], paths: Fragment) -> None:
    """All files of a glob must hold the same columns (names and types), or nothing is read."""
    rows = con.execute(render("parquet_schemas", paths=paths)).fetchall()
    schemas: dict[str, list[tuple[str, str]]] = {}
    for file_name, name, kind in rows:
        schemas.setdefault(file_name, []).append((name, kind))
    first = files[0]
    for f in files[1:]:
        if schemas.get(f) != schemas.get(first):
            mine, theirs = dict(schemas.get(f, [])), dict(schemas.get(first, []))
            diff = sorted(set(mine.items()) ^ set(theirs.items()))
            detail = ", ".join(f"{n} ({t})" for n, t in diff[:4])
            raise BigPanelError(f"Parquet files differ in their columns: {f} vs {first} ({detail})")


def _delimiter(given: str | None, location: str) -> str:
    """The CSV field separator: ``given`` (one character, or ``tab``), else tab for .tsv and comma."""
    if given is None:
        return "\t" if location.lower().endswith((".tsv", ".tsv.gz")) else ","
    given = "\t" if given in ("tab", "\\t") else given
    if len(given) != 1:
        raise BigPanelError(f"--delimiter {given!r} must be one character (or 'tab')")
    return given


def _check_csv_header(location: str, names: list[str], delimiter: str | None) -> None:
    """Refuse a CSV read with the wrong separator (one column whose name holds ; tab or |) or
    without a header row (more than half the column names are numbers or dates)."""
    if len(names) == 1 and delimiter is None:
        other = next((c for c in ";\t|" if c in names[0]), None)
        if other is not None:
            shown = "tab" if other == "\t" else other
            raise BigPanelError(f"{location} reads as one column; its fields look {shown!r}-separated: "
                                f"give --delimiter {shown!r}")
    if 2 * sum(_is_number(name) for name in names) > len(names):
        raise BigPanelError(f"{location}: the first row ({', '.join(names[:4])}...) looks like data, not a header; "
                            "add a header row naming the columns")


def _is_number(text: str) -> bool:
    """A number or an ISO date: what a data row holds and a header rarely does."""
    try:
        float(text)
    except ValueError:
        return bool(re.fullmatch(r"\d{4}-\d{2}-\d{2}.*", text.strip()))
    return True


def open_source(
    con: duckdb.DuckDBPyConnection, location: str, table: str | None = None, delimiter: str | None = None
) -> Source:
    """Create the view ``bp_source`` over ``location`` and read its schema.

    ``delimiter`` separates a CSV file's fields (default: tab for .tsv, else comma).
    """
    location = str(location)
    kind = _kind_of(location, table)
    try:
        if kind == "parquet":
            files = [location] if is_remote(location) else parquet_files(location)
            for f in files if not is_remote(location) else []:
                _check_not_empty(f)
            paths = Fragment("[" + join([literal(f) for f in files], ", ") + "]")
            if len(files) > 1:
                _check_same_schema(con, files, paths)
            con.execute(render("source_parquet", paths=paths)).fetchall()
        elif kind == "csv":
            if not os.path.exists(location):
                raise BigPanelError(f"file not found: {location}")
            _check_not_empty(location)
            delim = _delimiter(delimiter, location)
            try:
                con.execute(render("source_csv", path=literal(location), delim=literal(delim))).fetchall()
            except duckdb.Error as exc:
                raise BigPanelError(
                    f"cannot read CSV {location}: some rows do not have the header's number of fields, or the "
                    f"file is not {'tab' if delim == chr(9) else 'comma'}-separated ({first_line(exc)})"
                ) from None
        else:
            if not os.path.exists(location):
                raise BigPanelError(f"database file not found: {location}")
            con.execute(render("attach_database", path=literal(location))).fetchall()
            names = [r[0] for r in con.execute(render("list_tables")).fetchall()]
            if table not in names:
                raise BigPanelError(
                    f"table {table!r} not found in {location}"
                    + (f" (tables: {', '.join(sorted(names))})" if names else " (it holds no tables)")
                )
            con.execute(render("source_table", table=ident(str(table)))).fetchall()
        described = con.execute(render("describe_source")).fetchall()
    except BigPanelError:
        raise
    except duckdb.Error as exc:
        raise BigPanelError(f"cannot read {redacted(location)}: {first_line(exc)}") from None
    columns = {row[0]: row[1] for row in described}
    if not columns:
        raise BigPanelError(f"{location} has no columns")
    if kind == "csv":
        _check_csv_header(location, list(columns), delimiter)
        _check_header(location, _delimiter(delimiter, location))
    return Source(location=redacted(location), kind=kind, columns=columns)
