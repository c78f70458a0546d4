"""Optional pictures (matplotlib is the ``plot`` extra): loaded only when a plot is asked for."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa

from ..errors import BigPanelError
from .files import atomic_path


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


def over_time(table: pa.Table, period: str | None = None) -> bool:
    """Whether an effect's levels are periods: one key column of dates or timestamps, or the
    column named as the period (``period``, integers such as years or week numbers). Such an
    effect is drawn as a line against its levels; any other as a histogram of its values."""
    if table.num_columns != 3:
        return False
    kind = table.column(0).type
    return pa.types.is_date(kind) or pa.types.is_timestamp(kind) or table.column_names[0] == period


def plot_effects(effects: dict[str, pa.Table], path: str | Path, period: str | None = None) -> None:
    """One panel per dimension of the estimated effects: a line against time for an effect whose
    levels are periods (:func:`over_time`), else a histogram; tick labels thinned so they do not
    overlap."""
    plt = pyplot()
    from matplotlib.ticker import MaxNLocator

    fig, axes = plt.subplots(1, len(effects), figsize=(4.6 * len(effects), 3.6), squeeze=False, layout="constrained")
    for ax, (name, table) in zip(axes[0], effects.items()):
        col = [c for c in table.column_names if c.startswith("effect")][-1]
        values = table.column(col).to_numpy()
        if over_time(table, period):
            order = np.argsort(table.column(0).to_numpy())
            ax.plot(table.column(0).to_numpy()[order], values[order], color="#3b7d8c", linewidth=1.2)
            ax.set_xlabel(table.column_names[0])
            ax.set_ylabel("estimated effect")
            for label in ax.get_xticklabels():
                label.set_rotation(30)
                label.set_horizontalalignment("right")
        else:
            ax.hist(values, bins=min(60, max(10, int(np.sqrt(len(values))))), color="#3b7d8c", edgecolor="white")
            ax.set_xlabel("estimated effect")
            ax.set_ylabel("levels")
        ax.xaxis.set_major_locator(MaxNLocator(nbins=6))
        ax.set_title(f"{name}: {len(values):,} levels", fontsize=10)
    fig.suptitle("estimated fixed effects", fontsize=11)
    save_figure(fig, path)
