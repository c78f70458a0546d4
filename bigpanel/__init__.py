"""bigpanel: fixed-effects (within) regressions on panels that stay in the database engine."""

from __future__ import annotations

from typing import Any

from .errors import BigPanelError
from .version import __version__

__all__ = ["fit", "event", "FitResult", "EventResult", "BigPanelError", "__version__"]


def __getattr__(name: str) -> Any:
    """``fit``, ``event`` and their results are imported on first use, so that ``bigpanel --help`` loads no numerics."""
    if name == "fit":
        from .api import fit

        return fit
    if name == "event":
        from .api import event

        return event
    if name == "EventResult":
        from .results.event import EventResult

        return EventResult
    if name == "FitResult":
        from .results.result import FitResult

        return FitResult
    raise AttributeError(f"module 'bigpanel' has no attribute {name!r}")
