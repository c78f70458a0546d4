"""bigpanel: fixed-effects (within) regressions on panels that stay in the database engine."""

__version__ = "0.1.0"

from .errors import BigPanelError  # noqa: E402
from .estimate import fit  # noqa: E402
from .results import FitResult  # noqa: E402

__all__ = ["fit", "FitResult", "BigPanelError", "__version__"]
