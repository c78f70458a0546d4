"""The notebook display of a fit: one compact HTML table.

A caption with the estimator and the model, one row per term (estimate, standard error, t,
p, the 95% interval), and beneath it, spanning the table, the rows used, the effects, the
variance, the R-squared and how the solve went; warnings in full. Every text from the data
(terms, column names, warnings) is escaped.
"""

from __future__ import annotations

from html import escape
from typing import TYPE_CHECKING

from .report import p_text

if TYPE_CHECKING:
    from .result import FitResult

CELL = 'style="text-align:right;padding:0 0.6em"'
NOTE = 'style="text-align:left;padding:0.2em 0.6em;font-size:90%"'


def _term_rows(res: FitResult) -> list[str]:
    rows = []
    for i, name in enumerate(res.names):
        cells = [f"{res.coef[i]:.6g}", f"{res.std_error[i]:.4g}", f"{res.t[i]:.2f}", p_text(res.p[i]),
                 f"{res.ci_low[i]:.5g} to {res.ci_high[i]:.5g}"]
        rows.append(f'<tr><th style="text-align:left;padding:0 0.6em">{escape(name)}</th>'
                    + "".join(f"<td {CELL}>{escape(c)}</td>" for c in cells) + "</tr>")
    return rows


def _facts(res: FitResult) -> list[str]:
    """The lines under the terms: sample, effects, variance, fit, solver, dropped regressors, warnings."""
    inf, rows = res.inference, res.rows
    facts = [f"{rows.used:,} rows used of {rows.source:,}"
             + (f" ({rows.source - rows.used:,} dropped: see the report)" if rows.used != rows.source else "")]
    if res.fe:
        label = "effects" if res.estimator == "within" else "unit"
        facts.append(f"{label}: " + ", ".join(f"{d.name} ({d.levels:,} levels)" if d.levels is not None else d.name
                                              for d in res.fe))
    variance = inf.kind if inf.kind == "classical" else inf.kind.upper()
    if inf.clusters:
        variance += " by " + ", ".join(f"{c} ({g:,} clusters)" for c, g in inf.clusters.items())
    facts.append(f"variance: {variance}; t on {inf.df:,.0f} df")
    if res.estimator == "within":
        facts.append(f"R-squared {res.fit.r2_full_model:.4f} with the effects, {res.fit.r2_within:.4f} within")
    else:
        facts.append(f"R-squared {res.fit.r2_transformed:.4f} of the transformed regression")
    state = "converged" if res.solver.converged else "NOT CONVERGED"
    facts.append(f"{res.solver.path}; {state}; {res.solver.raw_passes} passes over the rows")
    facts += [f"dropped {d['name']}: {d['reason']}" for d in res.dropped]
    facts += [f"warning: {w}" for w in res.warnings]
    return facts


def fit_html(res: FitResult) -> str:
    """The fit as an HTML table (see the module docstring)."""
    head = "".join(f"<th {CELL}>{h}</th>" for h in ("estimate", "s.e.", "t", "p", "95% interval"))
    caption = escape(f"{res.estimator}: {res.formula}")
    notes = "".join(f'<tr><td colspan="6" {NOTE}>{escape(f)}</td></tr>' for f in _facts(res))
    return (f'<table class="bigpanel-fit"><caption style="text-align:left;font-weight:bold">{caption}</caption>'
            f"<thead><tr><th></th>{head}</tr></thead><tbody>{''.join(_term_rows(res))}</tbody>"
            f"<tfoot>{notes}</tfoot></table>")
