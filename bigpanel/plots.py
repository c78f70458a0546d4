"""Optional pictures (matplotlib is the ``plot`` extra): loaded only when a plot is asked for."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pyarrow as pa

from .errors import BigPanelError
from .files import atomic_path

if TYPE_CHECKING:
    from .describe import PanelDescription


def pyplot() -> Any:
    """matplotlib's pyplot on the file-only Agg backend, or a one-line error if it is missing."""
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise BigPanelError("--plot needs matplotlib: pip install 'bigpanel[plot]'") from None
    return plt


def save_figure(fig: Any, path: str | Path) -> None:
    """Write a figure as PNG, atomically, and close it."""
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=120, bbox_inches="tight")
    pyplot().close(fig)


def plot_effects(effects: dict[str, pa.Table], path: str | Path) -> None:
    """One histogram per dimension of the estimated effects."""
    plt = pyplot()
    fig, axes = plt.subplots(1, len(effects), figsize=(4.2 * len(effects), 3.4), squeeze=False)
    for ax, (name, table) in zip(axes[0], effects.items()):
        col = [c for c in table.column_names if c.startswith("effect")][-1]
        values = table.column(col).to_numpy()
        ax.hist(values, bins=min(60, max(10, int(np.sqrt(len(values))))), color="#3b7d8c", edgecolor="white")
        ax.set_title(f"{name}: {len(values):,} levels", fontsize=10)
        ax.set_xlabel("estimated effect")
        ax.set_ylabel("levels")
    fig.suptitle("estimated fixed effects", fontsize=11, y=1.03)
    save_figure(fig, path)


def plot_periods(desc: PanelDescription, path: str | Path) -> None:
    """Bar chart of the number of units by number of distinct periods."""
    plt = pyplot()
    periods, units = zip(*desc.period_histogram)
    fig, ax = plt.subplots(figsize=(7, 4), layout="constrained")
    ax.bar(periods, units, width=0.8, color="#3b7d8c")
    ax.xaxis.get_major_locator().set_params(integer=True)
    ax.set_xlabel(f"distinct periods ({desc.time}) per unit")
    ax.set_ylabel(f"units ({desc.id})")
    ax.set_title(f"periods per unit: {desc.units:,} units, {desc.periods:,} periods")
    save_figure(fig, path)
