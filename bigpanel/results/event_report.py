"""Terminal rendering of an event study (rich), and the same report as plain text."""

from __future__ import annotations

import io

from rich import box
from rich.console import Console, Group
from rich.table import Table
from rich.text import Text

from .event import EventEstimate, EventResult


def _n(v: int | float) -> str:
    return f"{int(v):,}"


def _g(v: float | None, digits: int = 5) -> str:
    return "" if v is None else f"{v:.{digits}g}"


def _p(p: float | None) -> str:
    if p is None:
        return ""
    return "<1e-16" if p < 1e-16 else f"{p:.4f}" if p >= 1e-4 else f"{p:.1e}"


def _header(res: EventResult) -> Text:
    d = res.design
    head = Text()
    head.append("event study by imputation  ", style="bold")
    head.append(Text(res.outcome, style="bold magenta"))
    controls = ", ".join(res.untreated_fit["controls"]) or "no controls"
    effects = ", ".join([d["unit"], d["time"], *d["fixed_effects"]])
    head.append(f"\nuntreated outcome fitted on effects of {effects}; {controls}", style="dim")
    head.append(f"\nevent time: {d['event_time_unit']} since {d['first_treated']}", style="dim")
    return head


def _row(table: Table, e: EventEstimate) -> None:
    table.add_row("all" if e.k is None else str(e.k), _g(e.estimate, 6), _g(e.std_error, 4), _g(e.ci_low),
                  _g(e.ci_high), _n(e.rows), e.estimated_by)


def _estimates(res: EventResult) -> Table:
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, header_style="bold")
    for col in ("k", "estimate", "s.e.", "95% low", "95% high", "rows", "from"):
        table.add_column(col, justify="left" if col == "from" else "right")
    for e in res.event_time:
        _row(table, e)
    if res.overall is not None:
        table.add_section()
        _row(table, res.overall)
    return table


def _line(lines: Text, label: str, text: str, style: str = "bold") -> None:
    lines.append(f"\n{label:<10}", style=style)
    lines.append(text)


def _rows(res: EventResult, lines: Text) -> None:
    r = res.rows
    text = (f"{_n(r['untreated'])} untreated rows fitted, {_n(r['imputed'])} of {_n(r['treated'])} treated rows "
            f"imputed ({_n(r['beyond_horizon'])} beyond the horizon, in the overall average only)")
    if r["dropped_incomplete"]:
        cols = ", ".join(f"{c} {_n(v)}" for c, v in r["incomplete"].items())
        text += f"; {_n(r['dropped_incomplete'])} rows with a missing or unusable value ({cols})"
    if r["after_filter"] != r["source"]:
        text += f"; {_n(r['source'] - r['after_filter'])} outside the filter"
    _line(lines, "rows", text)
    if r["excluded"]:
        _line(lines, "excluded", "; ".join(f"{why}: {_n(v)}" for why, v in r["excluded"].items()),
              style="bold yellow")
    p = res.panel
    _line(lines, "panel", f"{_n(p['units'])} units, {_n(p['never_treated'])} never treated, {_n(p['cohorts'])} "
                          f"cohorts")


def _tests(res: EventResult, lines: Text) -> None:
    v = res.variance
    _line(lines, "variance", f"conservative imputation variance clustered by {v['cluster']} ({_n(v['clusters'])} "
                             "clusters); treated rows' residuals taken around their cohort x event-time average")
    pt = res.pretrend
    if pt is not None:
        _line(lines, "pre-trend", f"Wald chi2({pt['df']}) = {pt['statistic']:.4g}, p {_p(pt['p_value'])}: leads "
                                  f"{pt['leads'][0]}..{pt['leads'][-1]} fitted on the untreated rows")
    fit = res.untreated_fit
    if fit["coefficients"]:
        _line(lines, "controls", ", ".join(f"{name} {_g(b, 5)}" for name, b in fit["coefficients"].items()))
    s = res.solver
    _line(lines, "solver", f"{fit['strategy']}; {fit['iterations']} + {s['implied_weights']['iterations']} "
                           f"iterations (fit, implied weights); {s['raw_passes']} passes over the rows; "
                           f"{s['seconds']:.2f} s")


def event_renderable(res: EventResult) -> Group:
    """The report: the estimates by event time, then lines on rows, variance, tests and solver."""
    lines = Text()
    for section in (_rows, _tests):
        section(res, lines)
    for w in res.warnings:
        _line(lines, "warning", w, style="bold red")
    return Group(_header(res), _estimates(res), lines)


def render_event_text(res: EventResult, width: int = 100) -> str:
    """The report as plain text."""
    buf = io.StringIO()
    Console(file=buf, width=width, no_color=True, highlight=False).print(event_renderable(res))
    return buf.getvalue()
