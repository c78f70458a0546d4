"""A saved fit read back: the JSON of ``FitResult.to_json()`` turned into a :class:`FitResult` again.

The typed parts (the inference, fit statistics, row counts, effects, solver report) are rebuilt
from their JSON sections and every other top-level key (an estimator's own section) goes back to
``extras``, so ``load(path).to_dict()`` equals the saved document. Two things are not in the
file and so not in the loaded result: the estimated effects themselves (``effects`` is empty;
``effects_summary()`` gives the saved summary; ``bigpanel effects`` writes them) and the
timings beyond their rounded values. ``schema_version`` tells the layout (results/fit.schema.json);
files written before it existed (no ``schema_version``, no ``call``) load too.
"""

from __future__ import annotations

import json
from dataclasses import fields
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import BigPanelError
from ..numerics.inference import Inference
from .result import SCHEMA_VERSION, EffectInfo, FitResult, FitStatistics, RowCounts, SolverReport

# top-level keys that the typed parts hold (or that are computed from them); the rest are extras
CORE_KEYS = ("schema_version", "bigpanel_version", "estimator", "source", "where", "weights", "formula", "outcome",
             "nobs", "coefficients", "vcov", "fixed_effects", "absorbed_parameters", "components", "fit", "rows",
             "dropped_regressors", "solver", "effects_summary", "warnings", "timings", "call")


def schema() -> dict[str, Any]:
    """The JSON Schema of saved fits (``bigpanel/results/fit.schema.json``)."""
    return json.loads(resources.files(__package__).joinpath("fit.schema.json").read_text())


def _floats(values: list[Any]) -> np.ndarray:
    """A float array from JSON numbers, null read as NaN."""
    return np.array([np.nan if v is None else v for v in values], dtype=float)


def _inference(doc: dict[str, Any], names: list[str]) -> Inference:
    vcov, stats, coefs = doc["vcov"], doc["fit"], doc["coefficients"]

    def column(key: str) -> np.ndarray:
        return _floats([coefs[n][key] for n in names])

    matrix = np.array([_floats(row) for row in vcov["matrix"]], dtype=float).reshape(len(names), len(names))
    nan = float("nan")
    return Inference(
        kind=vcov["type"], vcov=matrix, std_error=column("std_error"), t=column("t"), p=column("p_value"),
        ci_low=column("ci_low"), ci_high=column("ci_high"), df=vcov["df"],
        f_stat=nan if stats["f_stat"] is None else stats["f_stat"], f_df=tuple(stats["f_df"]),
        f_p=nan if stats["f_p_value"] is None else stats["f_p_value"],
        sigma=nan if stats["sigma"] is None else stats["sigma"],
        small_sample=nan if vcov["small_sample_factor"] is None else vcov["small_sample_factor"],
        clusters=dict(vcov["clusters_per_column"] or {}), psd_fixed=bool(vcov["eigenvalue_fix"]),
    )


def _statistics(stats: dict[str, Any]) -> FitStatistics:
    nan = float("nan")
    return FitStatistics(rss=nan if stats["rss"] is None else stats["rss"], df_resid=stats["df_resid"],
                         **{k: nan if stats[k] is None else stats[k] for k in ("r2_within", "r2_full_model",
                                                                                 "r2_transformed")})


def _solver(report: dict[str, Any]) -> SolverReport:
    known = {f.name for f in fields(SolverReport)}
    return SolverReport(**{k: v for k, v in report.items() if k in known})


def from_dict(doc: dict[str, Any]) -> FitResult:
    """The :class:`FitResult` a saved document describes (see the module docstring)."""
    version = doc.get("schema_version", 0)
    if not isinstance(version, int) or version > SCHEMA_VERSION:
        raise BigPanelError(f"this fit was saved with schema version {version!r}, newer than this bigpanel reads "
                            f"({SCHEMA_VERSION}): upgrade bigpanel")
    missing = [k for k in CORE_KEYS if k not in doc and k not in ("schema_version", "call")]
    if missing:
        raise BigPanelError(f"not a saved bigpanel fit: no {missing[0]!r}")
    names = list(doc["vcov"]["names"])
    coef = _floats([doc["coefficients"][n]["estimate"] for n in names])
    return FitResult(
        estimator=doc["estimator"], outcome=doc["outcome"], names=names, coef=coef,
        inference=_inference(doc, names), fit=_statistics(doc["fit"]), rows=RowCounts(**doc["rows"]),
        fe=[EffectInfo(**d) for d in doc["fixed_effects"]], absorbed=doc["absorbed_parameters"],
        components=doc["components"], dropped=list(doc["dropped_regressors"]), solver=_solver(doc["solver"]),
        effects={}, source=doc["source"], where=doc["where"], weights=doc["weights"],
        warnings=list(doc["warnings"]), timings=dict(doc["timings"]),
        extras={k: v for k, v in doc.items() if k not in CORE_KEYS}, call=dict(doc.get("call") or {}),
        saved_effects_summary=dict(doc["effects_summary"]), version=doc["bigpanel_version"],
        per_coefficient=_per_coefficient(doc["coefficients"]),
    )


def _per_coefficient(coefficients: dict[str, dict[str, Any]]) -> dict[str, dict[str, float]]:
    """The numbers a coefficient's entry holds beyond the standard six (the bootstrap's)."""
    standard = {"estimate", "std_error", "t", "p_value", "ci_low", "ci_high"}
    extra = {name: {k: v for k, v in entry.items() if k not in standard} for name, entry in coefficients.items()}
    return {name: values for name, values in extra.items() if values}


def read_document(path: str | Path) -> dict[str, Any]:
    """The JSON object of a saved fit, checked only for ``coefficients`` and ``nobs``; a file that cannot be
    read, is not JSON or is not a fit raises ``BigPanelError`` naming it."""
    try:
        doc = json.loads(Path(path).read_text())
    except OSError as exc:
        raise BigPanelError(f"cannot read {path}: {exc.strerror or exc}") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise BigPanelError(f"{path} is not valid JSON ({exc})") from None
    if not isinstance(doc, dict) or "coefficients" not in doc or "nobs" not in doc:
        raise BigPanelError(f"{path} is not a saved bigpanel fit (no 'coefficients' or 'nobs')")
    return doc


def load(path: str | Path) -> FitResult:
    """Read a fit saved with ``bigpanel fit ... --save FILE.json`` (or ``FitResult.to_json()``)."""
    doc = read_document(path)
    try:
        return from_dict(doc)
    except BigPanelError as exc:
        raise BigPanelError(f"{path}: {exc}") from None
    except (KeyError, TypeError, ValueError) as exc:
        raise BigPanelError(f"{path} is not a saved bigpanel fit (bad or missing {exc})") from None
