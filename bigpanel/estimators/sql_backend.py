"""The SQL path: every step that touches rows is a pass in the engine (see reduce and moments)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from ..engines.base import Engine
from ..model.spec import Spec
from ..numerics.project import Projection, components, normal_times, solve_effects
from ..numerics.rowcodes import Links, build_links, solve_codes
from ..numerics.rowcodes import components as code_components
from ..numerics.rowcodes import normal_times as code_normal_times
from ..numerics.sweeps import sweep_in_engine
from ..passes.bootstrap import Cells, PairSums, cluster_cells, cross_sums
from ..passes.moments import (ClusterTerm, Moments, Residuals, create_tilde, cross_products, level_cross_products,
                              meat_cluster, meat_hc, nested_cross_products, ols_residuals, residual_ss,
                              solution_cross_products, store_effects)
from ..passes.reduce import (IN_ENGINE, ONE_WAY, PAIR_TABLES, ROW_CODES, Reduction, Start, create_views, incomplete,
                             level_keys, reduce_cells, start)

ROUNDING = 1e-14  # relative rounding of a level co-moment: plain sums, then one cancelling subtraction
TRUSTED = 1e-10  # largest predicted relative error of the cross-products' solution taken from co-moments


class SqlBackend:
    """Runs the fit's row-level steps inside the engine through an :class:`Engine`."""

    def __init__(self, eng: Engine, spec: Spec, source_kind: str, bootstrap: bool = False) -> None:
        self.eng = eng
        self.spec = spec
        self.source_kind = source_kind
        self.red: Reduction | None = None
        self.links: Links | None = None
        # the wild bootstrap follows: pass 2 keeps its cells by cluster and the row codes' link tables
        # outlive the moments (the bootstrap reads both)
        self.bootstrap = bootstrap
        self.alpha: list[np.ndarray] = []
        self.stored = False
        self.demeaned_view = False
        self.python_bytes = 0
        self.moments_from = ""
        create_views(eng, spec, materialize=source_kind == "csv")

    @property
    def raw_passes(self) -> int:
        return self.eng.raw_passes

    @property
    def timings(self) -> dict[str, float]:
        return self.eng.timings

    def start(self) -> Start:
        return start(self.eng, self.spec, self.source_kind)

    def reduce(self, drop_singletons: bool, budget: int, strategy: str | None = None) -> Reduction:
        self.red = reduce_cells(self.eng, self.spec, drop_singletons, budget, strategy, by_cluster=self.bootstrap)
        self._held(self.red)
        return self.red

    def _held(self, *objs: object) -> None:
        """Record the numpy bytes held now (the largest such figure is reported)."""
        total = 0
        for obj in objs:
            if isinstance(obj, Reduction):
                arrays = [*obj.counts, *obj.rows, *obj.rhs] + (list(obj.codes.codes.values()) if obj.codes else [])
                total += sum(a.nbytes for a in arrays)
                total += sum(m.data.nbytes + m.indices.nbytes + m.indptr.nbytes for m in (obj.cross or {}).values())
            elif isinstance(obj, Links):
                total += obj.nbytes
        self.python_bytes = max(self.python_bytes, total)

    def project(self, red: Reduction, tol: float, max_iter: int) -> Projection:
        """In numpy on the pair tables or the row codes, or in the engine (see reduce.choose_strategy)."""
        if red.strategy == ROW_CODES:
            self.links = build_links(red.codes, red.rows)
            self._held(self.links, red)
            return solve_codes(self.links, red, tol, max_iter)
        if red.strategy == IN_ENGINE:
            keys = [self.level_keys(d) for d in range(len(red.counts))]
            return sweep_in_engine(self.eng, self.spec, red, keys, tol, max_iter)
        return solve_effects(red, tol=tol, max_iter=max_iter)

    def components(self, red: Reduction) -> tuple[int | None, np.ndarray | None]:
        """Connected components of effects 1 and 2 (None for one effect; taken as 1 in the engine)."""
        if len(red.counts) < 2:
            return None, None
        if red.strategy == IN_ENGINE:
            return 1, None  # conservative: P may count C - 1 parameters too many
        if red.strategy == ROW_CODES:
            return code_components(self.links, [len(c) for c in red.counts])
        return components(red)

    def incomplete(self) -> dict[str, int]:
        return incomplete(self.eng, self.spec)

    def _store(self) -> None:
        """Store the solved effects in the engine (``bp_alpha_d``), once."""
        if not self.stored:
            store_effects(self.eng, [self.level_keys(d) for d in range(len(self.alpha))], self.alpha)
            self.stored = True

    def _demeaned(self) -> None:
        """Join the solved effects back to the rows (the view ``bp_tilde``), once."""
        if not self.demeaned_view:
            self._store()
            create_tilde(self.eng, self.spec)
            self.demeaned_view = True

    def _from_levels(self) -> Moments | None:
        """One effect: the cross-products from the level co-moments of the reduction, when every
        cluster column nests the effect and they are accurate enough.

        A co-moment sum w t_i t_j - s_i s_j / n_w cancels the share t't / E'E of each column's
        square sum, and solving with the result magnifies that by the condition number of the
        scaled E'E (which is large when regressors are nearly collinear, or the fit nearly
        perfect). When ``ROUNDING`` times both exceeds ``TRUSTED``, the compensated row pass runs.
        """
        red, spec = self.red, self.spec
        if red is None or red.strategy != ONE_WAY or not all(red.nested[0]):
            return None
        mom = level_cross_products(self.eng, spec, len(spec.value_aliases))
        return mom if _accurate(mom.q, red.sumsq) else None

    def _from_solution(self) -> Moments | None:
        """Two or more effects solved in numpy: the cross-products from the solved effects and
        the level sums (:func:`bigpanel.passes.moments.solution_cross_products`), when the cells carry
        the products of the shifted columns and the cancelling terms leave enough digits
        (the bound of :func:`_accurate`, with each column's magnitude for t'Wt)."""
        red = self.red
        if red is None or red.products is None or red.strategy not in (PAIR_TABLES, ROW_CODES):
            return None
        if red.strategy == ROW_CODES:
            links = self.links
            mom, size = solution_cross_products(red.products, self.alpha, red.rhs,
                                                lambda parts: code_normal_times(links, red.counts, parts), red.n_obs)
        else:
            mom, size = solution_cross_products(red.products, self.alpha, red.rhs,
                                                lambda parts: normal_times(red, parts), red.n_obs)
        return mom if _accurate(mom.q, size) else None

    def _from_nested(self) -> Moments | None:
        """Two or more effects, clustered errors, some effect nested in every cluster column: the
        per-cluster cross-products from one pass grouped by that effect's levels (the nested
        effect with most levels, whose table it never joins), when its co-moments keep their
        digits (the bound of :func:`_accurate`)."""
        red, spec = self.red, self.spec
        if red is None or spec.variance != "cr1" or len(red.counts) < 2:
            return None
        nested = [d for d in range(len(red.counts)) if all(red.nested[d])]
        if not nested:
            return None
        d = max(nested, key=lambda e: len(red.counts[e]))
        self._store()
        mom, squares = nested_cross_products(self.eng, spec, d, len(spec.value_aliases))
        return mom if _accurate(mom.q, squares) else None

    def moments(self, proj: Projection) -> Moments:
        self.alpha = proj.alpha
        mom = self._from_levels()
        if mom is not None:
            self.moments_from = "level co-moments (no row pass)"
            return mom
        mom = self._from_solution()
        if not self.bootstrap:
            self.links = None  # the link tables are not needed past this point
        if mom is not None:
            self.moments_from = "solved effects and level sums (no row pass)"
            return mom
        mom = self._from_nested()
        if mom is not None:
            self.moments_from = "co-moments per level of an effect the clusters nest (one row pass)"
            return mom
        self.moments_from = "demeaned rows"
        self._demeaned()
        return cross_products(self.eng, self.spec, len(self.spec.value_aliases))

    def meat_hc(self, res: Residuals) -> np.ndarray:
        """The raw HC meat of :class:`~bigpanel.passes.moments.Residuals`: a pass over the demeaned rows."""
        self._demeaned()
        return meat_hc(self.eng, self.spec, res)

    def meat_cluster(self, res: Residuals) -> list[ClusterTerm]:
        """The raw cluster meats, from the per-cluster cross-products (no pass)."""
        return meat_cluster(self.eng, self.spec, res)

    def cluster_cells(self) -> Cells:
        """The wild bootstrap's per-cell cross-products (see :mod:`bigpanel.passes.bootstrap`)."""
        return cluster_cells(self.eng, self.spec)

    def cross_sums(self, boot: int, keys: pa.Array, dims: list[int]) -> PairSums:
        """Per (cluster of column ``boot``, level of the effects ``dims``) sums of the demeaned columns: a pass."""
        self._demeaned()
        return cross_sums(self.eng, self.spec, boot, keys, dims, [len(self.red.counts[d]) for d in dims])

    def rss(self, keep: list[int], beta: np.ndarray) -> float:
        """The residual sum of squares from a pass over the demeaned rows."""
        self._demeaned()
        return residual_ss(self.eng, self.spec, ols_residuals(len(self.spec.value_aliases), keep, beta))

    def level_keys(self, d: int) -> pa.Table:
        return level_keys(self.eng, self.spec, d)


def _accurate(q: np.ndarray, squares: np.ndarray) -> bool:
    """Whether E'WE formed by cancelling sums is trusted: ``ROUNDING`` times the largest share
    t'Wt / E'WE of a column (``squares`` holds t'Wt) times the condition number of the scaled
    E'WE stays below ``TRUSTED``; a column with no variation left always fails."""
    diag = np.diag(q)
    if not np.all(np.isfinite(q)) or np.any(diag <= 0):
        return False
    scale = np.sqrt(diag)
    eig = np.linalg.eigvalsh(q / np.outer(scale, scale))
    return bool(eig[0] > 0 and ROUNDING * float(np.max(squares / diag)) * eig[-1] / eig[0] <= TRUSTED)
