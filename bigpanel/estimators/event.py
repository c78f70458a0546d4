"""Event studies for staggered adoption by imputation (Borusyak, Jaravel and Spiess 2024).

source -> spec of the untreated fit (unit, period and further effects, controls; the
sample restricted to untreated rows) -> panel check (:mod:`bigpanel.passes.event`) ->
the ordinary within fit on the untreated rows (:func:`~bigpanel.estimators.absorb.absorb`,
singletons kept: a unit's effect is needed to impute its treated rows) -> in one pass, the
right-hand sides of the implied weights' normal equations, the exclusions and the sums by
cell (imputed effects; the demeaned columns at the leads) -> the solve of those equations
with the same projections (:mod:`bigpanel.numerics.given_rhs`; on the row-codes path the
untreated fit's factor of the Schur complement is reused) -> the pre-trend fit's
cross-products -> the scores per cluster -> the estimates, their conservative variance and
the pre-trend test (:mod:`bigpanel.numerics.imputation` states the algebra).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from time import perf_counter
from typing import Any

import numpy as np
import pyarrow as pa
from scipy import linalg, stats

from ..engines.base import Engine
from ..errors import BigPanelError
from ..model.spec import Spec
from ..model.event import DEFAULT_HORIZON, Design, event_design, event_spec
from ..numerics.given_rhs import solve_given
from ..numerics.imputation import (Cells, Columns, Imputed, cell_averages, choose_columns, given_rhs, imputed,
                                   interval, lead_rows, lead_sums, pretrend_moments)
from ..numerics.inference import infer
from ..numerics.project import Projection
from ..numerics.rowcodes import Links
from ..numerics.solve import Slopes, solve_slopes
from ..passes.event import (PanelCounts, ScoreTerms, Targets, check_panel, cluster_scores, meat, put_components,
                            put_fit, rows_view, targets)
from ..passes.moments import ClusterTerm, store_effects
from ..passes.reduce import Reduction, Start, put_one_row
from ..results.event import EventEstimate, EventResult
from .absorb import Absorption, Projections, absorb
from .base import FEW_CLUSTERS, Estimator, Session, opened
from .sql_backend import SqlBackend
from .within import PATHS


class EventBackend(SqlBackend):
    """The SQL backend of the untreated fit, keeping what the event study needs after it: the
    row codes' link tables (for the implied weights' solve), and the count of complete rows,
    so that the per-column count of incomplete rows runs only when some row is incomplete."""

    def __init__(self, eng: Engine, spec: Spec, source_kind: str) -> None:
        super().__init__(eng, spec, source_kind)
        self.kept_links: Links | None = None
        self.complete_rows: int | None = None
        self.filtered_rows: int | None = None

    def start(self) -> Start:
        first = super().start()
        self.filtered_rows = first.n_filtered
        return first

    def components(self, red: Reduction) -> tuple[int | None, np.ndarray | None]:
        links = self.links
        found = super().components(red)
        self.kept_links = links
        return found

    def incomplete(self) -> dict[str, int]:
        if self.complete_rows is not None and self.complete_rows == self.filtered_rows:
            return {}
        return super().incomplete()


@dataclass(frozen=True)
class Pretrend:
    """The pre-trend test (None without leads) and each lead's (estimate, s.e.) by event time."""

    test: dict[str, Any] | None
    leads: dict[int, tuple[float | None, float | None]]


@dataclass(frozen=True)
class Fitted:
    """What the steps after the untreated fit share: the session, the design, the panel check,
    the fit's absorption and slopes, the right-hand sides and the columns solved."""

    session: Session
    design: Design
    panel: PanelCounts
    ab: Absorption
    slopes: Slopes
    targets: Targets
    cols: Columns


class EventStudy(Estimator):
    """The event study; its own options are the design (``unit``, ``time``, ``first_treated``,
    ``horizon``) and the untreated fit's stopping rule, Python-side budget and forced strategy."""

    name = "event"
    options = {"unit": None, "time": None, "first_treated": None, "horizon": DEFAULT_HORIZON, "tol": 1e-8,
               "max_iter": 10_000, "cell_budget": None, "strategy": None}

    def fit(self) -> EventResult:
        s, req = self.settings, self.request
        how = Projections.checked(s["tol"], s["max_iter"], "keep", s["cell_budget"], s["strategy"])
        if len(req.cluster) > 1:
            raise BigPanelError("the event study clusters on one column: give --cluster once")
        for key in ("unit", "time", "first_treated"):
            if not s[key]:
                raise BigPanelError(f"the event study needs --{key.replace('_', '-')}")
        unit = s["unit"]
        inner = replace(req, fe=[unit, s["time"], *req.fe], cluster=list(req.cluster) or [unit], variance=None,
                        weights=None)
        with opened(inner, regressors_required=False) as session:
            design = event_design(session.src, unit, s["time"], s["first_treated"], inner.cluster[0], req.weights,
                                  s["horizon"])
            session = replace(session, spec=event_spec(session.spec, design))
            back = EventBackend(session.eng, session.spec, session.src.kind)
            panel = _checked_panel(session, design)
            back.complete_rows = panel.rows
            ab = absorb(session, how, in_memory=False, back=back)
            fitted, weights = self._implied_weights(session, design, panel, ab, back)
            return self._estimate(fitted, weights)

    def _implied_weights(self, session: Session, design: Design, panel: PanelCounts, ab: Absorption,
                         back: EventBackend) -> tuple[Fitted, Projection]:
        """The right-hand sides and the exclusions, the extra columns' solve (the leads' effects
        and the implied weights), and the view of the usable rows with both joined back."""
        eng, spec, red = session.eng, session.spec, ab.red
        slopes = solve_slopes(ab.mom.q, float(red.counts[0].sum()), red.rhs[0].sum(axis=0), red.sumsq)
        linked = ab.labels is not None and (ab.n_comp or 1) > 1
        if linked:
            put_components(eng, ab.labels, len(red.counts[0]))
        keys = [back.level_keys(d) for d in range(len(red.counts))]
        put_fit(eng, keys, ab.proj.alpha)
        put_one_row(eng, "bp_event_coef", _slope_row(slopes))
        tg = targets(eng, spec, design, [len(c) for c in red.counts], linked, slopes.keep)
        cols = choose_columns(design.leads, design.post, tg.total)
        if not any(k is None for k in cols.estimands):
            reasons = "; ".join(f"{why}: {n:,}" for why, n in tg.excluded.items())
            raise BigPanelError(f"none of the {panel.treated:,} treated rows can be imputed ({reasons})")
        rhs, totals = given_rhs(tg.rhs, tg.total, cols, red.counts)
        if eng.on_step:
            eng.on_step(f"implied weights ({red.strategy})")
        start = perf_counter()
        weights = solve_given(eng, spec, red, back.kept_links, keys, rhs, totals, self.settings["tol"],
                              self.settings["max_iter"])
        eng.timings["implied weights (numpy)"] = perf_counter() - start
        back.kept_links = None
        if linked:
            n_unit = len(red.counts[0])
            keys[0] = keys[0].append_column("comp", pa.array(ab.labels[:n_unit].astype(np.int64)))
            keys[1] = keys[1].append_column("comp", pa.array(ab.labels[n_unit:].astype(np.int64)))
        store_effects(eng, keys, [np.hstack([a, w]) for a, w in zip(ab.proj.alpha, weights.alpha)],
                      prefix="bp_event_fx")
        rows_view(eng, spec, len(cols.source), linked)
        return Fitted(session, design, panel, ab, slopes, tg, cols), weights

    def _estimate(self, f: Fitted, weights: Projection) -> EventResult:
        """From the sums by cell: the estimates, cell averages and the pre-trend fit; then the scores per
        cluster and their products (the variance and the pre-trend test)."""
        eng, slopes, cols = f.session.eng, f.slopes, f.cols
        controls = [f"e{j}" for j in slopes.keep]
        coef = _slope_row(slopes)
        cells = Cells.grouped(f.targets.cells, slopes.beta, controls, cols.leads,
                              lead_sums(f.targets.rhs, cols.source, weights.alpha, len(cols.leads)))
        imp = imputed(cells, cols.estimands, controls)
        expected = f.targets.total[cols.source[cols.first_weight_column:]]
        if not np.allclose(imp.totals, expected, rtol=1e-9, atol=0.0):
            raise RuntimeError(f"imputed rows' weights {imp.totals} differ from the right-hand sides' {expected}")
        gammas = imp.control_means @ slopes.bread if controls else np.zeros((len(cols.estimands), 0))
        q_idx = [0, *slopes.keep]
        q = pretrend_moments(cells, f.ab.mom.q[np.ix_(q_idx, q_idx)], controls, cols.leads)
        pt = _pretrend_slopes(f.ab, q, q_idx, lead_rows(cells, cols.leads), len(controls))
        eng.put_table("bp_event_tbar", cell_averages(cells))
        coef.update({f"g{h}_{i}": float(g) for h, row in enumerate(gammas) for i, g in enumerate(row)})
        coef.update({f"w{h}": float(1.0 / t) for h, t in enumerate(imp.totals)})
        coef.update({f"t{i}": float(pt.beta_full[i]) for i in range(len(controls))})
        coef.update({f"l{a}": float(pt.beta_full[len(controls) + a]) for a in range(len(cols.leads))})
        put_one_row(eng, "bp_event_coef", coef)
        terms = ScoreTerms(slopes.keep, cols.leads, cols.estimands, cols.first_weight_column)
        cluster_scores(eng, terms)
        vcov, pt_meat, clusters, clusters_untreated = meat(eng, terms)
        pre = _pretrend(f.ab, pt, pt_meat, clusters_untreated, f.design, cols.leads)
        return self._result(f, weights, cells, imp, vcov, clusters, pre)

    def _result(self, f: Fitted, weights: Projection, cells: Cells, imp: Imputed, vcov: np.ndarray, clusters: int,
                pre: Pretrend) -> EventResult:
        spec, red, eng, ab, slopes = f.session.spec, f.ab.red, f.session.eng, f.ab, f.slopes
        se = np.sqrt(np.maximum(np.diag(vcov), 0.0))
        low, high = interval(imp.estimate, se)
        post = [EventEstimate(k, float(imp.estimate[h]), float(se[h]), float(low[h]), float(high[h]),
                              int(imp.rows[h]), "imputation") for h, k in enumerate(f.cols.estimands)]
        leads = [_lead(a, pre.leads[a], n) for a, n in zip(f.cols.leads, lead_rows(cells, f.cols.leads))]
        imputed_rows = int(cells.treated["n"].sum())
        rows = {"source": ab.first.n_source, "after_filter": ab.first.n_filtered, "incomplete": ab.lost,
                "dropped_incomplete": ab.first.n_filtered - f.panel.rows, "untreated": ab.mom.n,
                "treated": f.panel.treated, "imputed": imputed_rows, "excluded": f.targets.excluded,
                "beyond_horizon": imputed_rows - sum(e.rows for e in post if e.k is not None)}
        names = [spec.x[j - 1] for j in slopes.keep]
        fit = {"controls": names, "coefficients": {n: float(b) for n, b in zip(names, slopes.beta)},
               "dropped_controls": [{"name": spec.x[j - 1], "reason": why} for j, why in slopes.dropped],
               "strategy": red.strategy, "path": PATHS[red.strategy], "iterations": ab.proj.iterations,
               "change": ab.proj.change, "converged": ab.proj.converged}
        solver = {"engine": eng.name, "raw_passes": eng.raw_passes, "seconds": self.seconds(),
                  "bytes_to_client": eng.bytes_to_client,
                  "implied_weights": {"iterations": weights.iterations, "change": weights.change,
                                      "converged": weights.converged}}
        return EventResult(
            outcome=spec.y, design=_design_dict(f.design, spec), event_time=leads + post[:-1], overall=post[-1],
            covariance=vcov, covariance_labels=["overall" if k is None else str(k) for k in f.cols.estimands],
            pretrend=pre.test, rows=rows, untreated_fit=fit, solver=solver,
            panel={"units": f.panel.units, "never_treated": f.panel.never_treated, "cohorts": f.panel.cohorts},
            variance={"estimator": "conservative (Borusyak, Jaravel and Spiess 2024, Theorem 3)",
                      "cluster": f.design.cluster, "clusters": clusters,
                      "residuals_of_treated_rows": "around the cohort x event time average"},
            source=f.session.src.location, where=spec.where, warnings=_warnings(ab, weights, clusters, cells),
            timings=dict(eng.timings))


def _slope_row(slopes: Slopes) -> dict[str, float]:
    """The one-row table ``bp_event_coef``'s first values: ``one`` and the untreated fit's slopes b0, b1, ..."""
    return {"one": 1.0, **{f"b{i}": float(b) for i, b in enumerate(slopes.beta)}}


def _lead(k: int, fitted: tuple[float | None, float | None], rows: int) -> EventEstimate:
    """A lead of the pre-trend fit (estimate and s.e. None when its indicator was dropped)."""
    est, err = fitted
    if est is None or err is None:
        return EventEstimate(k, None, None, None, None, rows, "pre-trend fit")
    low, high = interval(np.array([est]), np.array([err]))
    return EventEstimate(k, est, err, float(low[0]), float(high[0]), rows, "pre-trend fit")


def _checked_panel(session: Session, design: Design) -> PanelCounts:
    """The panel check, and the one-line errors when nothing is treated or nothing untreated."""
    panel = check_panel(session.eng, design)
    if panel.rows == 0:
        raise BigPanelError("no complete rows: every row misses a used value")
    if panel.treated == 0:
        raise BigPanelError(f"no row is treated: {design.first_treated!r} is missing, or after the last period, "
                            "for every unit")
    if panel.treated == panel.rows:
        raise BigPanelError(f"every row is treated ({design.first_treated!r} at or before every period): nothing "
                            "to impute from")
    return panel


@dataclass(frozen=True)
class _PretrendSlopes:
    fit: Slopes
    beta_full: np.ndarray
    n_controls: int


def _pretrend_slopes(ab: Absorption, q: np.ndarray, q_idx: list[int], lead_counts: list[int],
                     n_controls: int) -> _PretrendSlopes:
    """Slopes of the pre-trend fit on [kept controls, leads] from its cross-products ``q``."""
    red = ab.red
    counts = np.array(lead_counts, dtype=float)
    st = np.concatenate([red.rhs[0].sum(axis=0)[q_idx], counts])
    tt = np.concatenate([red.sumsq[q_idx], counts])
    fit = solve_slopes(q, float(red.counts[0].sum()), st, tt)
    full = np.zeros(q.shape[0] - 1)
    full[np.array(fit.keep, dtype=int) - 1] = fit.beta
    return _PretrendSlopes(fit, full, n_controls)


def _pretrend(ab: Absorption, pt: _PretrendSlopes, pt_meat: np.ndarray, clusters: int, design: Design,
              leads: list[int]) -> Pretrend:
    """CR1 errors of the pre-trend fit and the Wald test that its leads are zero."""
    if not leads:
        return Pretrend(None, {})
    keep = [j - 1 for j in pt.fit.keep]
    terms = [ClusterTerm((0,), clusters, pt_meat[np.ix_(keep, keep)])]
    inf = infer(pt.fit.beta, pt.fit.bread, pt.fit.rss, ab.mom.n, ab.absorbed, "cr1", cluster_terms=terms,
                cluster_names=(design.cluster,))
    out: dict[int, tuple[float | None, float | None]] = {a: (None, None) for a in leads}
    tested = []
    for pos, j in enumerate(keep):
        if j >= pt.n_controls:
            out[leads[j - pt.n_controls]] = (float(pt.fit.beta[pos]), float(inf.std_error[pos]))
            tested.append(pos)
    if not tested:
        return Pretrend(None, out)
    b = pt.fit.beta[tested]
    v = inf.vcov[np.ix_(tested, tested)]
    wald = float(b @ linalg.pinvh(v) @ b)
    df = int(np.linalg.matrix_rank(v))
    test = {"statistic": wald, "df": df, "p_value": float(stats.chi2.sf(wald, df)),
            "leads": [leads[keep[p] - pt.n_controls] for p in tested],
            "variance": f"CR1 clustered by {design.cluster} ({clusters:,} clusters)"}
    return Pretrend(test, out)


def _design_dict(design: Design, spec: Spec) -> dict[str, Any]:
    return {"unit": design.unit, "time": design.time, "first_treated": design.first_treated,
            "fixed_effects": spec.fe_names[2:], "cluster": design.cluster, "weights": design.weights,
            "horizon": [design.lo, design.hi],
            "event_time_unit": "difference of period ranks" if design.dates else "difference of periods"}


def _warnings(ab: Absorption, weights: Projection, clusters: int, cells: Cells) -> list[str]:
    out = []
    if not ab.proj.converged:
        out.append(f"NOT CONVERGED: the untreated fit's projections stopped after {ab.proj.iterations} iterations "
                   f"(change {ab.proj.change:.1e}); raise --max-iter")
    if not weights.converged:
        out.append(f"NOT CONVERGED: the implied weights stopped after {weights.iterations} iterations (change "
                   f"{weights.change:.1e}); a treated row's effects may not be identified (raise --max-iter)")
    if clusters < FEW_CLUSTERS:
        out.append(f"only {clusters} clusters: the variance can be unreliable with few clusters")
    single = int((cells.treated["n"] == 1).sum())
    if single:
        out.append(f"{single:,} cohort x event-time cells hold a single treated row: their residual is zero in the "
                   "variance, which is then less conservative")
    return out
