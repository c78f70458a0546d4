"""The passes of the Poisson fit's iteratively reweighted least squares (IRLS), in the engine.

Each step reads the sample once through the working rows (template ``poisson_rows``, a
subquery of each pass): with the linear predictor eta_i = sum_j b_j t_ij + sum_d
f_d[level_d(i)] of the current fit (t the shifted regressors, f the effects, from the one-row
table ``bp_irls_coef`` and the per-level tables ``bp_irls_fx_d``), mu_i = exp(eta_i), the
working weight w_i = p_i mu_i (p the prior weight, 1 without ``--weights``) and the working
outcome z_i = eta_i + (y_i - mu_i) / mu_i. The working columns are taken out of the effects
solved so far: r_0 = z - sum_d a_d0[level], r_j = t_j - sum_d a_dj[level], so that the
projections of the step only solve for the change (a warm start) and the sums below cancel
little.

Each step makes one grouped pass (template ``poisson_cells``): per level of every effect (on
the pair-table path: per pair cell) the weight sum, the weighted sums of every r_j and their
products sum w r_i r_j. The row-codes path adds a pass that streams every row's codes and
working weight (:func:`fetch_weights`, 16 bytes a row with two effects), from which numpy
builds the step's link tables. Streaming the working columns too, to add them up per level in
numpy, would spare the grouped pass, but numpy's one thread took longer for that than the
engine's grouped pass (about 5 s against 3 s a step at 50M rows). The last step's pass
(:func:`final_pass`) sums the demeaned cross-products, the scores and the fit statistics with
compensated sums.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pyarrow as pa

from ..engines.base import Engine
from ..errors import BigPanelError
from ..model.spec import Spec
from ..sql.text import Fragment, grouping_id, grouping_sets, join, level_joins, names, render
from .moments import cluster_sets
from .reduce import RowCodes, put_one_row, stream_in_runs

# sums that do not change between steps, taken in the first pass only (and p y t_j: see constants)
CONSTANTS = {"p": "p", "py": "p * y", "pyy": "p * y * y", "pyl": "p * CASE WHEN y > 0 THEN y * ln(y) ELSE 0 END"}


@dataclass(frozen=True)
class LevelSums:
    """One effect's per-level sums of an IRLS pass, in code order: ``rows``, the working
    ``weight`` sum w and ``sums`` (levels x m) of w r_j; on the first passes also the largest
    outcome ``top``, the sums ``constants`` of p, p y, p y^2, p y log y and p y t_j (prior weight
    p, t_j the shifted regressors; :func:`constants`), and per cluster column whether every level
    lies in one cluster (``nested``)."""

    rows: np.ndarray
    weight: np.ndarray
    sums: np.ndarray
    top: np.ndarray | None = None
    constants: dict[str, np.ndarray] | None = None
    nested: list[bool] | None = None


@dataclass(frozen=True)
class StepSums:
    """What one IRLS pass gives: per effect its :class:`LevelSums`; over the sample the products
    (m x m) sum w r_i r_j at the current fit; on the pair-table path the weighted pairs of levels
    of every pair of effects (codes of d, codes of e, weight)."""

    levels: list[LevelSums]
    products: np.ndarray
    pairs: dict[tuple[int, int], tuple[np.ndarray, np.ndarray, np.ndarray]] = field(default_factory=dict)


@dataclass(frozen=True)
class FinalSums:
    """The last step's compensated sums over the rows: ``q`` (m x m) of the demeaned working
    outcome and regressors, weighted by w; the HC1 meat sum s_i s_i' over the regressors with the
    score s_i = p_i (y_i - mu_i) x~_i (None unless ``hc1``); the rows; and ``stats``: sums of
    p mu, p y mu and p mu^2 and the count of zero outcomes fitted below the separation bound."""

    rows: int
    q: np.ndarray
    meat: np.ndarray | None
    stats: dict[str, float]


def check_nonnegative(eng: Engine, spec: Spec, offset: float) -> None:
    """One line naming a negative outcome, if there is one (a pass that stops at the first)."""
    tab = eng.arrow("outcome is not negative", render("poisson_negative"), {"offset": float(offset)}, raw=True)
    if tab.num_rows:
        value = tab.column("y")[0].as_py()
        raise BigPanelError(f"--model poisson needs an outcome that is never negative: {spec.y!r} is {value:g} in "
                            "a row of the sample")


def store_state(eng: Engine, spec: Spec, keys: list[pa.Table], f: list[np.ndarray], a: list[np.ndarray],
                coef: dict[str, float]) -> None:
    """Upload the current fit: per effect its level keys, code, effect ``f`` and the effects ``a``
    taken out of each working column (``bp_irls_fx_d``), and the one-row table ``bp_irls_coef``
    (``coef``: ``yo`` the outcome's integer offset, ``low`` the separation bound of log mu and the
    slopes ``bj``)."""
    for d, table in enumerate(keys):
        table = table.append_column("code", pa.array(np.arange(len(f[d]), dtype=np.int32)))
        table = table.append_column("f", pa.array(f[d], type=pa.float64()))
        for j in range(a[d].shape[1]):
            table = table.append_column(f"a{j}", pa.array(a[d][:, j], type=pa.float64()))
        eng.put_table(f"bp_irls_fx_{d + 1}", table)
    put_one_row(eng, "bp_irls_coef", coef)


def rows_sql(spec: Spec) -> Fragment:
    """The working rows of a step (template ``poisson_rows``), a subquery of the passes; eta comes
    from the slopes and the effects of :func:`store_state`."""
    k, m = len(spec.fe), len(spec.value_aliases)
    effects = [f"e{d + 1}" for d in range(k)]
    t = [f"({v} - s.m{j})" for j, v in enumerate(spec.value_aliases)]
    eta = " + ".join([f"b.b{j} * {t[j]}" for j in range(1, m)] + [f"{e}.f" for e in effects])
    inner = [f"{e}.code AS c{d + 1}" for d, e in enumerate(effects)]
    inner += ["v0 + b.yo AS y", ("w" if spec.weights else "CAST(1 AS DOUBLE)") + " AS p", f"{eta} AS eta",
              "b.low AS low", " + ".join(f"{e}.a0" for e in effects) + " AS za"]
    inner += [t[j] + "".join(f" - {e}.a{j}" for e in effects) + f" AS r{j}" for j in range(1, m)]
    inner += spec.cluster_aliases
    joins = level_joins("bp_irls_fx", {d: spec.key_aliases(d) for d in range(k)}, "e")
    return Fragment(render("poisson_rows", codes=_codes(k), inner=join(inner), joins=joins,
                           columns=join([f"r{j}" for j in range(1, m)] + spec.cluster_aliases)))


def _codes(k: int) -> Fragment:
    return names([f"c{d + 1}" for d in range(k)])


def _pairs_of(m: int) -> list[tuple[int, int]]:
    return [(i, j) for i in range(m) for j in range(i, m)]


def constants(spec: Spec) -> dict[str, str]:
    """The first pass's sums that do not change between steps: ``CONSTANTS`` and, per regressor j,
    p y t_j (``pyr{j}``; at the first pass the working column r_j is still t_j). With the level
    sums of p y they give every step's deviance without a per-row term (:mod:`bigpanel.numerics.irls`)."""
    return {**CONSTANTS, **{f"pyr{j}": f"p * y * r{j}" for j in range(1, len(spec.value_aliases))}}


def _sums(spec: Spec, first: bool) -> list[str]:
    """The aggregates of the grouped IRLS pass (every grouping set computes all of them)."""
    m = len(spec.value_aliases)
    sums = ["sum(w) AS nw"] + [f"sum(w * r{j}) AS s{j}" for j in range(m)]
    sums += [f"sum(w * r{i} * r{j}) AS q{i}_{j}" for i, j in _pairs_of(m)]
    if first:
        sums += ["max(y) AS top"] + [f"sum({expr}) AS {name}" for name, expr in constants(spec).items()]
        sums += [f"{fn}({c}) AS {c}_{fn}" for c in spec.cluster_aliases for fn in ("min", "max")]
    return sums


def step_pass(eng: Engine, spec: Spec, pairs: list[tuple[int, int]], first: bool) -> StepSums:
    """One grouped IRLS pass over the rows (``first``: also the columns that decide the sample),
    then one fetch of all its grouping sets. Without ``pairs`` there is a set per effect; on the
    pair-table path only the sets of the ``pairs``, each effect's level sums being the sums of
    its pair cells (half the sets for three effects, a third for two). The sample's products are
    read from the set with the fewest cells."""
    k, m = len(spec.fe), len(spec.value_aliases)
    codes = [f"c{d + 1}" for d in range(k)]
    sets = [[codes[d], codes[e]] for d, e in pairs] or [[c] for c in codes]
    eng.execute("IRLS step: per-level sums of the working columns",
                render("poisson_cells", codes=_codes(k), sums=join(_sums(spec, first)), sets=grouping_sets(sets),
                       rows=rows_sql(spec)), raw=True)
    cells = eng.arrow("IRLS step: fetch sums", render("poisson_cell_table", codes=_codes(k)))
    gid = cells.column("gid").to_numpy()
    parts = [cells.filter(pa.array(gid == grouping_id(codes, grouped))) for grouped in sets]
    smallest = min(parts, key=lambda t: t.num_rows)
    products = np.zeros((m, m))
    for i, j in _pairs_of(m):
        products[i, j] = products[j, i] = float(np.sum(smallest.column(f"q{i}_{j}").to_numpy()))
    fetched = {pair: tuple(tab.column(c).to_numpy() for c in (codes[pair[0]], codes[pair[1]], "nw"))
               for pair, tab in zip(pairs, parts)}
    levels = []
    for d in range(k):
        if not pairs:
            levels.append(_level_sums(spec, parts[d], first))
            continue
        tab = parts[next(i for i, pair in enumerate(pairs) if d in pair)]
        levels.append(_level_sums(spec, _by_level(tab, codes[d]), first))
    return StepSums(levels, products, fetched)


def _by_level(cells: pa.Table, code: str) -> pa.Table:
    """Pair cells added up to the levels of one effect (code order): sums, and the largest outcome
    and the cluster ranges as the largest and smallest of the cells'."""
    how = {"top": "max"} | {c: ("min" if c.endswith("_min") else "max") for c in cells.column_names
                            if c.endswith(("_min", "_max"))}
    aggregates = [(c, how.get(c, "sum")) for c in cells.column_names if c not in ("gid", code) and not
                  (c.startswith("c") and c[1:].isdigit())]
    out = cells.group_by(code).aggregate(aggregates).sort_by(code)
    return out.rename_columns([name.rsplit("_", 1)[0] if name != code else name for name in out.column_names])


def _level_sums(spec: Spec, tab: pa.Table, first: bool) -> LevelSums:
    """Effect d's per-level sums (see :class:`LevelSums`) from its grouping set."""
    m = len(spec.value_aliases)

    def col(name: str) -> np.ndarray:
        return tab.column(name).to_numpy().astype(float)

    nested = [bool(np.all(np.asarray(tab.column(f"{c}_min").to_pylist(), dtype=object)
                          == np.asarray(tab.column(f"{c}_max").to_pylist(), dtype=object)))
              for c in spec.cluster_aliases] if first else None
    return LevelSums(rows=tab.column("n").to_numpy().astype(np.int64), weight=col("nw"),
                     sums=np.column_stack([col(f"s{j}") for j in range(m)]),
                     top=col("top") if first else None,
                     constants={name: col(name) for name in constants(spec)} if first else None, nested=nested)


def fetch_weights(eng: Engine, spec: Spec, levels: list[int], codes: dict[int, np.ndarray],
                  weights: np.ndarray) -> RowCodes:
    """The row-codes path's second pass of a step: every row's level codes (into ``codes``, an
    array per effect but the largest) and working weight (into ``weights``), in runs of one level
    of the largest effect (:func:`~bigpanel.passes.reduce.stream_in_runs`: unsorted where the
    engine keeps its scan order, so the engine sorts nothing; the runs may come in another order
    at every step, and the link tables are built again from them)."""
    big = int(np.argmax(levels))
    columns = [f"c{d + 1}" for d in sorted(codes)] + ["w", f"c{big + 1}"]

    def sql(sort: bool) -> str:
        return render("poisson_row_weights", columns=join(columns, ", "), rows=rows_sql(spec),
                      order=Fragment(f"\nORDER BY c{big + 1}" if sort else ""))

    return stream_in_runs(eng, "IRLS step: working weight of every row", sql, big, levels, codes, weights)


def create_demeaned(eng: Engine, spec: Spec) -> None:
    """The view ``bp_tilde`` of the fully demeaned working columns e_j, what the scores and fit
    statistics need, and the cluster columns."""
    m = len(spec.value_aliases)
    columns = [f"r{j} AS e{j}" for j in range(m)] + ["w", "p", "y", "mu", "small"] + spec.cluster_aliases
    eng.execute("demeaned working columns",
                render("poisson_tilde", columns=join(columns), rows=rows_sql(spec)))


def final_pass(eng: Engine, spec: Spec) -> FinalSums:
    """The last step's pass over ``bp_tilde`` (compensated sums): see :class:`FinalSums`. With
    clustering the same sums go per cluster, for every combination of cluster columns, into
    ``bp_cluster_moments``, named as :func:`bigpanel.passes.moments.meat_cluster` reads them
    (``q_0_j`` the scores, ``q_i_j`` the regressors' products), and the totals are read from it."""
    m = len(spec.value_aliases)
    regressors = [(i, j) for i, j in _pairs_of(m) if i > 0]
    sums = [f"fsum(w * e0 * e{j}) AS z_{j}" for j in range(m)]
    sums += [f"fsum(w * e{i} * e{j}) AS q_{i}_{j}" for i, j in regressors]
    sums += [f"fsum(p * (y - mu) * e{j}) AS q_0_{j}" for j in range(1, m)]
    sums += ["fsum(p * mu) AS pm", "fsum(p * y * mu) AS pym", "fsum(p * mu * mu) AS pmm", "sum(small) AS small"]
    if spec.variance == "hc1":
        sums += [f"fsum(p * p * (y - mu) * (y - mu) * e{i} * e{j}) AS h_{i}_{j}" for i, j in regressors]
    if spec.variance == "cr1":
        columns = spec.cluster_aliases
        groups = grouping_sets([[columns[j] for j in s] for s in cluster_sets(len(columns))])
        eng.execute("demeaned working cross-products and scores per cluster",
                    render("cluster_moments", sums=join(sums), clusters=names(columns), sets=groups), raw=True)
        totals = [f"{'sum' if name == 'small' else 'fsum'}({name}) AS {name}"
                  for name in (part.rsplit(" AS ", 1)[1] for part in sums)]
        row = eng.one("working cross-products from the cluster sums",
                      render("cluster_moment_totals", sums=join(totals)), {"gid": grouping_id(columns, columns[:1])})
    else:
        row = eng.one("demeaned working cross-products", render("crossprod", sums=join(sums)), raw=True)
    q = np.zeros((m, m))
    for j in range(m):
        q[0, j] = q[j, 0] = row[f"z_{j}"]
    for i, j in regressors:
        q[i, j] = q[j, i] = row[f"q_{i}_{j}"]
    meat = None
    if spec.variance == "hc1":
        meat = np.zeros((m - 1, m - 1))
        for i, j in regressors:
            meat[i - 1, j - 1] = meat[j - 1, i - 1] = row[f"h_{i}_{j}"]
    stats = {name: float(row[name] or 0.0) for name in ("pm", "pym", "pmm", "small")}
    return FinalSums(int(row["n"]), q, meat, stats)
