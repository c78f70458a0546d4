"""Side-by-side tables of saved fits: one grid of cells, rendered as Markdown, LaTeX or rich, and
the same numbers as machine-readable CSV.

``load_fits`` reads results written by ``FitResult.to_json()``; ``build_table``
turns them into a :class:`ModelTable` (header, coefficient rows, footer rows,
notes, every cell already a string; and one record per model and term for CSV);
each renderer only lays that out. A standard error is shown to two significant
digits and its estimate to the same decimal place, always in plain decimal
notation (common practice in published tables).
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from typing import Any, Callable

from rich import box
from rich.table import Table
from rich.text import Text

from ..errors import BigPanelError

STARS = ((0.01, "***"), (0.05, "**"), (0.1, "*"))
VCOV_NAMES = {"classical": "classical", "hc1": "HC1", "cr1": "CR1"}
R2_DECIMALS = 3
TIMES = " \u00d7 "  # between cluster columns; LaTeX gets $\times$
LATEX_SPECIAL = {
    "\u00d7": r"$\times$",
    "\\": r"\textbackslash{}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
    "<": r"\textless{}",
    ">": r"\textgreater{}",
    "|": r"\textbar{}",
    **{ch: "\\" + ch for ch in "_%&#${}"},
}
MISSING = "n/a"

Row = list[str]


@dataclass(frozen=True)
class ModelTable:
    """The cells of a model table; every row is a label followed by one cell per fit.

    ``body`` alternates an estimate row (label: the regressor) and a standard
    error row (label: empty), followed by a row of wild bootstrap p-values in
    brackets when some fit has them; ``footer`` holds N, the effects, the clusters per
    cluster column, the variance type, each endogenous regressor's first-stage
    partial F (IV fits), the full-model and within R-squared and, when they
    differ, the outcome, estimator (2SLS or LIML for IV fits) and weights. ``records`` has one
    dict per model and term with the unrounded numbers (the CSV output).
    """

    header: Row
    body: list[Row]
    footer: list[Row]
    notes: list[str]
    records: list[dict[str, Any]]

    def sections(self) -> list[list[Row]]:
        """Header, body and footer, in the order they are drawn."""
        return [[self.header], self.body, self.footer]


def load_fits(paths: list[str]) -> list[dict[str, Any]]:
    """Read saved results (``bigpanel fit ... --save FILE.json``); a bad file raises ``BigPanelError``."""
    from ..results.saved import read_document  # here: the CLI imports this module at start, light

    return [read_document(path) for path in paths]


def decimals_for(error: float | None, significant: int = 2) -> int:
    """Decimal places that show ``error`` to ``significant`` significant digits (at least 0)."""
    if error is None or error == 0 or not math.isfinite(error):
        return significant
    return max(0, significant - 1 - math.floor(math.log10(abs(error))))


def format_number(value: float | None, decimals: int) -> str:
    """``value`` with ``decimals`` decimals in plain notation; ``n/a`` when missing."""
    if value is None:
        return MISSING
    return f"{value:.{decimals}f}"


def _stars(p: float | None) -> str:
    if p is None:
        return ""
    return next((mark for cut, mark in STARS if p < cut), "")


def _first_seen(groups: list[list[str]]) -> list[str]:
    return list(dict.fromkeys(name for group in groups for name in group))


def _variance(fit: dict[str, Any]) -> str:
    """``classical``, ``HC1`` or ``CR1: store \u00d7 week`` (the cluster columns)."""
    vcov = fit.get("vcov") or {}
    kind = vcov.get("type", "")
    name = VCOV_NAMES.get(kind, kind)
    columns = list(vcov.get("clusters_per_column") or {})
    return f"{name}: " + TIMES.join(columns) if kind == "cr1" and columns else name


def _coefficient_rows(fits: list[dict[str, Any]], stars: bool, digits: int) -> list[Row]:
    rows = []
    for name in _first_seen([list(f["coefficients"]) for f in fits]):
        estimates, errors = [name], [""]
        for fit in fits:
            coef = fit["coefficients"].get(name)
            if coef is None:
                estimates.append("")
                errors.append("")
                continue
            mark = _stars(coef.get("p_value")) if stars else ""
            places = decimals_for(coef.get("std_error"), digits)
            estimates.append(format_number(coef.get("estimate"), places) + mark)
            errors.append(f"({format_number(coef.get('std_error'), places)})")
        rows += [estimates, errors] + _bootstrap_row(fits, name)
    return rows


def _bootstrap_row(fits: list[dict[str, Any]], name: str) -> list[Row]:
    """The wild bootstrap p-values of coefficient ``name`` in brackets, when some fit has one."""
    values = [(f["coefficients"].get(name) or {}).get("bootstrap_p_value") for f in fits]
    if all(v is None for v in values):
        return []
    return [["", *("" if v is None else f"[{v:.3f}]" for v in values)]]


def _footer_rows(fits: list[dict[str, Any]]) -> list[Row]:
    effects = [[d["name"] for d in f.get("fixed_effects") or []] for f in fits]
    clusters = [(f.get("vcov") or {}).get("clusters_per_column") or {} for f in fits]
    rows = [["N", *(f"{int(f['nobs']):,}" for f in fits)]]
    rows += [[f"{name} effects", *("yes" if name in have else "" for have in effects)] for name in _first_seen(effects)]
    rows += [[f"clusters: {name}", *(f"{c[name]:,}" if name in c else "" for c in clusters)]
             for name in _first_seen([list(c) for c in clusters])]
    rows.append(["variance", *map(_variance, fits)])
    stages = [f.get("first_stage") or {} for f in fits]
    rows += [[f"first-stage F: {name}", *(f"{fs[name]['partial_f']:.1f}" if name in fs else "" for fs in stages)]
             for name in _first_seen([list(fs) for fs in stages])]
    for label, key in (("R-squared, full model", "r2_full_model"), ("within R-squared", "r2_within")):
        values = [(f.get("fit") or {}).get(key) for f in fits]
        if any(v is not None for v in values):
            rows.append([label, *(format_number(v, R2_DECIMALS) if v is not None else "" for v in values)])
    deviance_r2 = [(f.get("poisson") or {}).get("deviance_r2") for f in fits]  # the Poisson fit's pseudo R-squared
    if any(v is not None for v in deviance_r2):
        rows.append(["deviance R-squared",
                     *(format_number(v, R2_DECIMALS) if v is not None else "" for v in deviance_r2)])
    for key, usual in (("outcome", fits[0].get("outcome")), ("estimator", "within"), ("weights", None)):
        values = [(f.get("instrumental_variables") or {}).get("method") or f.get(key) if key == "estimator"
                  else f.get(key) for f in fits]
        if any(value != usual for value in values):
            rows.append([key, *(str(value or "") for value in values)])
    return rows


def _records(fits: list[dict[str, Any]], header: Row) -> list[dict[str, Any]]:
    """One dict per model and term: the unrounded numbers and the model's facts, for CSV."""
    out = []
    for label, fit in zip(header[1:], fits):
        vcov, stats = fit.get("vcov") or {}, fit.get("fit") or {}
        for term, coef in fit["coefficients"].items():
            out.append({
                "model": label, "outcome": fit.get("outcome"), "term": term,
                **{key: coef.get(key) for key in ("estimate", "std_error", "t", "p_value", "ci_low", "ci_high",
                                                  "bootstrap_p_value", "bootstrap_ci_low", "bootstrap_ci_high")},
                "nobs": fit["nobs"], "variance": vcov.get("type"),
                "cluster": vcov.get("cluster"), "clusters": vcov.get("clusters"),
                "r2_full_model": stats.get("r2_full_model"), "r2_within": stats.get("r2_within"),
                "estimator": fit.get("estimator"), "weights": fit.get("weights"),
            })
    return out


def build_table(
    fits: list[Any],
    stars: bool = False,
    digits: int = 2,
    labels: list[str] | None = None,
) -> ModelTable:
    """One column per fit (headed ``(1)``, ``(2)``, ... or ``labels``): each regressor's estimate
    with its standard error in parentheses beneath, blank where a fit lacks it, then the footer.
    ``digits`` is the number of significant digits of each standard error; the estimate
    above it has as many decimals.

    With ``stars``, estimates get *** for p < 0.01, ** for p < 0.05 and * for p < 0.1.
    ``fits`` are saved documents or results (``bigpanel.fit``, ``bigpanel.load``).
    """
    fits = [fit.to_dict() if hasattr(fit, "to_dict") else fit for fit in fits]
    if not fits:
        raise BigPanelError("no fits to tabulate: give at least one saved result")
    if labels is not None and len(labels) != len(fits):
        raise BigPanelError(f"{len(labels)} column labels for {len(fits)} fits")
    if digits < 1:
        raise BigPanelError(f"--digits must be 1 or more, not {digits}")
    header = ["", *(labels if labels is not None else (f"({i})" for i in range(1, len(fits) + 1)))]
    notes = ["standard errors in parentheses"]
    if any("bootstrap_p_value" in c for f in fits for c in f["coefficients"].values()):
        notes.append("wild cluster bootstrap p-values in brackets (restricted, null slope = 0)")
    if stars:
        notes.append("significance: " + "; ".join(f"{mark} p < {cut}" for cut, mark in STARS))
    return ModelTable(header, _coefficient_rows(fits, stars, digits), _footer_rows(fits), notes, _records(fits, header))


def to_markdown(table: ModelTable) -> str:
    """A GitHub pipe table, columns padded to a common width, then each note as a paragraph."""
    rows = [[cell.replace("|", r"\|") for cell in row] for section in table.sections() for row in section]
    widths = [max(3, *map(len, column)) for column in zip(*rows)]

    def line(cells: Row) -> str:
        return "| " + " | ".join(cell.ljust(w) for cell, w in zip(cells, widths)) + " |"

    rule = "|" + "|".join([":" + "-" * (widths[0] + 1)] + [":" + "-" * w + ":" for w in widths[1:]]) + "|"
    return "\n".join([line(rows[0]), rule, *map(line, rows[1:])]) + "\n\n" + "\n\n".join(table.notes) + "\n"


def _latex_escape(text: str) -> str:
    return "".join(LATEX_SPECIAL.get(ch, ch) for ch in text)


def to_latex(table: ModelTable) -> str:
    """A booktabs tabular (one l column, one c column per fit); the notes span the width below."""
    width = len(table.header)
    lines = [rf"\begin{{tabular}}{{l{'c' * (width - 1)}}}", r"\toprule"]
    for i, section in enumerate(table.sections()):
        if i:
            lines.append(r"\midrule")
        lines += [" & ".join(map(_latex_escape, row)) + r" \\" for row in section]
    lines.append(r"\bottomrule")
    lines += [rf"\multicolumn{{{width}}}{{l}}{{{_latex_escape(note)}}} \\" for note in table.notes]
    lines.append(r"\end{tabular}")
    return "\n".join(lines) + "\n"


def to_csv(table: ModelTable) -> str:
    """One row per model and term with a header row; numbers unrounded (``repr``), missing ones empty."""
    buf = io.StringIO()
    if table.records:
        writer = csv.DictWriter(buf, fieldnames=list(table.records[0]), lineterminator="\n")
        writer.writeheader()
        writer.writerows({k: "" if v is None else v for k, v in row.items()} for row in table.records)
    return buf.getvalue()


def to_rich(table: ModelTable) -> Table:
    """A rich table for the terminal, the footer set apart from the coefficients; notes as the caption."""
    out = Table(box=box.SIMPLE_HEAD, show_edge=False, header_style="bold", caption=Text("\n".join(table.notes)))
    out.add_column(Text(table.header[0]))
    for name in table.header[1:]:
        out.add_column(Text(name), justify="center")
    for i, row in enumerate(table.body):
        out.add_row(*map(Text, row), end_section=i == len(table.body) - 1)
    for row in table.footer:
        out.add_row(*map(Text, row))
    return out


RENDERERS: dict[str, Callable[[ModelTable], str | Table]] = {
    "terminal": to_rich,
    "markdown": to_markdown,
    "latex": to_latex,
    "csv": to_csv,
}


def render(table: ModelTable, fmt: str) -> str | Table:
    """The table in ``fmt``: ``terminal`` (a rich renderable), ``markdown``, ``latex`` or ``csv``."""
    try:
        renderer = RENDERERS[fmt]
    except KeyError:
        raise BigPanelError(f"unknown table format {fmt!r}; choose one of {', '.join(RENDERERS)}") from None
    return renderer(table)
