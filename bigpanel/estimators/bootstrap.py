"""The wild cluster bootstrap of a within fit: which clusters, which sums, which cases are exact.

The bootstrap dimension is the cluster column given (``bootstrap_cluster``) or, with
several, the one with fewest clusters (MacKinnon, Nielsen and Webb 2021, Journal of
Business & Economic Statistics, bootstrap multi-way clustered fits by one dimension). The
draws are :mod:`bigpanel.numerics.bootstrap`; what they read is
:mod:`bigpanel.passes.bootstrap`. Cases:

* every fixed effect nested in the bootstrap clusters (one or several cluster columns):
  exact from the per-cell cross-products the cluster-robust fit already holds; no pass;
* with one cluster column, effects that cut across its clusters (period effects under
  state clusters): exact with those effects' levels handled explicitly, when at most one
  effect is nested and the cut-across effects have at most ``MAX_CROSS_LEVELS`` levels
  (and clusters x levels at most ``MAX_CROSS_PAIRS``).
  Cost: the per (cluster, level) sums, from the cells pass 2 grouped by cluster when one
  effect is nested and one cuts across (no pass), else one pass over the rows; and an
  eigen-decomposition of a T x T matrix. Sigma comes from the pair tables when the fit fetched them, from the
  row codes' link tables when the nested effect is the one they eliminate (its Schur
  complement, formed densely: no pass), else from one more pass for the pair tables (they
  must fit the Python-side budget);
* anything else is refused in one line naming what to change.
"""

from __future__ import annotations

from dataclasses import dataclass
from time import perf_counter
from typing import Any

import numpy as np
import pyarrow as pa
from scipy import sparse

from ..errors import BigPanelError
from ..numerics.bootstrap import (ClusterSums, CrossEffects, cut_across_sigma, cut_across_sums, pair_block,
                                  plan_draws, pseudo_inverse, wild_tests)
from ..numerics.rowcodes import Links, per_level_table, schur_matrix
from ..numerics.bootstrap_interval import inverted_interval
from ..numerics.inference import Inference, cluster_factor
from ..numerics.solve import Slopes
from ..passes.bootstrap import level_cells
from ..passes.moments import cluster_sets
from ..passes.reduce import CELL_BYTES, pair_tables
from .absorb import Absorption
from .base import Session
from .sql_backend import SqlBackend

# the within estimator's bootstrap options and their defaults
BOOTSTRAP_OPTIONS = {"wild_bootstrap": False, "draws": None, "bootstrap_weights": None, "seed": None, "test": None,
                     "bootstrap_cluster": None, "bootstrap_interval": False}
DEFAULT_DRAWS = 9_999
MAX_CLUSTERS = 10_000  # bootstrap clusters: the draws cost G x K^2 each; beyond this CR1 needs no rescue
MAX_CELLS = 1_000_000  # multi-way: cells of the finest combination of cluster columns held per draw block
MAX_CROSS_LEVELS = 2_000  # levels of the effects that cut across the bootstrap clusters (a T x T matrix)
MAX_CROSS_PAIRS = 10_000_000  # clusters x those levels: the G x T x m sums held in numpy


@dataclass(frozen=True)
class BootstrapOptions:
    """``draws`` (None: no bootstrap), ``weights`` (rademacher, webb or None for the default),
    ``seed``, the regressors to ``test`` (None: all), the bootstrap ``cluster`` column and whether
    to add the ``interval`` that inverts the test."""

    draws: int | None
    weights: str | None
    seed: int | None
    test: list[str] | None
    cluster: str | None
    interval: bool = False

    @classmethod
    def checked(cls, wild_bootstrap: bool, draws: int | None, bootstrap_weights: str | None, seed: int | None,
                test: str | list[str] | None, bootstrap_cluster: str | None,
                bootstrap_interval: bool) -> BootstrapOptions:
        asked = [name for name, v in (("--draws", draws), ("--bootstrap-weights", bootstrap_weights),
                                      ("--seed", seed), ("--test", test), ("--bootstrap-cluster", bootstrap_cluster),
                                      ("--bootstrap-interval", bootstrap_interval or None))
                 if v is not None]
        if not wild_bootstrap:
            if asked:
                raise BigPanelError(f"{asked[0]} applies to the wild bootstrap: add --wild-bootstrap")
            return cls(None, None, None, None, None)
        tests = [test] if isinstance(test, str) else (list(test) if test else None)
        return cls(DEFAULT_DRAWS if draws is None else int(draws), bootstrap_weights, seed, tests, bootstrap_cluster,
                   bool(bootstrap_interval))


def _dimension(session: Session, inf: Inference, chosen: str | None) -> int:
    """The bootstrap cluster column: the one asked for, or the one with fewest clusters."""
    spec = session.spec
    if spec.variance != "cr1" or not spec.cluster:
        raise BigPanelError("--wild-bootstrap resamples clusters: give --cluster COL")
    if chosen is not None:
        if chosen not in spec.cluster:
            raise BigPanelError(f"--bootstrap-cluster {chosen!r} is not among the --cluster columns "
                                f"({', '.join(spec.cluster)})")
        return spec.cluster.index(chosen)
    return min(range(len(spec.cluster)), key=lambda j: inf.clusters[spec.cluster[j]])


def _tested(names: list[str], test: list[str] | None) -> list[int]:
    if test is None:
        return list(range(len(names)))
    for name in test:
        if name not in names:
            raise BigPanelError(f"--test {name!r} is not a kept regressor of the fit ({', '.join(names)})")
    return [names.index(name) for name in dict.fromkeys(test)]


def _cross_effects(session: Session, ab: Absorption, boot: int,
                   keys: pa.Array) -> tuple[CrossEffects | None, list[str]]:
    """The effects that cut across the bootstrap clusters, when the exact treatment applies."""
    spec, red = session.spec, ab.red
    dims = [d for d in range(len(spec.fe)) if not red.nested[d][boot]]
    if not dims:
        return None, []
    names = [spec.fe_names[d] for d in dims]
    nested = [d for d in range(len(spec.fe)) if d not in dims]
    levels = sum(len(red.counts[d]) for d in dims)
    why = None
    if len(spec.cluster) > 1:
        why = "with several cluster columns every effect must be nested in the bootstrap clusters"
    elif len(nested) > 1:
        why = "at most one effect may be nested in the clusters when others cut across them"
    elif levels > MAX_CROSS_LEVELS or levels * len(keys) > MAX_CROSS_PAIRS:
        why = (f"they have {levels:,} levels for {len(keys):,} clusters (at most {MAX_CROSS_LEVELS:,} levels and "
               f"{MAX_CROSS_PAIRS:,} pairs of a cluster and a level are handled explicitly)")
    links = ab.back.links if isinstance(ab.back, SqlBackend) else None
    from_links = links is not None and nested == [links.big] and sorted(links.link) == dims
    if not why and len(spec.fe) > 1 and red.cross is None and not from_links and red.n_obs * CELL_BYTES > ab.budget:
        why = (f"the pair tables of the effects (up to {red.n_obs:,} pairs of levels) exceed the Python-side "
               "budget (--python-memory)")
    if why:
        raise BigPanelError(f"the wild bootstrap cannot handle {', '.join(names)} cutting across the clusters of "
                            f"{spec.cluster[boot]} exactly: {why}")
    cross = None
    if from_links:  # row codes with the nested effect eliminated: Sigma is their Schur complement, no pass
        sigma = schur_matrix(links, red.counts)
    else:  # the fit's pair tables; one effect needs none; else a pass for them (other row codes, the sweeps)
        cross = red.cross if red.cross is not None or len(spec.fe) == 1 else pair_tables(session.eng, spec, red.counts)
        sigma = cut_across_sigma(red.counts, cross or {}, nested[0] if nested else None, dims)
    sums = _sums_from_cells(session, ab, keys, nested, dims, links if from_links else None, cross)
    if sums is None:
        sums = ab.back.cross_sums(boot, keys, dims).dense()
    return CrossEffects(sums, pseudo_inverse(sigma)), names


def _sums_from_cells(session: Session, ab: Absorption, keys: pa.Array, nested: list[int], dims: list[int],
                     links: Links | None, cross: dict[tuple[int, int], sparse.csr_matrix] | None) -> np.ndarray | None:
    """F_c,t without a pass (:func:`bigpanel.numerics.bootstrap.cut_across_sums`) when pass 2 kept
    its cells by cluster and one nested effect n meets one cut-across effect x, their pair
    table taken from the row codes' link tables or the pair tables; else None."""
    red = ab.red
    if red.cluster_cells is None or len(nested) != 1 or len(dims) != 1:
        return None
    (n,), (x,) = nested, dims
    if links is not None:
        table, runs = per_level_table(links, x)
    elif cross is not None:
        table, runs = pair_block(cross, n, x), None
    else:
        return None
    cut = level_cells(session.eng, session.spec, x, keys)
    weight = np.zeros((len(keys), len(red.counts[x])))
    weight[cut.cluster, cut.level] = cut.weight
    shifted = np.zeros((*weight.shape, cut.sums.shape[1]))
    shifted[cut.cluster, cut.level] = cut.sums
    inner = level_cells(session.eng, session.spec, n, keys)
    home = np.zeros(len(red.counts[n]), dtype=np.int64)
    home[inner.level] = inner.cluster  # one cluster per nested level
    alpha = ab.proj.alpha
    return cut_across_sums(shifted, weight, home, alpha[n], alpha[x], table, runs)


def wild_bootstrap(session: Session, ab: Absorption, slopes: Slopes, inf: Inference, names: list[str],
                   opts: BootstrapOptions) -> tuple[dict[str, Any], dict[str, dict[str, float]]]:
    """Run the bootstrap: the JSON section ``bootstrap`` and each tested coefficient's p-value (and
    interval, when asked)."""
    spec, started, passes = session.spec, perf_counter(), ab.back.raw_passes
    boot = _dimension(session, inf, opts.cluster)
    g = inf.clusters[spec.cluster[boot]]
    if g > MAX_CLUSTERS:
        raise BigPanelError(f"{g:,} clusters in {spec.cluster[boot]}: the wild bootstrap draws one weight per "
                            f"cluster and is meant for few clusters (at most {MAX_CLUSTERS:,})")
    tested = _tested(names, opts.test)
    draws = plan_draws(g, opts.draws, opts.weights, opts.seed)
    cells = ab.back.cluster_cells()
    if len(cells.q) > MAX_CELLS:
        raise BigPanelError(f"{len(cells.q):,} clusters in the combination of {' x '.join(spec.cluster)}: the wild "
                            f"bootstrap holds at most {MAX_CELLS:,}")
    cross, cut = _cross_effects(session, ab, boot, cells.keys[boot])
    if isinstance(ab.back, SqlBackend):
        ab.back.links = None  # kept for Sigma only
    terms = cluster_sets(len(spec.cluster))
    k = len(slopes.keep)
    factors = [cluster_factor(len(np.unique(cells.codes[:, list(t)], axis=0)), ab.mom.n, k, ab.absorbed, t)
               for t in terms]
    sums = ClusterSums(cells.q, cells.codes, boot, terms, factors, cross)
    per_coefficient = {names[r.k]: {"bootstrap_p_value": r.p_value}
                       for r in wild_tests(sums, slopes.keep, slopes.bread, tested, inf.t, draws)}
    if opts.interval:
        for i in tested:
            se = float(inf.std_error[i])
            low, high = inverted_interval(sums, slopes.keep, slopes.bread, i, float(slopes.beta[i]), se,
                                          float(inf.ci_high[i] - slopes.beta[i]) / se, draws)
            per_coefficient[names[i]].update(bootstrap_ci_low=low, bootstrap_ci_high=high)
    section = {
        "method": "restricted wild cluster bootstrap-t (null b = 0 imposed), symmetric p-values",
        "draws": draws.count, "weights": draws.kind, "enumerated": draws.enumerated, "seed": draws.seed,
        "dimension": spec.cluster[boot], "clusters": g, "tested": [names[i] for i in tested],
        "effects_cutting_across": cut,
        "extra_passes": ab.back.raw_passes - passes, "seconds": round(perf_counter() - started, 4),
        "interval": "95%, the values b0 whose bootstrap test of b = b0 is not rejected at 5%" if opts.interval
        else None,
    }
    return section, per_coefficient
