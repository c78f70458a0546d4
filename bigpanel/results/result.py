"""The result of a fit: numbers, what was dropped, how the solve went."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pyarrow as pa

from .. import __version__


def _num(v: float) -> float | None:
    v = float(v)
    return v if math.isfinite(v) else None


@dataclass
class FitResult:
    """Estimates, variance, fit statistics and diagnostics of one within fit.

    ``coef``, ``std_error``, ``vcov`` and friends are over the kept regressors in
    ``names``; ``effects[name]`` is an Arrow table of the estimated effects of one
    dimension (see :mod:`bigpanel.effects` for the normalisation).
    """

    outcome: str
    names: list[str]
    coef: np.ndarray
    std_error: np.ndarray
    vcov: np.ndarray
    t: np.ndarray
    p: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    vcov_type: str
    cluster: str | None
    n_clusters: int | None
    cluster_counts: dict[str, int]
    psd_fixed: bool
    df: float
    small_sample: float
    nobs: int
    fe: list[dict[str, Any]]
    absorbed: int
    components: int | None
    r2_within: float
    r2_full_model: float
    rss: float
    sigma: float
    df_resid: int
    f_stat: float
    f_df: tuple[float, float]
    f_p: float
    rows: dict[str, Any]
    dropped: list[dict[str, str]]
    solver: dict[str, Any]
    effects: dict[str, pa.Table]
    source: str
    where: str | None
    warnings: list[str] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)
    estimator: str = "within"
    weights: str | None = None
    extras: dict[str, Any] = field(default_factory=dict)
    r2_transformed: float = float("nan")

    @property
    def params(self) -> dict[str, float]:
        """Slopes by regressor name."""
        return dict(zip(self.names, map(float, self.coef)))

    @property
    def formula(self) -> str:
        regs = self.names + [d["name"] for d in self.dropped]
        return f"{self.outcome} ~ {' + '.join(regs)}"

    def effects_summary(self) -> dict[str, dict[str, float]]:
        """Mean (unweighted over levels), sd, min and max of each dimension's effects."""
        out = {}
        for name, table in self.effects.items():
            col = [c for c in table.column_names if c.startswith("effect")][-1]
            v = table.column(col).to_numpy()
            out[name] = {
                "levels": int(len(v)),
                "mean": _num(v.mean()),
                "sd": _num(v.std(ddof=1)) if len(v) > 1 else None,
                "min": _num(v.min()),
                "max": _num(v.max()),
            }
        return out

    def to_dict(self) -> dict[str, Any]:
        """Everything but the effect tables, as plain JSON-ready values."""
        coefs = {
            name: {
                "estimate": _num(self.coef[i]),
                "std_error": _num(self.std_error[i]),
                "t": _num(self.t[i]),
                "p_value": _num(self.p[i]),
                "ci_low": _num(self.ci_low[i]),
                "ci_high": _num(self.ci_high[i]),
            }
            for i, name in enumerate(self.names)
        }
        return {
            "bigpanel_version": __version__,
            "estimator": self.estimator,
            "source": self.source,
            "where": self.where,
            "weights": self.weights,
            "formula": self.formula,
            "outcome": self.outcome,
            "nobs": self.nobs,
            "coefficients": coefs,
            "vcov": {
                "type": self.vcov_type,
                "names": self.names,
                "matrix": [[_num(v) for v in row] for row in self.vcov],
                "df": self.df,
                "small_sample_factor": _num(self.small_sample),
                "cluster": self.cluster,
                "clusters": self.n_clusters,
                "clusters_per_column": self.cluster_counts,
                "eigenvalue_fix": self.psd_fixed,
            },
            "fixed_effects": self.fe,
            "absorbed_parameters": self.absorbed,
            "components": self.components,
            "fit": {
                "r2_within": _num(self.r2_within),
                "r2_full_model": _num(self.r2_full_model),
                "r2_transformed": _num(self.r2_transformed),
                "rss": _num(self.rss),
                "sigma": _num(self.sigma),
                "df_resid": self.df_resid,
                "f_stat": _num(self.f_stat),
                "f_df": list(self.f_df),
                "f_p_value": _num(self.f_p),
            },
            "rows": self.rows,
            "dropped_regressors": self.dropped,
            "solver": self.solver,
            "effects_summary": self.effects_summary(),
            "warnings": self.warnings,
            "timings": {k: round(v, 4) for k, v in self.timings.items()},
            **self.extras,
        }

    def to_json(self, indent: int | None = 2) -> str:
        """The result as a JSON document."""
        return json.dumps(self.to_dict(), indent=indent)

    def summary(self, width: int = 100) -> str:
        """A readable plain-text report (the CLI's table without colour)."""
        from .report import render_text

        return render_text(self, width=width)

    def __repr__(self) -> str:
        return f"<FitResult {self.formula} | {', '.join(d['name'] for d in self.fe)}; N={self.nobs}>"
