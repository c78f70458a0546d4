"""Files the tool writes appear whole or not at all: written under a temporary name, then renamed."""

from __future__ import annotations

import os
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

import pyarrow as pa
import pyarrow.parquet as pq


@contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a temporary sibling of ``path``; rename it onto ``path`` only if the block succeeds."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def write_text(path: str | Path, text: str) -> None:
    """Write a text file atomically."""
    with atomic_path(path) as tmp:
        tmp.write_text(text)


def write_parquet(path: str | Path, table: pa.Table) -> None:
    """Write an Arrow table to Parquet atomically."""
    with atomic_path(path) as tmp:
        pq.write_table(table, tmp)
