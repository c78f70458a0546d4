"""What every estimator shares: the request, opening the model, warnings and the common result parts.

An estimator is a small object: its class states its ``name``, the options it takes beyond
the shared ones (``options``, with their defaults) and whether the in-memory engine runs
it; :meth:`Estimator.fit` returns a :class:`~bigpanel.results.result.FitResult`. The steps
every estimator takes (open the engine and check the spec, the cluster warnings, the row
counts, the result's timing) exist here once.
"""

from __future__ import annotations

import contextlib
from abc import ABC, abstractmethod
from dataclasses import dataclass
from time import perf_counter
from typing import Any, Callable, ClassVar, Iterator

from ..engines.base import Engine
from ..engines.registry import open_session
from ..engines.source import Source
from ..errors import BigPanelError
from ..model.spec import Spec, build_spec, check_where
from ..numerics.inference import Inference
from ..passes.reduce import Start
from ..results.result import RowCounts

FEW_CLUSTERS = 50  # below this many clusters, CR1 errors are flagged (common practice)


@dataclass(frozen=True)
class Request:
    """The part of a fit request every estimator shares: where the rows are, the model, the
    sample, the variance and the engine (``engine_options``: ``memory_limit``, ``temp_dir``,
    ``threads``, ``delimiter``, ``spark_master``, ``allow_remote``)."""

    source: object  # a path or URL, or an in-process panel (bigpanel.engines.inprocess)
    y: str
    x: list[str]
    fe: list[str]
    cluster: list[str]
    variance: str | None
    where: str | None
    table: object  # a name, or a relation of the DuckDB connection given as the source
    weights: str | None
    engine: str | None
    engine_options: dict[str, Any]
    on_step: Callable[[str], None] | None = None


@dataclass(frozen=True)
class Session:
    """An open engine, the source's schema and the checked spec."""

    eng: Engine
    src: Source
    spec: Spec


@contextlib.contextmanager
def opened(request: Request, *, time: str | None = None, endogenous: list[str] | None = None,
           instruments: list[str] | None = None, regressors_required: bool = True) -> Iterator[Session]:
    """Open the engine on the source, check the spec (and the filter); close the engine after."""
    eng, src = open_session(request.source, request.table, engine=request.engine, on_step=request.on_step,
                            **request.engine_options)
    try:
        spec = build_spec(src, request.y, request.x, request.fe, request.cluster, request.variance, request.where,
                          time=time, weights=request.weights, eng=eng, endogenous=endogenous,
                          instruments=instruments, regressors_required=regressors_required)
        if spec.where:
            check_where(eng, spec.where)
        yield Session(eng, src, spec)
    finally:
        eng.close()


def cluster_warnings(inf: Inference, n: int) -> list[str]:
    """Warnings about the clusters: too few for CR1 to be trusted, more than half the rows
    (errors close to HC1), or a multi-way variance that needed its eigenvalues fixed."""
    out = []
    for name, g in inf.clusters.items():
        if g < FEW_CLUSTERS:
            out.append(f"only {g} clusters in {name}: cluster-robust errors can be unreliable with few clusters")
        elif g > n / 2:
            out.append(
                f"{g:,} clusters in {name} for {n:,} rows: most clusters hold a single row, so the errors are "
                "close to HC1 and say little about correlation within clusters (is this the right cluster column?)"
            )
    if inf.psd_fixed:
        out.append("the multi-way cluster variance was not positive semi-definite; its negative eigenvalues were set "
                   "to zero")
    return out


def row_counts(first: Start, sample_rows: int, lost: dict[str, int], singletons: int, used: int) -> RowCounts:
    """Where the rows went, from the first step's counts, the rows left after listwise deletion
    (``sample_rows``), the per-column breakdown ``lost``, the ``singletons`` dropped and the
    observations ``used`` (rows, or differences for first differences)."""
    return RowCounts(source=first.n_source, after_filter=first.n_filtered,
                     incomplete={k: v for k, v in lost.items() if v},
                     dropped_incomplete=first.n_filtered - sample_rows, dropped_singletons=singletons, used=used)


class Estimator(ABC):
    """One estimator: ``fit()`` runs it on a request with its own options."""

    name: ClassVar[str]
    options: ClassVar[dict[str, Any]] = {}  # the options it takes beyond the shared ones, with their defaults
    in_memory: ClassVar[bool] = False  # whether engine="memory" runs it

    def __init__(self, request: Request, **options: Any) -> None:
        for key, value in options.items():
            if key not in self.options and value not in (None, False):
                takers = [c.name for c in estimators() if key in c.options]
                raise BigPanelError(f"--{key.replace('_', '-')} does not apply to the {self.name} estimator"
                                    + (f" (it is an option of {', '.join(takers)})" if takers else ""))
        if request.engine == "memory" and not self.in_memory:
            raise BigPanelError(f"--estimator {self.name} runs in the SQL engines only, not with --engine memory")
        self.request = request
        self.settings = {k: (options.get(k) if options.get(k) is not None else v) for k, v in self.options.items()}
        self.started = perf_counter()

    def seconds(self) -> float:
        """Seconds since the estimator was made (the fit's wall time)."""
        return round(perf_counter() - self.started, 4)

    @abstractmethod
    def fit(self) -> Any:
        """Run the estimator and return its result."""


def estimators() -> list[type[Estimator]]:
    """Every concrete estimator class defined so far (subclasses of subclasses included)."""
    found, todo = [], list(Estimator.__subclasses__())
    while todo:
        cls = todo.pop(0)
        todo += cls.__subclasses__()
        if "name" in vars(cls):
            found.append(cls)
    return found
