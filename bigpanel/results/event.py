"""The result of an event study by imputation: estimates by event time, the overall average,
the pre-trend test, where the rows went and how the solves went."""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from ..version import __version__
from .result import number


@dataclass(frozen=True)
class EventEstimate:
    """One event time's estimate (``k`` None: the average over every imputed treated row).
    ``estimated_by`` is ``imputation`` (k >= 0) or ``pre-trend fit`` (a lead, k < 0);
    ``rows`` counts the treated rows averaged, or the untreated rows at the lead."""

    k: int | None
    estimate: float | None
    std_error: float | None
    ci_low: float | None
    ci_high: float | None
    rows: int
    estimated_by: str

    def to_dict(self) -> dict[str, Any]:
        out = {key: (number(v) if isinstance(v, float) else v) for key, v in asdict(self).items()}
        out["n"] = out.pop("rows")
        if self.k is None:
            del out["k"]
        return out


@dataclass
class EventResult:
    """An event study by the imputation estimator (Borusyak, Jaravel and Spiess 2024).

    ``event_time`` holds the leads (pre-trend fit) and event times 0..HI (imputation) in order;
    ``covariance`` the covariance of the imputation estimates, in the order of
    ``covariance_labels`` (event times, then ``overall``); ``pretrend`` the Wald test that the
    leads are zero (None without leads). The dictionaries are JSON sections as they are.
    """

    outcome: str
    design: dict[str, Any]
    event_time: list[EventEstimate]
    overall: EventEstimate | None
    covariance: np.ndarray
    covariance_labels: list[str]
    pretrend: dict[str, Any] | None
    rows: dict[str, Any]
    panel: dict[str, Any]
    untreated_fit: dict[str, Any]
    variance: dict[str, Any]
    solver: dict[str, Any]
    source: str
    where: str | None
    warnings: list[str] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)

    @property
    def estimates(self) -> dict[int, float | None]:
        """The estimate at each event time (leads and imputation)."""
        return {e.k: e.estimate for e in self.event_time if e.k is not None}

    def to_dict(self) -> dict[str, Any]:
        """Everything as plain JSON-ready values."""
        return {
            "bigpanel_version": __version__,
            "estimator": "event study by imputation (Borusyak, Jaravel and Spiess 2024)",
            "source": self.source,
            "where": self.where,
            "outcome": self.outcome,
            **self.design,
            "event_time": [e.to_dict() for e in self.event_time],
            "overall": self.overall.to_dict() if self.overall is not None else None,
            "covariance": {"labels": self.covariance_labels,
                           "matrix": [[number(v) for v in row] for row in self.covariance]},
            "pretrend": self.pretrend,
            "variance": self.variance,
            "rows": self.rows,
            "panel": self.panel,
            "untreated_fit": self.untreated_fit,
            "solver": self.solver,
            "warnings": self.warnings,
            "timings": {k: round(v, 4) for k, v in self.timings.items()},
        }

    def to_json(self, indent: int | None = 2) -> str:
        """The result as a JSON document."""
        return json.dumps(self.to_dict(), indent=indent)

    def summary(self, width: int = 100) -> str:
        """A readable plain-text report (the command's table without colour)."""
        from .event_report import render_event_text

        return render_event_text(self, width=width)

    def __repr__(self) -> str:
        post = sum(1 for e in self.event_time if e.estimated_by == "imputation")
        return f"<EventResult {self.outcome}: {post} event times, overall {self.overall and self.overall.estimate}>"
