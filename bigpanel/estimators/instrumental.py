"""Instrumental variables with absorbed fixed effects: 2SLS or LIML, with first-stage diagnostics.

The instruments are more value columns: the spec's value columns are the outcome, the
regressors (exogenous and endogenous, in the model's order) and the excluded instruments,
and the within fit's passes and projections (:func:`~bigpanel.estimators.absorb.absorb`)
demean all of them at once. The estimate is small-matrix algebra on their cross-products
(:mod:`bigpanel.numerics.kclass`); the variances of the fit, of its first stages and of the
reduced form come from one set of raw meats (one pass for HC1, none for CR1;
:mod:`bigpanel.numerics.iv_variance`), and the diagnostics follow
(:mod:`bigpanel.numerics.identification`, :mod:`bigpanel.numerics.iv_tests`). The effects,
degrees of freedom, fit statistics and solver report are the within fit's.
"""

from __future__ import annotations

from typing import Any

from ..errors import BigPanelError
from ..numerics.identification import first_stages, identification
from ..numerics.inference import Inference
from ..numerics.iv_tests import anderson_rubin, overidentification
from ..numerics.iv_variance import FIT, RawMeats, iv_residuals
from ..numerics.kclass import KClass, kclass
from ..numerics.solve import Slopes, exact_rss, screen, total_variation
from ..results.result import FitResult, SolverReport
from .absorb import Absorption
from .base import Request, Session
from .bootstrap import BOOTSTRAP_OPTIONS
from .within import Within

WEAK = 10.0  # a first-stage F below this flags weak instruments (Staiger and Stock 1997's rule of thumb)


class InstrumentalVariables(Within):
    """The within fit with endogenous regressors instrumented: ``endogenous`` and ``instruments``
    name the terms, ``liml`` picks LIML over 2SLS; the within fit's projection options apply.
    The wild bootstrap is the OLS fit's (its algebra uses OLS scores), so it is refused here; the
    effects get their classical errors only (those hold as for OLS: the demeaned instruments sum
    to zero within every level, so a level's mean error and the slopes are uncorrelated)."""

    name = "instrumental-variables"
    options = {**{k: v for k, v in Within.options.items() if k not in BOOTSTRAP_OPTIONS},
               "endogenous": (), "instruments": (), "liml": False}
    ols_scores = False
    in_memory = True

    def __init__(self, request: Request, **options: Any) -> None:
        super().__init__(request, **options)
        if not self.settings["endogenous"] or not self.settings["instruments"]:
            raise BigPanelError("instrumental variables need both --endogenous (the regressors to instrument) and "
                                "--instrument (the excluded instruments)")
        self.iv: KClass | None = None
        self.diagnostics: dict[str, Any] = {}

    def spec_options(self) -> dict[str, Any]:
        return {"endogenous": list(self.settings["endogenous"]), "instruments": list(self.settings["instruments"])}

    def _slopes(self, session: Session, ab: Absorption) -> tuple[Slopes, str]:
        """The k-class estimate on the regressors and instruments the effects leave (see screen)."""
        spec, red, q = session.spec, ab.red, ab.mom.q
        total = total_variation(q, float(red.counts[0].sum()), red.rhs[0].sum(axis=0), red.sumsq)
        index = {name: j + 1 for j, name in enumerate(spec.x)}
        endogenous = [index[name] for name in spec.endogenous]
        exogenous, dropped = screen(q, total, [index[n] for n in spec.regressors if index[n] not in endogenous])
        kept_endogenous, more = screen(q, total, endogenous, exogenous)
        excluded, lost = screen(q, total, [index[name] for name in spec.instruments], exogenous)
        names = [spec.y, *spec.x]
        if not kept_endogenous:
            raise BigPanelError("every endogenous regressor is absorbed by the fixed effects or collinear: "
                                + ", ".join(names[j] for j, _ in more))
        if len(excluded) < len(kept_endogenous):
            gone = "".join(f"; {names[j]} {why.split(':')[0]}" for j, why in lost)
            raise BigPanelError(f"fewer valid instruments ({len(excluded)}) than endogenous regressors "
                                f"({len(kept_endogenous)}): the model is not identified{gone}")
        regressors = [j for j in (index[n] for n in spec.regressors) if j in exogenous or j in kept_endogenous]
        self.iv = fit = kclass(q, regressors, kept_endogenous, excluded, bool(self.settings["liml"]))
        slopes = Slopes(regressors, sorted(dropped + more) + lost, fit.beta, fit.bread, fit.rss, fit.condition)
        return exact_rss(slopes, float(q[0, 0]), ab.back.rss)

    def _inference(self, session: Session, ab: Absorption, slopes: Slopes) -> Inference:
        """The fit's variance and the diagnostics, from the raw meats of every residual at once."""
        spec, q, fit = session.spec, ab.mom.q, self.iv
        assert fit is not None
        res = iv_residuals(q, fit)
        raw = ab.back.meat_hc(res) if spec.variance == "hc1" else None
        terms = tuple(ab.back.meat_cluster(res)) if spec.variance == "cr1" else ()
        meats = RawMeats(spec.variance, res, ab.mom.n, ab.absorbed, spec.cluster,
                         float(ab.red.counts[0].sum()) / ab.mom.n, raw, terms)
        names = [spec.y, *spec.x]
        self.diagnostics = {
            "first_stage": first_stages(q, fit, meats, names),
            **identification(q, fit, meats, bool(self.settings["liml"])),
            "overidentification": overidentification(q, fit, meats),
            "anderson_rubin": anderson_rubin(q, fit, meats),
        }
        return meats.infer(slopes.beta, slopes.bread, slopes.rss, {FIT: fit.score_map(len(q))})

    def _result(self, session: Session, ab: Absorption, slopes: Slopes, inf: Inference, solver: SolverReport,
                effects: dict[str, Any]) -> FitResult:
        res = super()._result(session, ab, slopes, inf, solver, effects)
        spec, fit = session.spec, self.iv
        assert fit is not None
        names = [spec.y, *spec.x]
        res.dropped = [dict(d, role="instrument", reason=d["reason"].replace("regressors", "instruments"))
                       if d["name"] in spec.instruments else d for d in res.dropped]
        res.extras["instrumental_variables"] = {
            "method": "LIML" if self.settings["liml"] else "2SLS", "kappa": fit.kappa,
            "endogenous": [names[j] for j in fit.endogenous], "instruments": [names[j] for j in fit.excluded],
            "exogenous": [names[j] for j in fit.exogenous],
        }
        res.extras.update({k: v for k, v in self.diagnostics.items() if v is not None})
        weak = self.diagnostics["weak_identification"]
        if weak["value"] < WEAK:
            res.warnings.append(
                f"the instruments look weak: {weak['statistic']} {weak['value']:.3g} is below {WEAK:g} (the rule of "
                "thumb of Staiger and Stock 1997); the Anderson-Rubin test of the endogenous coefficients stays valid"
                + ("" if self.settings["liml"] else ", and --liml is less biased than 2SLS"))
        return res
