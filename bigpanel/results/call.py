"""What a fit was asked for, as JSON: every argument ``bigpanel.fit`` received but its callback.

The record is generic (whatever arguments ``fit`` and the estimators take, now or later, are
kept by name), so ``bigpanel refit`` can pass them back. The source is kept as its location
without credentials (:func:`bigpanel.engines.remote.redacted`); a panel the program held in
memory (a DataFrame, a DuckDB connection) has no location, so its fit cannot be re-run from
the file alone (``rerunnable`` is false and ``refit --source`` names a file to read instead).
"""

from __future__ import annotations

import math
from pathlib import PurePath
from typing import Any

from ..engines.inprocess import kind_of
from ..engines.registry import is_postgres
from ..engines.remote import redacted, scheme

NOT_RECORDED = "<not recorded: not a JSON value>"


def plain(value: Any) -> tuple[Any, bool]:
    """``value`` as a JSON value, and whether it is exactly that value (so that it can be passed again)."""
    if value is None or isinstance(value, (bool, int, str)):
        return value, True
    if isinstance(value, float):
        return (value, True) if math.isfinite(value) else (str(value), False)
    if isinstance(value, PurePath):
        return str(value), True
    if isinstance(value, (list, tuple)):
        items = [plain(v) for v in value]
        return [v for v, _ in items], all(ok for _, ok in items)
    if isinstance(value, dict):
        items = {str(k): plain(v) for k, v in value.items()}
        return {k: v for k, (v, _) in items.items()}, all(ok for _, ok in items.values())
    if hasattr(value, "item") and getattr(value, "shape", None) == ():  # a numpy scalar
        return plain(value.item())
    return NOT_RECORDED, False


def source_kind(source: object) -> str:
    """``file`` (a local path or glob), ``remote`` (a URL read through httpfs or Spark), ``postgresql``,
    or the kind of an in-process panel (``pandas DataFrame``, ``DuckDB connection``, ...)."""
    held = kind_of(source)
    if held is not None:
        return held
    if is_postgres(str(source)):
        return "postgresql"
    return "remote" if scheme(str(source)) else "file"


def call_record(given: dict[str, Any]) -> dict[str, Any]:
    """``given`` (``fit``'s arguments, with its ``options`` dict merged in) as the saved ``call`` section:
    ``source`` (location without credentials, or None), ``source_kind``, ``arguments`` and ``rerunnable``."""
    args = dict(given)
    source = args.pop("source")
    args.update(args.pop("options", None) or {})
    kind = source_kind(source)
    recorded = {name: plain(value) for name, value in args.items()}
    return {
        "source": None if kind_of(source) is not None else redacted(str(source)),
        "source_kind": kind,
        "arguments": {name: value for name, (value, _) in recorded.items()},
        "rerunnable": kind_of(source) is None and all(ok for _, ok in recorded.values()),
    }
