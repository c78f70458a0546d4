"""bigpanel: fixed-effects (within) regressions on panels that stay in the database engine."""

from __future__ import annotations

from typing import Any

__version__ = "0.1.0"

from .errors import BigPanelError  # noqa: E402

__all__ = ["fit", "FitResult", "BigPanelError", "__version__"]


def __getattr__(name: str) -> Any:
    """``fit`` and ``FitResult`` are imported on first use, so that ``bigpanel --help`` loads no numerics."""
    if name == "fit":
        from .estimators.within import fit

        return fit
    if name == "FitResult":
        from .results.result import FitResult

        return FitResult
    raise AttributeError(f"module 'bigpanel' has no attribute {name!r}")
