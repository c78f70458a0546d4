"""bigpanel: fixed-effects (within) regressions on panels that stay in the database engine."""

from __future__ import annotations  # no module load: the entry point's handler comes first

__all__ = ["fit", "event", "load", "FitResult", "EventResult", "BigPanelError", "__version__"]

# Every name is imported on first use: ``bigpanel --help`` loads no numerics, and the entry
# point (bigpanel.command) installs its interrupt handler after as little import work as can be.
_HOMES = {"fit": "api", "event": "api", "load": "results.saved", "FitResult": "results.result",
          "EventResult": "results.event", "BigPanelError": "errors", "__version__": "version"}


def __getattr__(name: str) -> object:
    """The names of ``__all__``, each imported when first asked for."""
    if name not in _HOMES:
        raise AttributeError(f"module 'bigpanel' has no attribute {name!r}")
    from importlib import import_module

    return getattr(import_module(f".{_HOMES[name]}", __name__), name)
