"""The event-study figure: estimates and 95% intervals against event time (matplotlib, the
``plot`` extra, loaded only when a plot is asked for)."""

from __future__ import annotations

from pathlib import Path

from ..results.event import EventEstimate, EventResult
from .plots import pyplot, save_figure

POST = "#3b7d8c"  # imputed effects (the colour of the package's other plots)
LEAD = "#c46a2f"  # leads of the pre-trend fit


def _draw(ax: object, points: list[EventEstimate], colour: str, marker: str, label: str, hollow: bool) -> None:
    shown = [e for e in points if e.estimate is not None]
    if not shown:
        return
    ks = [e.k for e in shown]
    with_ci = [e for e in shown if e.ci_low is not None]
    ax.vlines([e.k for e in with_ci], [e.ci_low for e in with_ci], [e.ci_high for e in with_ci], color=colour,
              linewidth=2.2, alpha=0.45)
    ax.plot(ks, [e.estimate for e in shown], linestyle="none", marker=marker, markersize=6.5, color=colour,
            markerfacecolor="white" if hollow else colour, markeredgewidth=1.6, label=label)


def plot_event(res: EventResult, path: str | Path) -> None:
    """Estimates against event time: imputed effects (filled circles) from the onset on, the
    pre-trend fit's leads (hollow squares) before it, each with its 95% interval as a bar; a
    zero line, the onset marked between -1 and 0, the overall average in the title."""
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(7.4, 4.3), layout="constrained")
    leads = [e for e in res.event_time if e.estimated_by != "imputation"]
    post = [e for e in res.event_time if e.estimated_by == "imputation"]
    ax.axhline(0.0, color="#4d4d4d", linewidth=0.9)
    ax.axvline(-0.5, color="#8c8c8c", linewidth=1.0, linestyle=(0, (4, 3)))
    _draw(ax, leads, LEAD, "s", "before treatment (pre-trend fit on untreated rows)", hollow=True)
    _draw(ax, post, POST, "o", "imputed effect", hollow=False)
    ax.text(-0.4, 0.97, "treatment starts", transform=ax.get_xaxis_transform(), fontsize=8, color="#6b6b6b",
            va="top")
    ks = [e.k for e in res.event_time]
    if ks:
        step = max(1, len(ks) // 16 + 1)
        ax.set_xticks(ks[::step])
    design = res.design
    ax.set_xlabel(f"periods since {design['first_treated']} (periods of {design['time']})")
    ax.set_ylabel(f"effect on {res.outcome}")
    ax.grid(True, axis="y", alpha=0.25)
    ax.legend(fontsize=8, frameon=False, loc="best")
    if res.overall is not None and res.overall.estimate is not None:
        ax.set_title(f"event study by imputation; average over all {res.overall.rows:,} treated rows "
                     f"{res.overall.estimate:.4g} (s.e. {res.overall.std_error:.2g})", fontsize=9.5)
    save_figure(fig, path)
