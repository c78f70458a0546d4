"""OLS with a constant on a transformed panel: the shared step of between, first differences and
random effects (and the Mundlak regression).

A panel estimator leaves the view ``bp_tilde`` (see :mod:`bigpanel.passes.panel`); this module
reads its cross-products (and per-cluster sums, or the HC1 meat) and solves OLS on e0 over
e1..eK and the constant's column e(K+1). The constant is reported on the original scale,
const = c + m_y - m_x'b (m the shifts), with its variance from the gradient (1, -m_x); the F
test is on the slopes only. df = N - K - 1 with N the transformed observations. In each,
s^2 = sum w u^2 / df with df counted in rows, and the robust scores are w u x (weighted least
squares' sandwich). With weights and a constant column of ones (between, first differences)
the residual s.e. is that of a row of mean weight, independent of the weights' scale.
"""

from __future__ import annotations

from abc import abstractmethod
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import BigPanelError
from ..numerics.dof import NO_EFFECTS
from ..numerics.inference import Inference, infer, with_variance
from ..numerics.solve import solve_slopes
from ..passes.moments import cross_products, meat_cluster, meat_hc, ols_residuals
from ..passes.reduce import Start, create_views, incomplete, start
from ..results.result import EffectInfo, FitResult, FitStatistics, SolverReport
from .base import Estimator, Session, cluster_warnings, opened, row_counts


@dataclass(frozen=True)
class TransformedFit:
    """Estimates of OLS on a transformed panel, with their variance."""

    names: list[str]
    coef: np.ndarray
    inf: Inference
    nobs: int
    rss: float
    r2: float
    dropped: list[dict[str, str]]

    @property
    def df_resid(self) -> int:
        return self.nobs - len(self.names)


def ols_with_constant(eng: Any, spec: Any, k: int, shift: np.ndarray, unit_constant: bool = False) -> TransformedFit:
    """OLS on ``bp_tilde`` with k regressors and the constant (see the module docstring);
    ``unit_constant`` says the constant's column is ones (so its weighted square sum is the total weight)."""
    mom = cross_products(eng, spec, k + 2)
    mean_weight = float(mom.q[k + 1, k + 1]) / mom.n if spec.weights and unit_constant else 1.0
    slopes = solve_slopes(mom.q, mom.n, np.zeros(k + 2), np.diag(mom.q))
    names_all = [spec.y, *spec.x, "const"]
    keep = slopes.keep
    if k + 1 not in keep:
        raise BigPanelError("the constant is collinear with the regressors")
    meat, terms = None, []
    res = ols_residuals(k + 2, keep, slopes.beta)
    if spec.variance == "hc1":
        meat = meat_hc(eng, spec, res)
    elif spec.variance == "cr1":
        terms = meat_cluster(eng, spec, res)
    raw = infer(slopes.beta, slopes.bread, slopes.rss, mom.n, NO_EFFECTS, spec.variance, meat=meat,
                cluster_terms=terms, cluster_names=spec.cluster, mean_weight=mean_weight)
    c = keep.index(k + 1)
    grad = np.eye(len(keep))
    grad[c] = [1.0 if j == k + 1 else -shift[j] for j in keep]
    beta = grad @ slopes.beta
    beta[c] += shift[0]
    inf = with_variance(raw, beta, grad @ raw.vcov @ grad.T, tested=[a for a in range(len(keep)) if a != c])
    tss = mom.q[0, 0] - mom.q[0, k + 1] ** 2 / mom.q[k + 1, k + 1]
    dropped = [{"name": names_all[j], "reason": why} for j, why in slopes.dropped]
    return TransformedFit([names_all[j] for j in keep], beta, inf, mom.n, slopes.rss,
                          1.0 - slopes.rss / tss if tss > 0 else float("nan"), dropped)


@dataclass(frozen=True)
class PanelOutcome:
    """What a panel estimator's own step returns: the fit, the rows it used from the sample
    (before any differencing), the unit count and its sections of the result."""

    fit: TransformedFit
    sample_rows: int
    units: int | None
    extras: dict[str, Any]


class PanelEstimator(Estimator):
    """Between, first differences and random effects: the unit is the one ``fe`` column; the
    views and shifts are opened, :meth:`estimate` transforms and fits, the result is built here."""

    def fit(self) -> FitResult:
        if len(self.request.fe) != 1:
            raise BigPanelError(f"--estimator {self.name} takes exactly one --fe: the unit (one column, or columns "
                                "joined by :)")
        before = self.prepare()
        with opened(self.request, time=self.settings.get("time")) as session:
            create_views(session.eng, session.spec, materialize=session.src.kind == "csv")
            first = start(session.eng, session.spec, session.src.kind)
            out = self.estimate(session, first, before)
            lost = incomplete(session.eng, session.spec) if out.sample_rows < first.n_filtered else {}
        return self._result(session, first, out, lost, before)

    def prepare(self) -> Any:
        """Work before the engine opens (random effects: its within fit); None by default."""
        return None

    @abstractmethod
    def estimate(self, session: Session, first: Start, before: Any) -> PanelOutcome:
        """Transform the panel into ``bp_tilde`` and fit it (``before``: what :meth:`prepare` returned)."""

    def passes_before(self, before: Any) -> int:
        """Raw passes of :meth:`prepare`'s work (added to the report)."""
        return 0

    def _result(self, session: Session, first: Start, out: PanelOutcome, lost: dict[str, int],
                before: Any) -> FitResult:
        spec, fit, eng = session.spec, out.fit, session.eng
        solver = SolverReport(engine=eng.name, path=self.name, iterations=0, change=0.0, tol=None, converged=True,
                              condition_number=None, raw_passes=eng.raw_passes + self.passes_before(before),
                              seconds=self.seconds())
        return FitResult(
            estimator=self.name, outcome=spec.y, names=fit.names, coef=fit.coef, inference=fit.inf,
            fit=FitStatistics(rss=fit.rss, df_resid=int(fit.df_resid), r2_transformed=fit.r2),
            rows=row_counts(first, out.sample_rows, lost, 0, fit.nobs),
            fe=[EffectInfo(spec.fe_names[0], list(spec.fe[0]), out.units, 0, None, role="unit")],
            absorbed=0, components=None, dropped=fit.dropped, solver=solver, effects={},
            source=session.src.location, where=spec.where, weights=spec.weights,
            warnings=cluster_warnings(fit.inf, fit.nobs), timings=dict(eng.timings),
            extras={**out.extras, "categorical": spec.categorical_levels},
        )
