"""The result of a fit: numbers, what was dropped, how the solve went.

A :class:`FitResult` is made of typed parts: the :class:`~bigpanel.numerics.inference.Inference`
(variance, tests, intervals), :class:`FitStatistics`, :class:`RowCounts`, one
:class:`EffectInfo` per fixed effect and the :class:`SolverReport`. Sections that belong
to one estimator only (random-effects variance components, Hausman, first differences,
categorical levels) are kept in ``extras`` under their JSON key.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import pyarrow as pa

from ..version import __version__
from ..numerics.inference import Inference

SCHEMA_VERSION = 1  # of the saved JSON; results/fit.schema.json describes it


def number(v: float | None) -> float | None:
    """A finite float, or None (JSON has no NaN or infinity)."""
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


@dataclass(frozen=True)
class RowCounts:
    """Where the rows went: ``source`` rows, ``after_filter`` the ``--where`` filter, then
    ``dropped_incomplete`` for a missing or unusable value (``incomplete``: per column, a row
    may count under several), ``dropped_singletons``, and ``used`` in the fit."""

    source: int
    after_filter: int
    incomplete: dict[str, int]
    dropped_incomplete: int
    dropped_singletons: int
    used: int

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class EffectInfo:
    """One fixed effect (or, for the panel estimators, the unit): its columns, level count,
    the parameters it absorbs and whether every level lies inside one cluster."""

    name: str
    columns: list[str]
    levels: int | None
    parameters: int
    nested_in_cluster: bool | None
    role: str | None = None  # "unit" for between, first differences and random effects

    def to_dict(self) -> dict[str, Any]:
        out = asdict(self)
        if self.role is None:
            del out["role"]
        return out


@dataclass(frozen=True)
class FitStatistics:
    """Residual sum of squares and its degrees of freedom, and the R-squared that apply:
    ``r2_within`` (after the effects are removed) and ``r2_full_model`` (with them) for the
    within fit, ``r2_transformed`` (of the transformed regression) for the others."""

    rss: float
    df_resid: int
    r2_within: float = float("nan")
    r2_full_model: float = float("nan")
    r2_transformed: float = float("nan")


@dataclass(frozen=True)
class SolverReport:
    """How the fit ran. ``path`` names the method; ``raw_passes`` counts the passes over the
    rows. The fields after ``seconds`` belong to the within fit's projections and are left
    out of the JSON when not set."""

    engine: str
    path: str
    iterations: int
    change: float
    tol: float | None
    converged: bool
    condition_number: float | None
    raw_passes: int
    seconds: float
    strategy: dict[str, Any] | None = None
    cross_products_from: str | None = None
    python_budget_bytes: int | None = None
    largest_python_allocation_bytes: int | None = None
    rss_from: str | None = None
    max_mean_demeaned: float | None = None
    bytes_to_client: int | None = None
    singleton_rounds: int | None = None
    filter: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {k: v for k, v in asdict(self).items() if v is not None or k in ("tol", "condition_number")}


@dataclass
class FitResult:
    """Estimates, variance, fit statistics and diagnostics of one fit.

    ``coef`` and the arrays of ``inference`` are over the kept regressors in ``names``;
    ``effects[name]`` is an Arrow table of the estimated effects of one dimension (see
    :mod:`bigpanel.numerics.effects` for the normalisation).
    """

    estimator: str
    outcome: str
    names: list[str]
    coef: np.ndarray
    inference: Inference
    fit: FitStatistics
    rows: RowCounts
    fe: list[EffectInfo]
    absorbed: int
    components: int | None
    dropped: list[dict[str, str]]
    solver: SolverReport
    effects: dict[str, pa.Table]
    source: str
    where: str | None
    weights: str | None = None
    warnings: list[str] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)
    extras: dict[str, Any] = field(default_factory=dict)
    call: dict[str, Any] = field(default_factory=dict)  # what bigpanel.fit was given (results/call.py)
    saved_effects_summary: dict[str, Any] | None = None  # a loaded fit's summary (its effect tables are not saved)
    version: str = __version__  # of the bigpanel that made the fit
    per_coefficient: dict[str, dict[str, float]] = field(default_factory=dict)  # more numbers in a coefficient's JSON

    @property
    def params(self) -> dict[str, float]:
        """Slopes by regressor name."""
        return dict(zip(self.names, map(float, self.coef)))

    @property
    def std_error(self) -> np.ndarray:
        return self.inference.std_error

    @property
    def vcov(self) -> np.ndarray:
        return self.inference.vcov

    @property
    def t(self) -> np.ndarray:
        return self.inference.t

    @property
    def p(self) -> np.ndarray:
        return self.inference.p

    @property
    def ci_low(self) -> np.ndarray:
        return self.inference.ci_low

    @property
    def ci_high(self) -> np.ndarray:
        return self.inference.ci_high

    @property
    def nobs(self) -> int:
        return self.rows.used

    @property
    def formula(self) -> str:
        """The model as fitted, in the formula language (with its instruments' clause for IV)."""
        regs = self.names + [d["name"] for d in self.dropped if d.get("role") != "instrument"]
        iv = self.extras.get("instrumental_variables")
        clause = f", {' + '.join(iv['endogenous'])} instrumented by {' + '.join(iv['instruments'])}" if iv else ""
        return f"{self.outcome} ~ {' + '.join(regs)}{clause}"

    def effects_summary(self) -> dict[str, dict[str, float | int | None]]:
        """Mean (unweighted over levels), sd, min and max of each dimension's effects (for a loaded
        fit, the summary its file holds)."""
        if self.saved_effects_summary is not None:
            return self.saved_effects_summary
        out = {}
        for name, table in self.effects.items():
            col = [c for c in table.column_names if c.startswith("effect")][-1]
            v = table.column(col).to_numpy()
            out[name] = {
                "levels": int(len(v)),
                "mean": number(v.mean()),
                "sd": number(v.std(ddof=1)) if len(v) > 1 else None,
                "min": number(v.min()),
                "max": number(v.max()),
            }
        return out

    def to_dict(self) -> dict[str, Any]:
        """Everything but the effect tables, as plain JSON-ready values."""
        inf = self.inference
        coefs = {
            name: {
                "estimate": number(self.coef[i]),
                "std_error": number(inf.std_error[i]),
                "t": number(inf.t[i]),
                "p_value": number(inf.p[i]),
                "ci_low": number(inf.ci_low[i]),
                "ci_high": number(inf.ci_high[i]),
                **{key: number(v) for key, v in self.per_coefficient.get(name, {}).items()},
            }
            for i, name in enumerate(self.names)
        }
        return {
            "schema_version": SCHEMA_VERSION,
            "bigpanel_version": self.version,
            "estimator": self.estimator,
            "source": self.source,
            "where": self.where,
            "weights": self.weights,
            "formula": self.formula,
            "outcome": self.outcome,
            "nobs": self.nobs,
            "coefficients": coefs,
            "vcov": {
                "type": inf.kind,
                "names": self.names,
                "matrix": [[number(v) for v in row] for row in inf.vcov],
                "df": inf.df,
                "small_sample_factor": number(inf.small_sample),
                "cluster": " x ".join(inf.clusters) or None,
                "clusters": min(inf.clusters.values()) if inf.clusters else None,
                "clusters_per_column": inf.clusters,
                "eigenvalue_fix": inf.psd_fixed,
            },
            "fixed_effects": [d.to_dict() for d in self.fe],
            "absorbed_parameters": self.absorbed,
            "components": self.components,
            "fit": {
                "r2_within": number(self.fit.r2_within),
                "r2_full_model": number(self.fit.r2_full_model),
                "r2_transformed": number(self.fit.r2_transformed),
                "rss": number(self.fit.rss),
                "sigma": number(inf.sigma),
                "df_resid": self.fit.df_resid,
                "f_stat": number(inf.f_stat),
                "f_df": list(inf.f_df),
                "f_p_value": number(inf.f_p),
            },
            "rows": self.rows.to_dict(),
            "dropped_regressors": self.dropped,
            "solver": self.solver.to_dict(),
            "effects_summary": self.effects_summary(),
            "warnings": self.warnings,
            "timings": {k: round(v, 4) for k, v in self.timings.items()},
            "call": self.call,
            **self.extras,
        }

    def to_json(self, indent: int | None = 2) -> str:
        """The result as a JSON document."""
        return json.dumps(self.to_dict(), indent=indent)

    def summary(self, width: int = 100) -> str:
        """A readable plain-text report (the CLI's table without colour)."""
        from .report import render_text

        return render_text(self, width=width)

    def coefficients(self, level: float = 0.95) -> pa.Table:
        """One row per kept regressor: term, estimate, std_error, t, p_value, ci_low, ci_high (the interval
        at ``level`` on the fit's t degrees of freedom), as a pyarrow Table (``.to_pandas()``,
        ``polars.from_arrow``)."""
        from .frames import coefficient_table

        return coefficient_table(self, level)

    def vcov_table(self) -> pa.Table:
        """The variance matrix labelled: a ``term`` column, then one column per term (see ``vcov``)."""
        from .frames import vcov_table

        return vcov_table(self)

    def __rich__(self) -> Any:
        """The terminal report, for rich consoles (``rich.print(res)``)."""
        from .report import fit_renderable

        return fit_renderable(self)

    def _repr_html_(self) -> str:
        """A compact HTML table for notebooks: every term, then the sample, variance and fit."""
        from .display import fit_html

        return fit_html(self)

    def __repr__(self) -> str:
        return f"<FitResult {self.formula} | {', '.join(d.name for d in self.fe)}; N={self.nobs}>"
