"""The DuckDB path: every step that touches rows is a SQL pass (see reduce and moments)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from .engine import Engine
from .moments import Moments, create_tilde, cross_products, meat_cluster, meat_hc, store_effects
from .reduce import Profile, Reduction, create_views, profile, put_one_row, reduce_cells
from .spec import Spec
from .sqltext import join, render


class SqlBackend:
    """Runs the fit's row-level steps inside DuckDB through an :class:`Engine`."""

    name = "duckdb"

    def __init__(self, eng: Engine, spec: Spec) -> None:
        self.eng = eng
        self.spec = spec
        create_views(eng, spec)

    @property
    def raw_passes(self) -> int:
        return self.eng.raw_passes

    @property
    def timings(self) -> dict[str, float]:
        return self.eng.timings

    def profile(self) -> Profile:
        prof = profile(self.eng, self.spec)
        put_one_row(self.eng, "bp_shift", {f"m{j}": float(v) for j, v in enumerate(prof.means)})
        return prof

    def reduce(self, drop_singletons: bool, n_complete: int) -> Reduction:
        return reduce_cells(self.eng, self.spec, drop_singletons, n_complete)

    def moments(self, alpha: list[np.ndarray]) -> Moments:
        store_effects(self.eng, [self.level_keys(d) for d in range(len(alpha))], alpha)
        create_tilde(self.eng, self.spec)
        return cross_products(self.eng, len(self.spec.value_aliases))

    def meat_hc(self, keep: list[int], beta: np.ndarray) -> np.ndarray:
        return meat_hc(self.eng, keep, beta)

    def meat_cluster(self, keep: list[int], beta: np.ndarray) -> tuple[int, np.ndarray]:
        return meat_cluster(self.eng, keep, beta)

    def level_keys(self, d: int) -> pa.Table:
        sql = render("level_table", columns=join(self.spec.key_aliases(d), ", "), table=f"bp_lev_{d + 1}")
        return self.eng.arrow("effect keys", sql)
