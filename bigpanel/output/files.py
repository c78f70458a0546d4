"""Files the tool writes appear whole or not at all: written under a temporary name, then renamed.

Outputs are checked before the first pass (:func:`check_output`) and a command's
outputs are committed together (:func:`write_all`).
"""

from __future__ import annotations

import glob
import os
from contextlib import contextmanager
from pathlib import Path
from typing import Callable, Iterator

import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import BigPanelError


PENDING: set[Path] = set()  # temporary files being written, removed by the interrupt handler


def remove_pending() -> None:
    """Delete every temporary file still being written (on an interrupt: nothing is left behind)."""
    for tmp in list(PENDING):
        try:
            tmp.unlink()
        except OSError:
            pass
    PENDING.clear()


@contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a temporary sibling of ``path``; rename it onto ``path`` only if the block succeeds."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    PENDING.add(tmp)
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
        PENDING.discard(tmp)


def write_text(path: str | Path, text: str) -> None:
    """Write a text file atomically."""
    with atomic_path(path) as tmp:
        tmp.write_text(text)


def write_parquet(path: str | Path, table: pa.Table) -> None:
    """Write an Arrow table to Parquet atomically."""
    with atomic_path(path) as tmp:
        pq.write_table(table, tmp)


def input_files(location: str) -> list[Path]:
    """The files a source location names: the file itself, a glob's matches, or a folder's files."""
    if "://" in location:
        return []
    if os.path.isdir(location):
        return [p for p in Path(location).rglob("*") if p.is_file()]
    if glob.has_magic(location):
        return [Path(p) for p in glob.glob(location, recursive=True)]
    return [Path(location)]


def check_output(path: str | Path, role: str, inputs: list[Path], folder: bool = False) -> None:
    """Refuse, before any pass, an output the tool could not write or should not replace.

    Refused: an input file; a symlink, FIFO or device (replacing it would silently
    write elsewhere or turn it into a regular file; write to ``-`` for stdout); a
    folder where a file is wanted and a file where a folder is wanted; a path
    under a file or in a place that cannot be written.
    """
    path = Path(path)
    name = f"{role} {str(path)!r}"
    if path.is_symlink():
        raise BigPanelError(f"{name} is a symbolic link: give the real path (nothing is replaced through a link)")
    if path.exists():
        if any(_same(path, f) for f in inputs):
            raise BigPanelError(f"{name} is an input of this command: it would be overwritten")
        if folder and not path.is_dir():
            raise BigPanelError(f"{name} exists and is not a folder")
        if not folder and path.is_dir():
            raise BigPanelError(f"{name} is a folder: give a file name")
        if not folder and not path.is_file():
            raise BigPanelError(f"{name} is not a regular file (a pipe or device): use '-' to write to stdout")
    parent = path if folder and path.exists() else path.parent
    while not parent.exists():
        parent = parent.parent
    if not parent.is_dir():
        raise BigPanelError(f"{name} cannot be created: {str(parent)!r} is a file, not a folder")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise BigPanelError(f"{name} cannot be written: {str(parent)!r} is not writable")


def _same(a: Path, b: Path) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


def unique_stems(names: list[str], prefix: str) -> dict[str, str]:
    """One file stem per name, ``prefix`` + the name with other characters than letters, digits,
    '-' and '_' made '_'; names that would share a stem get ``_2``, ``_3``... in order."""
    stems: dict[str, str] = {}
    used: set[str] = set()
    for name in names:
        base = prefix + "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in name)
        stem, k = base, 1
        while stem.lower() in used:  # case-insensitive file systems would merge a and A too
            k += 1
            stem = f"{base}_{k}"
        used.add(stem.lower())
        stems[name] = stem
    return stems


def write_all(writers: list[tuple[Path, Callable[[Path], None]]]) -> None:
    """Write every output under a temporary name; rename them into place only when all succeeded.

    A failure (disk full, permission) removes the temporary files and names the
    output that failed; no output of the command appears.
    """
    done: list[tuple[Path, Path]] = []
    try:
        for path, write in writers:
            path.parent.mkdir(parents=True, exist_ok=True)
            tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
            PENDING.add(tmp)
            done.append((tmp, path))
            write(tmp)
    except OSError as exc:
        remove_pending()
        raise BigPanelError(f"cannot write {str(done[-1][1])!r}: {exc.strerror or exc}; nothing was written") from None
    except BaseException:
        remove_pending()
        raise
    for tmp, path in done:
        os.replace(tmp, path)
        PENDING.discard(tmp)


def text_writer(text: str) -> Callable[[Path], None]:
    """A writer for :func:`write_all` that stores ``text``."""
    return lambda path: path.write_text(text)


def parquet_writer(table: pa.Table) -> Callable[[Path], None]:
    """A writer for :func:`write_all` that stores ``table`` as Parquet."""
    return lambda path: pq.write_table(table, path)
