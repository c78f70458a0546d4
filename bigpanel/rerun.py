"""``bigpanel refit``: run a saved fit again from its ``call`` section and report what changed.

Every key of the two results is compared, estimator sections included, except what
describes the run rather than the estimate (``VOLATILE``). Integers, strings and flags must
be equal; two numbers a and b differ when |a - b| > rtol * max(|a|, |b|) and |a - b| > atol
(defaults 1e-9 and 1e-12: well above the run-to-run rounding of an engine's parallel sums,
about 1e-12 relative in DuckDB, and far below any change of the data or the model that
matters; the absolute floor keeps numbers that are rounding noise by nature, such as the
mean of effects normalised to zero, from being reported).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from .errors import BigPanelError
from .results.call import NOT_RECORDED
from .results.result import FitResult
from .results.saved import load

RTOL = 1e-9
ATOL = 1e-12
# what describes the run (time, memory, bytes, the machine's budget, the last iteration's step and the
# rounding left in the demeaned means), the program and the request itself, not the estimate
VOLATILE = {"timings", "bigpanel_version", "call", "solver.seconds", "solver.bytes_to_client",
            "solver.python_budget_bytes", "solver.largest_python_allocation_bytes", "solver.change",
            "solver.max_mean_demeaned"}


@dataclass(frozen=True)
class Difference:
    """One key whose value changed: the saved and the new value, and their relative difference for numbers."""

    key: str
    saved: Any
    now: Any
    relative: float | None = None


def _numbers_differ(a: float, b: float, rtol: float, atol: float) -> bool:
    gap = abs(a - b)
    return gap > atol and gap > rtol * max(abs(a), abs(b))


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def differences(saved: Any, now: Any, rtol: float = RTOL, atol: float = ATOL, key: str = "",
                skip: frozenset[str] = frozenset()) -> list[Difference]:
    """Every leaf where ``now`` differs from ``saved`` (nested dicts and lists walked; see the module docstring)."""
    if key in VOLATILE or key in skip:
        return []
    if isinstance(saved, dict) and isinstance(now, dict):
        out = []
        for name in list(saved) + [n for n in now if n not in saved]:
            sub = f"{key}.{name}" if key else str(name)
            if name not in saved or name not in now:
                if sub not in VOLATILE and sub not in skip:
                    out.append(Difference(sub, saved.get(name), now.get(name)))
                continue
            out += differences(saved[name], now[name], rtol, atol, sub, skip)
        return out
    if isinstance(saved, list) and isinstance(now, list) and len(saved) == len(now):
        pairs = enumerate(zip(saved, now))
        return [d for i, (a, b) in pairs for d in differences(a, b, rtol, atol, f"{key}[{i}]", skip)]
    if _is_number(saved) and _is_number(now) and (isinstance(saved, float) or isinstance(now, float)):
        if math.isfinite(saved) and math.isfinite(now) and _numbers_differ(saved, now, rtol, atol):
            return [Difference(key, saved, now, abs(saved - now) / max(abs(saved), abs(now)))]
        return []
    return [] if saved == now else [Difference(key, saved, now)]


def rerun_arguments(saved: FitResult, source: str | None, allow_remote: bool) -> tuple[object, dict[str, Any]]:
    """The source and keyword arguments that run ``saved`` again: its recorded call, with ``source`` (when
    given) as the source and ``allow_remote`` as given now (a file never opts in to the network by itself)."""
    call = saved.call
    if not call:
        raise BigPanelError("this fit was saved without its call (an older bigpanel): run it again with bigpanel fit")
    args = dict(call["arguments"])
    unrecorded = [name for name, value in args.items() if value == NOT_RECORDED]
    if unrecorded and not (source is not None and unrecorded == ["table"]):
        raise BigPanelError(f"the fit's argument {unrecorded[0]!r} was not a JSON value and was not recorded: "
                            "it cannot be run again from the file")
    if source is None and call["source"] is None:
        raise BigPanelError(f"this fit read a {call['source_kind']} held in memory: give --source with a file, "
                            "database or URL that holds the same rows")
    if unrecorded:
        args["table"] = None
    args["allow_remote"] = allow_remote
    return (source if source is not None else call["source"]), args


def refit(path: str | Path, source: str | None = None, allow_remote: bool = False, rtol: float = RTOL,
          atol: float = ATOL, on_step: Callable[[str], None] | None = None) -> tuple[FitResult, list[Difference]]:
    """Run the fit saved in ``path`` again (see :func:`rerun_arguments`); the new result and the differences."""
    from .api import fit

    saved = load(path)
    where, args = rerun_arguments(saved, source, allow_remote)
    now = fit(where, **args, on_step=on_step)
    skip = frozenset({"source"}) if source is not None else frozenset()
    return now, differences(saved.to_dict(), now.to_dict(), rtol, atol, skip=skip)
