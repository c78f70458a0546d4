"""The DuckDB path: every step that touches rows is a SQL pass (see reduce and moments)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from .engine import Engine
from .project import Projection, solve_effects
from .sweeps import sweep_in_engine
from .inference import ClusterTerm
from .moments import Moments, create_tilde, cross_products, meat_cluster, meat_hc, residual_ss, store_effects
from .reduce import Reduction, Start, create_views, incomplete, reduce_cells, start
from .spec import Spec
from .sqltext import join, render


class SqlBackend:
    """Runs the fit's row-level steps inside DuckDB through an :class:`Engine`."""

    name = "duckdb"

    def __init__(self, eng: Engine, spec: Spec, source_kind: str) -> None:
        self.eng = eng
        self.spec = spec
        self.source_kind = source_kind
        self.red: Reduction | None = None
        self.alpha: list[np.ndarray] = []
        self.demeaned_view = False
        create_views(eng, spec, materialize=source_kind == "csv")

    @property
    def raw_passes(self) -> int:
        return self.eng.raw_passes

    @property
    def timings(self) -> dict[str, float]:
        return self.eng.timings

    def start(self) -> Start:
        return start(self.eng, self.spec, self.source_kind)

    def reduce(self, drop_singletons: bool, cell_budget: int) -> Reduction:
        self.red = reduce_cells(self.eng, self.spec, drop_singletons, cell_budget)
        return self.red

    def project(self, red: Reduction, tol: float, max_iter: int) -> Projection:
        """On the level tables in numpy, or in the engine when the pair tables stayed there."""
        if red.cross is None:
            keys = [self.level_keys(d) for d in range(len(red.counts))]
            return sweep_in_engine(self.eng, self.spec, red, keys, tol, max_iter)
        return solve_effects(red, tol=tol, max_iter=max_iter)

    def incomplete(self) -> dict[str, int]:
        return incomplete(self.eng, self.spec)

    def _demeaned(self) -> None:
        """Join the solved effects back to the rows (the view ``bp_tilde``), once."""
        if not self.demeaned_view:
            store_effects(self.eng, [self.level_keys(d) for d in range(len(self.alpha))], self.alpha)
            create_tilde(self.eng, self.spec)
            self.demeaned_view = True

    def moments(self, alpha: list[np.ndarray]) -> Moments:
        self.alpha = alpha
        self._demeaned()
        return cross_products(self.eng, self.spec, len(self.spec.value_aliases))

    def meat_hc(self, keep: list[int], beta: np.ndarray) -> np.ndarray:
        self._demeaned()
        return meat_hc(self.eng, self.spec, keep, beta)

    def meat_cluster(self, keep: list[int], beta: np.ndarray) -> list[ClusterTerm]:
        self._demeaned()
        return meat_cluster(self.eng, self.spec, keep, beta)

    def rss(self, keep: list[int], beta: np.ndarray) -> float:
        """The residual sum of squares from a pass over the demeaned rows."""
        self._demeaned()
        return residual_ss(self.eng, self.spec, keep, beta)

    def level_keys(self, d: int) -> pa.Table:
        sql = render("level_table", columns=join(self.spec.key_aliases(d), ", "), table=f"bp_lev_{d + 1}")
        return self.eng.arrow("effect keys", sql)
