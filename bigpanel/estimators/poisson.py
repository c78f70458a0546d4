"""Poisson pseudo-maximum likelihood with high-dimensional fixed effects (Santos Silva and
Tenreyro 2006, "The log of gravity", Review of Economics and Statistics).

Model: E[y_i | x_i, levels] = exp(x_i'b + a_1[level_1(i)] + ... + a_k[level_k(i)]), y_i >= 0
(counts or any non-negative number: the estimator only needs the mean to be right). The
estimates solve the Poisson score equations sum_i p_i (y_i - mu_i) [x_i, dummies] = 0 (p the
prior weights of ``--weights``), by iteratively reweighted least squares: each step is the
within fit of the working outcome z = eta + (y - mu)/mu on x with weights p mu
(:mod:`bigpanel.estimators.irls`). The last step's cross-products X~'WX~ and the scores are
summed row by row (compensated) at the last weights, with X~ demeaned under those weights.

Variance (B = (X~' W X~)^-1, N rows, K slopes, P absorbed parameters as for the linear fit):

* ``hc1`` (the default): N / (N - K - P) * B (sum_i s_i s_i') B, with the score
  s_i = w_i u_i x~_i of the last weighted step, which at convergence is p_i (y_i - mu_i) x~_i;
* ``cr1``: G / (G - 1) * (N - 1) / (N - K - P_c) * B (sum_c g_c g_c') B with g_c the sum of the
  scores in cluster c; several cluster columns by inclusion-exclusion (Cameron, Gelbach and
  Miller 2011), t on min G - 1 df;
* ``classical``: B, the Poisson model's own variance (variance equal to the mean).

The t tests use the linear fit's degrees of freedom (N - K - P; G - 1 clustered).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pyarrow as pa

from ..errors import BigPanelError
from ..numerics.dof import Absorbed, count_absorbed
from ..numerics.effects import effect_tables, recover
from ..numerics.inference import Inference, infer
from ..numerics.irls import fit_summary
from ..numerics.project import Projection
from ..numerics.solve import ILL_CONDITIONED, Slopes
from ..passes.irls import FinalSums, create_demeaned, final_pass, store_state
from ..passes.moments import meat_cluster, ols_residuals
from ..results.result import EffectInfo, FitResult, FitStatistics, SolverReport
from .absorb import Projections
from .base import Estimator, Session, cluster_warnings, opened, row_counts
from .irls import SEPARATION_SHARE, Run, Sample, irls_slopes, iterate, prepare, working_spec
from .within import PATHS


@dataclass(frozen=True)
class Final:
    """The last step: its sums, slopes, variance and absorbed parameters."""

    sums: FinalSums
    slopes: Slopes
    inf: Inference
    absorbed: Absorbed


class Poisson(Estimator):
    """Poisson pseudo-maximum likelihood with the fixed effects absorbed (module docstring); its
    options: the projections' ``tol``, ``max_iter``, ``singletons``, ``cell_budget`` and
    ``strategy`` as for the within fit, the IRLS stopping rule ``irls_tol`` and
    ``irls_max_iter``, ``exponentiate`` (the effects also as exp(effect)), and
    ``effect_errors``, taken so that ``bigpanel effects`` can ask, answered with a note: the
    Poisson effects get no standard errors."""

    name = "poisson"
    options = {"tol": 1e-8, "max_iter": 10_000, "singletons": "drop", "cell_budget": None, "strategy": None,
               "irls_tol": 1e-8, "irls_max_iter": 100, "exponentiate": False, "effect_errors": False}

    def _error_note(self) -> dict[str, dict[str, str]]:
        if not self.settings["effect_errors"]:
            return {}
        return {"effect_errors": {"note": "the Poisson effects get no standard errors (not computed)"}}

    def fit(self) -> FitResult:
        s = self.settings
        how = Projections.checked(s["tol"], s["max_iter"], s["singletons"], s["cell_budget"], s["strategy"])
        if not (s["irls_tol"] > 0 and np.isfinite(s["irls_tol"])):
            raise BigPanelError(f"--irls-tol must be a positive number, not {s['irls_tol']}")
        if s["irls_max_iter"] < 1:
            raise BigPanelError(f"--irls-max-iter must be 1 or more, not {s['irls_max_iter']}")
        if not self.request.fe:
            raise BigPanelError("--model poisson needs at least one --fe")
        with opened(self.request) as session:
            if session.spec.variance == "classical" and self.request.variance is None:
                session = replace(session, spec=replace(session.spec, variance="hc1"))
            sample = prepare(session, how)
            setup_passes = session.eng.raw_passes
            run = iterate(session.eng, session.spec, sample, how, s["irls_tol"], s["irls_max_iter"])
            final = self._final(session, sample, run)
            effects = self._effects(session, sample, run, final)
            solver = self._solver(session, sample, run, final)
            stats = self._statistics(session, sample, run, final, setup_passes)
        return self._result(session, sample, run, final, solver, effects, stats)

    def _final(self, session: Session, sample: Sample, run: Run) -> Final:
        """The compensated pass at the last weights (the effects solved, the predictor unchanged),
        the slopes (one more IRLS step), the meat of the scores and the variance."""
        eng, spec = session.eng, session.spec
        coef = {**sample.coef, **{f"b{j}": float(b) for j, b in zip(run.keep, run.beta)}}
        store_state(eng, spec, sample.keys, run.f, run.a, coef)
        create_demeaned(eng, spec)
        sums = final_pass(eng, spec)
        slopes, keep = irls_slopes(sums.q, run.sums, run.keep or None)  # none yet: a single step
        meat, terms = None, []
        if spec.variance == "hc1":
            meat = sums.meat[np.ix_([j - 1 for j in keep], [j - 1 for j in keep])]
        elif spec.variance == "cr1":
            work = working_spec(spec)  # scores q_0_j: the working residual is column 0, no slopes taken off
            terms = meat_cluster(eng, work, ols_residuals(len(work.value_aliases), keep, np.zeros(len(keep))))
        absorbed = count_absorbed([t.num_rows for t in sample.keys], sample.n_comp, sample.nested)
        df = sums.rows - len(keep) - absorbed.total
        rss = float(df) if spec.variance == "classical" else slopes.rss  # classical: B alone (s^2 = 1)
        inf = infer(slopes.beta, slopes.bread, rss, sums.rows, absorbed, spec.variance, meat=meat,
                    cluster_terms=terms, cluster_names=spec.cluster)
        return Final(sums, slopes, inf, absorbed)

    def _effects(self, session: Session, sample: Sample, run: Run, final: Final) -> dict[str, pa.Table]:
        """The effects in the linear predictor, normalised as the linear fit's (and exp of them on request)."""
        first, levels = sample.first, run.sums.levels
        shift = np.concatenate([[0.0], first.shift[1:]])  # the outcome enters unshifted
        prior = [lv.constants["p"] for lv in sample.sums.levels]
        fx = recover(Projection(run.a, 0, 0.0, True), prior, final.slopes.keep, final.slopes.beta, shift,
                     sample.labels)
        tables = effect_tables(session.spec, lambda d: sample.keys[d], fx, [lv.rows for lv in levels])
        if self.settings["exponentiate"]:
            tables = {name: t.append_column("exp_effect", pa.array(np.exp(fx[d]), type=pa.float64()))
                      for d, (name, t) in enumerate(tables.items())}
        return tables

    def _solver(self, session: Session, sample: Sample, run: Run, final: Final) -> SolverReport:
        eng = session.eng
        return SolverReport(
            engine=eng.name, path=f"IRLS, each step a weighted within fit: {PATHS[sample.plan.strategy]}",
            iterations=run.steps, change=run.last.deviance if run.last else float("nan"), tol=self.settings["irls_tol"],
            converged=run.converged and run.projections_converged, condition_number=final.slopes.condition,
            raw_passes=eng.raw_passes, seconds=0.0, strategy=sample.plan.to_dict(),
            cross_products_from="demeaned rows at the last weights", python_budget_bytes=None,
            largest_python_allocation_bytes=sample.link_bytes,
            bytes_to_client=eng.bytes_to_client, singleton_rounds=sample.red.rounds,
            filter="materialised once (volatile)" if session.spec.volatile_where else None,
        )

    def _statistics(self, session: Session, sample: Sample, run: Run, final: Final, setup: int) -> dict[str, Any]:
        """The JSON section ``poisson``: deviance, pseudo R-squared, the steps, the separation rows."""
        steps = run.passes_per_step
        return {
            "deviance": run.deviance, **fit_summary(run.deviance, sample.constants, final.sums.stats),
            "iterations": run.steps, "converged": run.converged, "irls_tol": self.settings["irls_tol"],
            "deviance_change": run.last.deviance if run.last else None,
            "coefficient_change": run.last.coefficients if run.last else None,
            "projection_iterations": run.projection_iterations, "projections_converged": run.projections_converged,
            "raw_passes": {"before_the_steps": setup, "per_step": max(set(steps), key=steps.count) if steps else 0,
                           "all": session.eng.raw_passes},
            "dropped_rows": dict(sample.dropped), "levels_with_zero_outcome": dict(sample.zero_levels),
            "small_fitted_means": int(final.sums.stats["small"]), "small_mean_share": SEPARATION_SHARE,
            "variance": {"classical": "model-based (Poisson: variance equal to the mean)", "hc1": "HC1 sandwich",
                         "cr1": "CR1 sandwich"}[session.spec.variance],
            "seconds_in_numpy": round(run.seconds_in_numpy, 4),
        }

    def _warnings(self, run: Run, final: Final, stats: dict[str, Any]) -> list[str]:
        out = []
        if not run.converged:
            moved = (f" (deviance change {run.last.deviance:.1e}, coefficient change {run.last.coefficients:.1e})"
                     if run.last else "")
            out.append(f"NOT CONVERGED: IRLS stopped after {run.steps} steps{moved} above --irls-tol "
                       f"{self.settings['irls_tol']:.0e}; the estimates are not reliable (raise --irls-max-iter; "
                       "coefficients that keep moving can mean that some rows are separated)")
        if not run.projections_converged:
            out.append(f"NOT CONVERGED: the last step's projections stopped with change {run.projection_change:.2e} "
                       f"> tol {self.settings['tol']:.0e} (raise --max-iter)")
        if stats["small_fitted_means"]:
            out.append(f"{stats['small_fitted_means']:,} rows with a zero outcome have a fitted mean below "
                       f"{SEPARATION_SHARE:.0e} times the mean outcome: the regressors (or several effects together) "
                       "may separate them, so that their estimates drift to infinity (Correia, Guimaraes and Zylkin "
                       "2021); this fit does not test for that: check these rows or drop them")
        if final.slopes.condition > ILL_CONDITIONED:
            out.append(f"the demeaned regressors are nearly collinear (condition number {final.slopes.condition:.2e})")
        return out + cluster_warnings(final.inf, final.sums.rows)

    def _result(self, session: Session, sample: Sample, run: Run, final: Final, solver: SolverReport,
                effects: dict[str, pa.Table], stats: dict[str, Any]) -> FitResult:
        spec, slopes = session.spec, final.slopes
        names = [spec.y, *spec.x]
        df_resid = int(final.sums.rows - len(slopes.keep) - final.absorbed.total)
        fe = [EffectInfo(name, list(cols), t.num_rows, int(final.absorbed.per_effect[d] + (1 if d == 0 else 0)),
                         all(sample.nested[d]) if spec.cluster else None)
              for d, (name, cols, t) in enumerate(zip(spec.fe_names, spec.fe, sample.keys))]
        singletons = sample.red.singletons + sample.singletons
        return FitResult(
            estimator=self.name, outcome=spec.y, names=[names[j] for j in slopes.keep], coef=slopes.beta,
            inference=final.inf, fit=FitStatistics(rss=float("nan"), df_resid=df_resid),
            rows=row_counts(sample.first, sample.red.n_complete, sample.lost, singletons, final.sums.rows),
            fe=fe, absorbed=final.absorbed.total, components=sample.n_comp,
            dropped=[{"name": names[j], "reason": why} for j, why in sorted(run.dropped + slopes.dropped)],
            solver=replace(solver, seconds=self.seconds()), effects=effects, source=session.src.location,
            where=spec.where, weights=spec.weights, warnings=self._warnings(run, final, stats),
            timings=dict(session.eng.timings),
            extras={"categorical": spec.categorical_levels, "poisson": stats, **self._error_note()},
        )

