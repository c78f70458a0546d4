"""Terminal rendering of a fit (rich), and the same report as plain text."""

from __future__ import annotations

import io

from rich import box
from rich.console import Console, Group
from rich.table import Table
from rich.text import Text

from .result import FitResult

VCOV_LABEL = {
    "classical": "classical (one error variance for every row)",
    "hc1": "HC1, robust to unequal error variances",
    "cr1": "CR1, robust to errors correlated within clusters",
}


POISSON_VCOV_LABEL = {
    "classical": "model-based (Poisson: variance equal to the mean)",
    "hc1": "HC1 sandwich, robust to any variance of y given the mean",
    "cr1": "CR1 sandwich, robust to errors correlated within clusters",
}


def _n(v: int | float) -> str:
    return f"{int(v):,}"


def _p(p: float) -> str:
    return "<1e-16" if p < 1e-16 else f"{p:.4f}" if p >= 1e-4 else f"{p:.1e}"


def p_text(p: float) -> str:
    """A p-value as the report writes it (the notebook display too)."""
    return _p(p)


def _g(v: float, digits: int = 6) -> str:
    return f"{v:.{digits}g}"


def _absorbs(res: FitResult) -> bool:
    """Whether the fit absorbed fixed effects (the within fit and those built on it), not a panel unit."""
    return all(d.role is None for d in res.fe)


def _header(res: FitResult) -> Text:
    head = Text()
    iv = res.extras.get("instrumental_variables")
    head.append(f"{iv['method'] if iv else res.estimator} estimate  ", style="bold")
    head.append(res.formula, style="bold magenta")
    if _absorbs(res):
        effects = ", ".join(f"{d.name} with {_n(d.levels)} levels" for d in res.fe)
        head.append(f"\nfixed effects removed: {effects}", style="dim")
    else:
        head.append(f"\npanel unit: {res.fe[0].name}", style="dim")
    return head


def _coefficients(res: FitResult) -> Table:
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, header_style="bold")
    table.add_column("regressor")
    boot = {name: c["bootstrap_p_value"] for name, c in res.per_coefficient.items() if "bootstrap_p_value" in c}
    for col in ("slope", "s.e.", "t", "p", "95% low", "95% high") + (("bootstrap p",) if boot else ()):
        table.add_column(col, justify="right")
    for i, name in enumerate(res.names):
        table.add_row(
            Text(name),  # a name is plain text: never rich markup or emoji codes
            _g(res.coef[i]),
            _g(res.std_error[i], 4),
            f"{res.t[i]:.2f}",
            _p(res.p[i]),
            _g(res.ci_low[i], 5),
            _g(res.ci_high[i], 5),
            *((_p(boot[name]) if name in boot else "",) if boot else ()),
        )
    return table


def _bootstrap(res: FitResult, lines: Text) -> None:
    """How the bootstrap p-values were drawn: dimension, weights, draws or enumeration, seed."""
    b = res.extras.get("bootstrap")
    if not b:
        return
    _line(lines, "bootstrap")
    how = (f"all {_n(b['draws'])} sign vectors enumerated (Rademacher weights; deterministic)" if b["enumerated"]
           else f"{_n(b['draws'])} draws of {b['weights'].capitalize()} weights, seed {b['seed']}")
    lines.append(f"restricted wild cluster bootstrap-t of each slope = 0, resampling the {_n(b['clusters'])} "
                 f"clusters of {b['dimension']}: {how}")
    bounds = [(n, c["bootstrap_ci_low"], c["bootstrap_ci_high"]) for n, c in res.per_coefficient.items()
              if "bootstrap_ci_low" in c]
    if bounds:
        lines.append("; 95% intervals by inverting the bootstrap test: "
                     + ", ".join(f"{n} [{_g(lo, 5)}, {_g(hi, 5)}]" for n, lo, hi in bounds))
    cut = b["effects_cutting_across"]
    if cut:
        lines.append(f"; the effects of {', '.join(cut)} cut across these clusters and enter every draw exactly "
                     "through their levels")


def _line(lines: Text, label: str, style: str = "bold") -> None:
    lines.append(f"\n{label:<10}", style=style)


def _rows(res: FitResult, lines: Text) -> None:
    r = res.rows
    lines.append("rows      ", style="bold")
    lines.append(f"{_n(r.used)} used of {_n(r.source)}")
    drops = []
    if r.source != r.after_filter:
        drops.append(f"{_n(r.source - r.after_filter)} outside the filter")
    if r.dropped_incomplete:
        cols = ", ".join(f"{c} {_n(v)}" for c, v in r.incomplete.items())
        drops.append(f"{_n(r.dropped_incomplete)} with a missing or unusable value ({cols})")
    if r.dropped_singletons:
        drops.append(f"{_n(r.dropped_singletons)} singletons")
    if drops:
        lines.append("; dropped " + "; ".join(drops))
    if res.weights:
        lines.append(f"; each row counts in proportion to {res.weights}")
    for c in res.extras.get("categorical", []):
        _line(lines, "levels")
        lines.append(f"{c['term']}: {_n(c['levels'])} levels, one indicator each but the base {c['base']!r}")


def _variance(res: FitResult, lines: Text) -> None:
    inf = res.inference
    _line(lines, "variance")
    poisson = res.extras.get("poisson")
    lines.append(POISSON_VCOV_LABEL[inf.kind] if poisson else VCOV_LABEL[inf.kind])
    if inf.clusters:
        nested = [d.name for d in res.fe if d.nested_in_cluster]
        lines.append("; clusters: " + ", ".join(f"{c} {_n(g)}" for c, g in inf.clusters.items()))
        if nested:
            lines.append(f"; each level of {', '.join(nested)} lies inside one cluster")
    lines.append(f"; t on {_n(inf.df)} df")
    if poisson:
        return
    _line(lines, "fit")
    r2 = (f"R-squared {res.fit.r2_full_model:.4f} with the effects, {res.fit.r2_within:.4f} after removing them"
          if _absorbs(res) else f"R-squared {res.fit.r2_transformed:.4f} of the transformed regression")
    lines.append(
        f"{r2}; residual s.e. {_g(inf.sigma, 4)} on {_n(res.fit.df_resid)} df; "
        f"F({_n(inf.f_df[0])}, {_n(inf.f_df[1])}) = {inf.f_stat:.4g}, p {_p(inf.f_p)}"
    )


def _absorbed(res: FitResult, lines: Text) -> None:
    """The parameters the effects absorb, and the connected components of effects 1-2."""
    _line(lines, "effects")
    plural = "" if res.components == 1 else "s"
    comp = f" in {res.components} connected component{plural}" if res.components else ""
    lines.append(f"{_n(res.absorbed)} parameters spent on the fixed effects{comp}")


def _solver(res: FitResult, lines: Text) -> None:
    s = res.solver
    if res.estimator == "poisson":
        return
    if _absorbs(res):
        _absorbed(res, lines)
        _line(lines, "solver")
        conv = "converged" if s.converged else "NOT CONVERGED"
        steps = (f"{s.iterations} iterations, change {s.change:.1e} (tol {s.tol:.0e}, {conv})"
                 if s.converged or s.iterations else "no iterations run (NOT CONVERGED)")
        lines.append(f"{s.path}; {steps}; {s.raw_passes} passes over the rows; {s.seconds:.2f} s")
    else:
        _line(lines, "solver")
        lines.append(f"{s.raw_passes} passes over the rows; {s.seconds:.2f} s")


def _panel_tests(res: FitResult, lines: Text) -> None:
    """The random-effects components, Hausman and Mundlak tests, and the first-difference counts."""
    re_ = res.extras.get("random_effects")
    if re_:
        _line(lines, "error parts")
        th = re_["theta"]
        lines.append(
            f" ({re_['method']}) s.d. of the unit part {_g(re_['sigma_u'], 4)}, of the row part "
            f"{_g(re_['sigma_e'], 4)}; share of the unit mean taken out "
            + (f"{th['min']:.4f}" if th["min"] == th["max"] else f"{th['min']:.4f} to {th['max']:.4f}")
            + ("; the unit part's variance came out negative and is set to 0" if re_["sigma_u_clipped_at_zero"] else "")
        )
    hs = res.extras.get("hausman")
    if hs:
        _line(lines, "hausman")
        if hs["statistic"] is not None:
            lines.append(f"chi2({hs['df']}) = {hs['statistic']:.4g}, p {_p(hs['p_value'])} on {', '.join(hs['regressors'])}")
        if "note" in hs:
            lines.append(("; " if hs["statistic"] is not None else "") + hs["note"], style="yellow")
    mk = res.extras.get("mundlak")
    if mk:
        _line(lines, "mundlak")
        lines.append(f"F({mk['df'][0]}, {mk['df'][1]:g}) = {mk['statistic']:.4g}, p {_p(mk['p_value'])} "
                     "(unit means added, errors clustered by unit)")
    fd = res.extras.get("first_difference")
    if fd:
        _line(lines, "diffs")
        lines.append(
            f"{_n(fd['usable'])} over consecutive periods; {_n(fd['dropped_gaps'])} across a gap dropped; "
            f"{_n(fd['first_rows'])} first rows of a unit"
        )


def _instruments(res: FitResult, lines: Text) -> None:
    """The IV diagnostics: first stages, instrument strength, identification and the tests."""
    iv = res.extras.get("instrumental_variables")
    if not iv:
        return
    _line(lines, "iv")
    lines.append(f"{iv['method']}" + (f" (kappa {iv['kappa']:.6g})" if iv["method"] == "LIML" else "")
                 + f"; {', '.join(iv['endogenous'])} instrumented by {', '.join(iv['instruments'])}")
    for name, fs in res.extras["first_stage"].items():
        _line(lines, "1st stage")
        coefs = ", ".join(f"{z} {_g(c['estimate'], 4)} ({_g(c['std_error'], 3)})" for z, c in fs["coefficients"].items())
        lines.append(f"{name} on {coefs}; partial F({fs['df'][0]:g}, {_n(fs['df'][1])}) = {fs['partial_f']:.4g} "
                     f"({fs['variance']}), p {_p(fs['p_value'])}; partial R-squared {fs['partial_r2']:.4f}")
    weak = res.extras["weak_identification"]
    _line(lines, "strength")
    values = "; ".join(f"{k} {v:g}" for k, v in weak["stock_yogo"].items())
    lines.append(f"{weak['statistic']} {weak['value']:.4g}"
                 + (f"; Stock-Yogo critical values (from memory): {values}" if values else ""))
    for label, key, null in (("rank test", "underidentification", "not identified"),
                             ("validity", "overidentification", "every instrument is valid")):
        test = res.extras.get(key)
        if test:
            _line(lines, label)
            lines.append(f"{test['test']} chi2({test['df']}) = {test['statistic']:.4g}, p {_p(test['p_value'])} "
                         f"(null: {null})")
    ar = res.extras["anderson_rubin"]
    _line(lines, "AR test")
    lines.append(f"F({ar['df'][0]:g}, {_n(ar['df'][1])}) = {ar['statistic']:.4g}, p {_p(ar['p_value'])} "
                 "(Anderson-Rubin; null: every endogenous coefficient is 0; valid with weak instruments)")


def _poisson(res: FitResult, lines: Text) -> None:
    """The Poisson fit: deviance and pseudo R-squared, the rows of all-zero levels, the IRLS steps."""
    ps = res.extras.get("poisson")
    if not ps:
        return
    dropped = sum(ps["dropped_rows"].values())
    if dropped:
        _line(lines, "zeros")
        levels = ", ".join(f"{name} {_n(v)}" for name, v in ps["levels_with_zero_outcome"].items() if v)
        lines.append(f"{_n(dropped)} rows dropped in levels whose outcome is zero in every row (levels: {levels})")
    _line(lines, "fit")
    lines.append(f"deviance {_g(ps['deviance'])} (constant only: {_g(ps['null_deviance'])}); deviance R-squared "
                 f"{ps['deviance_r2']:.4f}; squared correlation of y and the fitted mean {ps['squared_correlation']:.4f}")
    _absorbed(res, lines)
    s = res.solver
    _line(lines, "solver")
    conv = "converged" if s.converged else "NOT CONVERGED"
    change = f"deviance change {ps['deviance_change']:.1e}, " if ps["deviance_change"] is not None else ""
    lines.append(f"IRLS: {ps['iterations']} weighted within fits ({change}tol {s.tol:.0e}, {conv}); "
                 f"{s.path.split(': ', 1)[-1]}; {s.raw_passes} passes over the rows "
                 f"({ps['raw_passes']['per_step']} per step); {s.seconds:.2f} s")


def fit_renderable(res: FitResult) -> Group:
    """The report: a coefficient table framed by lines on sample, effects, variance and solver."""
    lines = Text()
    for section in (_rows, _variance, _bootstrap, _solver, _poisson, _panel_tests, _instruments):
        section(res, lines)
    if res.dropped:
        _line(lines, "dropped", style="bold yellow")
        lines.append("; ".join(f"{d.get('role', '')} {d['name']} ({d['reason']})".lstrip() for d in res.dropped),
                     style="yellow")
    for w in res.warnings:
        _line(lines, "warning", style="bold red")
        lines.append(w, style="red")
    return Group(_header(res), _coefficients(res), lines)


def render_text(res: FitResult, width: int = 100) -> str:
    """The report as plain text."""
    buf = io.StringIO()
    Console(file=buf, width=width, no_color=True, highlight=False).print(fit_renderable(res))
    return buf.getvalue()
