"""The within (fixed-effects) estimator: OLS of the demeaned outcome on the demeaned regressors.

source -> spec -> first counts and shifts -> per-level statistics -> projections (pair
tables, row codes or in-engine sweeps) -> demeaned cross-products -> slopes -> the meat
(HC1: a pass; CR1: the per-cluster sums of the cross-product pass) -> inference -> effects
-> result. The passes and projections are :mod:`bigpanel.estimators.absorb`; the slopes,
the degrees of freedom and the variance are :mod:`bigpanel.numerics`.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np

from ..errors import BigPanelError
from ..numerics.effects import effect_tables, recover
from ..numerics.inference import Inference, infer
from ..numerics.solve import ILL_CONDITIONED, Slopes, exact_rss, solve_slopes
from ..passes.moments import ols_residuals
from ..passes.reduce import IN_ENGINE, ONE_WAY, PAIR_TABLES, ROW_CODES
from ..results.result import EffectInfo, FitResult, FitStatistics, SolverReport
from .absorb import Absorption, Projections, absorb
from .base import Estimator, Session, cluster_warnings, opened, row_counts
from .bootstrap import BOOTSTRAP_OPTIONS, BootstrapOptions, wild_bootstrap
from .effect_errors import effect_errors

PATHS = {
    ONE_WAY: "exact one-way demeaning",
    PAIR_TABLES: "group-level statistics (pair tables)",
    ROW_CODES: "per-row level codes, largest effect eliminated exactly",
    IN_ENGINE: "in-engine sweeps (over the Python-side memory budget)",
}


class Within(Estimator):
    """Slopes of the regression with a dummy for every level of every effect (LSDV), computed
    without the dummies; ``singletons`` (``drop`` or ``keep``), the stopping rule ``tol`` and
    ``max_iter`` of the projections, the Python-side budget ``cell_budget``, a forced
    ``strategy`` (tests, benchmarks), ``effect_errors`` (clustered standard errors of a single
    effect's levels) and the wild bootstrap's options (:mod:`.bootstrap`) are its own options."""

    name = "within"
    options = {"tol": 1e-8, "max_iter": 10_000, "singletons": "drop", "cell_budget": None, "strategy": None,
               "effect_errors": False, **BOOTSTRAP_OPTIONS}
    in_memory = True
    ols_scores = True  # the scores are X~'u: the clustered effect errors' algebra applies

    def fit(self) -> FitResult:
        how = Projections.checked(**{k: self.settings[k] for k in ("tol", "max_iter", "singletons", "cell_budget",
                                                                  "strategy")})
        boot = BootstrapOptions.checked(**{k: self.settings.get(k, v) for k, v in BOOTSTRAP_OPTIONS.items()})
        with opened(self.request, **self.spec_options()) as session:
            ab = absorb(session, how, in_memory=self.request.engine == "memory", bootstrap=bool(boot.draws))
            slopes, rss_from = self._slopes(session, ab)
            inf = self._inference(session, ab, slopes)
            names = [([session.spec.y, *session.spec.x])[j] for j in slopes.keep]
            bootstrap = wild_bootstrap(session, ab, slopes, inf, names, boot) if boot.draws else None
            fx = recover(ab.proj, ab.red.counts, slopes.keep, slopes.beta, ab.first.shift, ab.labels)
            effects = effect_tables(session.spec, ab.back.level_keys, fx, ab.red.rows)
            effects, errors = effect_errors(session, ab, slopes, inf, effects, bool(self.settings.get("effect_errors")),
                                            self.ols_scores)
            solver = self._solver(session, ab, slopes, rss_from)
        res = self._result(session, ab, slopes, inf, solver, effects)
        res.extras["effect_errors"] = errors
        if bootstrap is not None:
            res.extras["bootstrap"] = bootstrap[0]
            for name, values in bootstrap[1].items():
                res.per_coefficient.setdefault(name, {}).update(values)
        return res

    def spec_options(self) -> dict[str, Any]:
        """What the spec needs beyond the request (the instruments, for a subclass)."""
        return {}

    def _slopes(self, session: Session, ab: Absorption) -> tuple[Slopes, str]:
        """Slopes from E'WE, and the RSS (from a residual pass when the cross-products cancel)."""
        red, spec = ab.red, session.spec
        slopes = solve_slopes(ab.mom.q, float(red.counts[0].sum()), red.rhs[0].sum(axis=0), red.sumsq)
        if not slopes.keep:
            names = [spec.y, *spec.x]
            raise BigPanelError("every regressor is absorbed by the fixed effects or collinear: "
                                + ", ".join(names[j] for j, _ in slopes.dropped))
        return exact_rss(slopes, float(ab.mom.q[0, 0]), ab.back.rss)

    def _inference(self, session: Session, ab: Absorption, slopes: Slopes) -> Inference:
        spec = session.spec
        meat, terms = None, []
        res = ols_residuals(len(spec.value_aliases), slopes.keep, slopes.beta)
        if spec.variance == "hc1":
            meat = ab.back.meat_hc(res)
        elif spec.variance == "cr1":
            terms = ab.back.meat_cluster(res)
        mean_weight = float(ab.red.counts[0].sum()) / ab.mom.n
        return infer(slopes.beta, slopes.bread, slopes.rss, ab.mom.n, ab.absorbed, spec.variance, meat=meat,
                     cluster_terms=terms, cluster_names=spec.cluster, mean_weight=mean_weight)

    def _solver(self, session: Session, ab: Absorption, slopes: Slopes, rss_from: str) -> SolverReport:
        red, proj, eng = ab.red, ab.proj, session.eng
        sum_e = red.rhs[0].sum(axis=0) - sum(c @ a for c, a in zip(red.counts, proj.alpha))  # D'(t - D a), summed
        plan = red.plan.to_dict() if red.plan is not None else {
            "name": red.strategy, "reason": "in-memory engine: every pair table in numpy"}
        return SolverReport(
            engine=self.request.engine if self.request.engine == "memory" else eng.name,
            path=PATHS[red.strategy], iterations=proj.iterations, change=proj.change, tol=self.settings["tol"],
            converged=proj.converged, condition_number=slopes.condition, raw_passes=ab.back.raw_passes,
            seconds=0.0, strategy=plan, cross_products_from=ab.back.moments_from, python_budget_bytes=ab.budget,
            largest_python_allocation_bytes=int(ab.back.python_bytes), rss_from=rss_from,
            max_mean_demeaned=float(np.max(np.abs(sum_e) / np.sqrt(ab.mom.n * np.maximum(red.sumsq, 1e-300)))),
            bytes_to_client=eng.bytes_to_client, singleton_rounds=red.rounds,
            filter="materialised once (volatile)" if session.spec.volatile_where else None,
        )

    def _warnings(self, ab: Absorption, slopes: Slopes, inf: Inference) -> list[str]:
        proj, out = ab.proj, []
        if not proj.converged and proj.iterations == 0:
            out.append("NOT CONVERGED: no projection was run (--max-iter 0), so the fixed effects are not fully "
                       "removed: these are not fixed-effects estimates (raise --max-iter)")
        elif not proj.converged:
            out.append(f"NOT CONVERGED: the projections stopped after {proj.iterations} iterations with change "
                       f"{proj.change:.2e} > tol {self.settings['tol']:.0e}; the estimates are not reliable "
                       "(raise --max-iter)")
        if slopes.condition > ILL_CONDITIONED:
            digits = max(0, int(16 - 2 * np.log10(slopes.condition)))
            out.append(f"the demeaned regressors are nearly collinear (condition number {slopes.condition:.2e} of "
                       f"the scaled regressors; about {digits} significant digits survive in the slopes)")
        return out + cluster_warnings(inf, ab.mom.n)

    def _result(self, session: Session, ab: Absorption, slopes: Slopes, inf: Inference, solver: SolverReport,
                effects: dict[str, Any]) -> FitResult:
        spec, red, q = session.spec, ab.red, ab.mom.q
        names = [spec.y, *spec.x]
        sum_t = red.rhs[0].sum(axis=0)
        tss = float(red.sumsq[0] - sum_t[0] ** 2 / float(red.counts[0].sum()))
        fe = [EffectInfo(name, list(cols), int(len(red.counts[d])),
                         int(ab.absorbed.per_effect[d] + (1 if d == 0 else 0)),
                         all(red.nested[d]) if spec.cluster else None)
              for d, (name, cols) in enumerate(zip(spec.fe_names, spec.fe))]
        stats = FitStatistics(
            rss=slopes.rss, df_resid=int(ab.mom.n - len(slopes.keep) - ab.absorbed.total),
            r2_within=1.0 - slopes.rss / q[0, 0] if q[0, 0] > 0 else float("nan"),
            r2_full_model=1.0 - slopes.rss / tss if tss > 0 else float("nan"),
        )
        return FitResult(
            estimator=self.name, outcome=spec.y, names=[names[j] for j in slopes.keep], coef=slopes.beta,
            inference=inf, fit=stats, rows=row_counts(ab.first, red.n_complete, ab.lost, red.singletons, ab.mom.n),
            fe=fe, absorbed=ab.absorbed.total, components=ab.n_comp,
            dropped=[{"name": names[j], "reason": why} for j, why in slopes.dropped],
            solver=replace(solver, seconds=self.seconds()),
            effects=effects, source=session.src.location, where=spec.where, weights=spec.weights,
            warnings=self._warnings(ab, slopes, inf), timings=dict(ab.back.timings),
            extras={"categorical": spec.categorical_levels},
        )
