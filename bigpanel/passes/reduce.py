"""Passes over the raw rows that reduce the panel to group-level statistics.

:func:`start` counts what the filter and the listwise deletion remove and
takes each value column's shift. :func:`reduce_cells` groups the sample once by
every effect alone and keeps, per level, the row count and the sums of the
shifted values (repeated only while singletons are peeled off); the level counts
then choose the strategy (:func:`choose_strategy`), and the pair-table or
row-codes pass fetches what that strategy iterates on.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace
from itertools import combinations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
from scipy import sparse

from ..engines.base import Engine
from ..errors import BigPanelError
from ..model.spec import Spec
from ..sql.text import Fragment, grouping_id, grouping_sets, ident, join, level_joins, names, render

MAX_SINGLETON_ROUNDS = 200
PAIR_TABLES = "pair tables"
ROW_CODES = "row codes"
IN_ENGINE = "in-engine sweeps"
ONE_WAY = "one-way"
STRATEGIES = (PAIR_TABLES, ROW_CODES, IN_ENGINE)
COMPRESSION = 8  # pair tables pay when every pair of effects has at most one cell per 8 rows
CELL_BYTES = 40  # numpy bytes per fetched pair cell: codes, weight, the sparse table and its transpose


@dataclass(frozen=True)
class Start:
    """What the first, cheap step found: row counts and the shift of every value column.

    The shift is the mean of the first (up to 1,000) complete rows: any value
    inside the data's range keeps the later sums small; it cancels exactly.
    """

    n_source: int
    n_filtered: int
    shift: np.ndarray


@dataclass(frozen=True)
class Reduction:
    """Group-level statistics of the estimation sample.

    ``nested[d][j]`` says whether each level of effect d lies in one value of
    cluster column j. ``counts[d]`` holds the weight (the row count when
    unweighted) of each level of effect d and ``rows[d]`` its rows, ``rhs[d]`` the weighted sums of
    each shifted value column per level (levels x columns), ``cross[(d, e)]``
    the sparse table of rows per pair of levels of effects d < e (pair-table
    strategy only, else None), and
    ``sumsq`` each shifted column's sum of squares over the sample and, when the cells carry
    them (:func:`carries_products`) with two or more effects, ``products`` every product of two
    shifted columns summed over the sample (T'WT, columns x columns). ``strategy``
    names how the effects are partialled out (:func:`choose_strategy`); ``codes``
    holds the per-row level codes of the row-codes strategy. ``cluster_cells`` names the
    cluster column whose (cluster, level) cells pass 2 left in ``bp_cluster_cells`` (the
    wild bootstrap's sums for effects that cut across the clusters), or is None.
    """

    counts: list[np.ndarray]
    rows: list[np.ndarray]
    rhs: list[np.ndarray]
    cross: dict[tuple[int, int], sparse.csr_matrix] | None
    nested: list[list[bool]]
    sumsq: np.ndarray
    n_complete: int
    n_obs: int
    rounds: int
    strategy: str = PAIR_TABLES
    codes: RowCodes | None = None
    plan: Plan | None = None
    products: np.ndarray | None = None
    cluster_cells: str | None = None

    @property
    def singletons(self) -> int:
        return self.n_complete - self.n_obs


@dataclass
class RowCodes:
    """The sample rows in runs that each hold rows of one level of effect ``big`` (the one with
    most levels): ``codes[d]`` holds every row's level code of each other effect d (int32),
    ``weights`` the rows' weights (None: unweighted), and ``runs`` the level of ``big`` of each
    run and its row count (None: one run per level, in code order).

    Mutable on purpose: :mod:`bigpanel.numerics.rowcodes` empties it once it has built its
    link tables, so that the row arrays do not outlive their use.
    """

    big: int
    codes: dict[int, np.ndarray]
    weights: np.ndarray | None
    runs: tuple[np.ndarray, np.ndarray] | None = None


def _complete(spec: Spec) -> Fragment:
    parts = [f"isfinite({v})" for v in spec.value_aliases]
    for d in range(len(spec.fe)):
        parts += [f"{k} IS NOT NULL" for k in spec.key_aliases(d)]
    parts += [f"{c} IS NOT NULL" for c in spec.cluster_aliases]
    if spec.time:
        parts.append("tm IS NOT NULL")
    if spec.weights:
        parts.append("isfinite(w) AND w > 0")
    return join(parts, " AND ")


def _key(spec: Spec, column: str) -> str:
    """An effect or cluster column; NaN and +-inf in a floating column become NULL (an incomplete row)."""
    if column in spec.float_keys:
        return f"CASE WHEN isfinite({ident(column)}) THEN {ident(column)} END"
    return ident(column)


def _value(spec: Spec, name: str, j: int, sql: str) -> str:
    """Value column j (the term ``name``, SQL ``sql``) as a double; a wide integer or decimal
    column first loses an integer offset in the exact decimal domain (its own scale kept)."""
    if name in spec.wide_values:
        scale = spec.wide_scales[spec.wide_values.index(name)]
        return f"CAST(CAST({ident(name)} AS DECIMAL(38, {scale})) - CAST(o.o{j} AS DECIMAL(38, 0)) AS DOUBLE)"
    return f"CAST({sql} AS DOUBLE)"


def _store_offsets(eng: Engine, spec: Spec) -> bool:
    """Store ``bp_offset``: an integer (exact as a double) per value column, 0 unless the column is wide.

    A BIGINT near 2^62 cast to a double keeps 53 of its bits; the difference from
    an integer offset inside the data's range is exact in DECIMAL(38, 0) (a 128-bit integer
    in DuckDB, NUMERIC in PostgreSQL, DECIMAL in Spark) and, when the
    column's spread is below 2^53, exact as a double too.
    """
    if not spec.wide_values:
        return False
    names = [spec.y, *spec.x]
    mins = join([f"CAST(min({ident(c)}) AS DOUBLE) AS o{j}" for j, c in enumerate(names) if c in spec.wide_values])
    row = eng.one("integer offsets", render("wide_offsets", columns=mins))
    values = {f"o{j}": float(round(row.get(f"o{j}") or 0.0)) for j in range(len(names))}
    put_one_row(eng, "bp_offset", values)
    return True


def value_offsets(eng: Engine, spec: Spec) -> np.ndarray:
    """The offsets ``bp_filtered`` subtracted from each value column (zeros without wide integers)."""
    if not spec.wide_values:
        return np.zeros(len(spec.value_aliases))
    row = eng.one("read the integer offsets", render("read_offsets"))
    return np.array([row[f"o{j}"] for j in range(len(spec.value_aliases))], dtype=float)


def check_scale(spec: Spec, shift: np.ndarray) -> None:
    """Refuse values whose squares leave a double's range (about 1e-308 to 1e308) in one line.

    Sums of squares are formed from the shifted values: a typical magnitude beyond
    1e150 overflows them, one below 1e-150 underflows them to zero (a regressor
    would look absorbed).
    """
    for name, m in zip([spec.y, *spec.x], np.abs(shift)):
        if m > 1e150 or 0 < m < 1e-150:
            raise BigPanelError(
                f"column {name!r} holds values near {m:.0e}: their squares leave the range of a double; "
                "rescale it (for example divide by a power of ten) and fit again"
            )


def create_views(eng: Engine, spec: Spec, materialize: bool = False) -> None:
    """``bp_filtered`` (used columns, internal names) and the view ``bp_sample``; with
    ``spec.sample_where`` also ``bp_complete``, every complete row, of which bp_sample is a part.

    ``materialize`` makes ``bp_filtered`` a table, read once from the source: for
    CSV, whose every scan would otherwise parse the text again. A volatile filter
    (``random() < 0.5``) always makes it a table, so that every pass sees the
    same sample (as a view, each pass would draw another one).
    """
    offsets = _store_offsets(eng, spec)
    terms = zip([spec.y, *spec.x], spec.value_sql)
    columns = [f"{_value(spec, name, j, sql)} AS v{j}" for j, (name, sql) in enumerate(terms)]
    for d, cols in enumerate(spec.fe):
        columns += [f"{_key(spec, c)} AS {a}" for c, a in zip(cols, spec.key_aliases(d))]
    columns += [f"{_key(spec, c)} AS {a}" for c, a in zip(spec.cluster, spec.cluster_aliases)]
    if spec.time:
        columns.append(f"{ident(spec.time)} AS tm")
    if spec.weights:
        columns.append(f"CAST({ident(spec.weights)} AS DOUBLE) AS w")
    columns += [f"{sql} AS {alias}" for alias, sql in spec.carry]
    where = Fragment(f"({spec.where})" if spec.where else "TRUE")  # the filter as the spec parsed and re-rendered it
    materialize = materialize or spec.volatile_where
    kind = Fragment("TABLE" if materialize else "VIEW")
    eng.execute("used columns", render("filtered", kind=kind, columns=join(columns), where=where,
                                       offsets=Fragment(" CROSS JOIN bp_offset AS o" if offsets else "")),
                raw=materialize)
    complete = _complete(spec)
    if spec.sample_where:  # the fit uses a subset of the complete rows; bp_complete keeps them all
        eng.execute("complete rows", render("complete_rows", complete=complete))
        complete = Fragment(f"{complete} AND ({spec.sample_where})")
    eng.execute("sample view", render("sample", complete=complete))


def source_rows(eng: Engine, spec: Spec, n_filtered: int) -> int:
    """Rows before the filter: counted only when there is a filter, and the error when none are left."""
    if n_filtered == 0:
        raise BigPanelError(
            "no rows to fit: " + (f"the filter {spec.where!r} keeps none" if spec.where else "the source is empty")
        )
    return int(eng.one("count source", render("count_source"))["n"]) if spec.where else n_filtered


def no_complete_rows(bad: dict[str, int], n_filtered: int) -> BigPanelError:
    """The error for a sample that listwise deletion empties, naming the worst column."""
    worst = max(bad, key=lambda c: bad[c])
    return BigPanelError(
        f"no complete rows: column {worst!r} is missing or not finite in {bad[worst]:,} of {n_filtered:,} rows"
    )


def start(eng: Engine, spec: Spec, source_kind: str) -> Start:
    """Row counts and the shifts, stored as ``bp_shift``.

    Counting is a metadata lookup for unfiltered Parquet or a materialised CSV;
    it reads the rows (and counts as a pass) under a filter on Parquet or on an
    engine whose count scans its tables.
    """
    scans = eng.count_scans or (bool(spec.where) and source_kind != "csv" and not spec.volatile_where)
    n_filtered = int(eng.one("count rows", render("count_filtered"), raw=scans)["n"])
    n_source = source_rows(eng, spec, n_filtered)
    avgs = join([f"avg({v}) AS m{j}" for j, v in enumerate(spec.value_aliases)])
    row = eng.one("shifts", render("shift_sample", avgs=avgs, columns=join(spec.value_aliases, ", ")))
    if row["m0"] is None:
        raise no_complete_rows(incomplete(eng, spec), n_filtered)
    shift = np.array([row[f"m{j}"] for j in range(len(spec.value_aliases))], dtype=float)
    check_scale(spec, shift)
    put_one_row(eng, "bp_shift", {f"m{j}": float(v) for j, v in enumerate(shift)})
    return Start(n_source, n_filtered, shift + value_offsets(eng, spec))


def incomplete(eng: Engine, spec: Spec) -> dict[str, int]:
    """Rows with a missing or non-finite value, per used column (a pass; run only when rows were lost)."""
    aggs: list[str] = []
    checks: list[tuple[str, str]] = []
    for j, name in enumerate([spec.y, *spec.x]):
        aggs.append(f"sum(CASE WHEN isfinite(v{j}) THEN 0 ELSE 1 END) AS bad_v{j}")
        checks.append((name, f"bad_v{j}"))
    keys = [(name, a) for d, cols in enumerate(spec.fe) for name, a in zip(cols, spec.key_aliases(d))]
    keys += list(zip(spec.cluster, spec.cluster_aliases))
    if spec.time:
        keys.append((spec.time, "tm"))
    if spec.weights:  # a missing weight and a zero or negative one are different mistakes
        aggs.append("sum(CASE WHEN isfinite(w) THEN 0 ELSE 1 END) AS bad_w")
        aggs.append("sum(CASE WHEN isfinite(w) AND w <= 0 THEN 1 ELSE 0 END) AS low_w")
        checks += [(spec.weights, "bad_w"), (f"{spec.weights} zero or negative", "low_w")]
    for name, alias in keys:
        aggs.append(f"sum(CASE WHEN {alias} IS NULL THEN 1 ELSE 0 END) AS bad_{alias}")
        checks.append((name, f"bad_{alias}"))
    row = eng.one("incomplete rows per column", render("incomplete", aggregates=join(aggs)), raw=True)
    out: dict[str, int] = {}
    for name, key in checks:
        out[name] = max(out.get(name, 0), int(row[key] or 0))
    return out


def put_one_row(eng: Engine, table: str, values: dict[str, float]) -> None:
    """Store numbers as the one-row table ``table`` through bound parameters."""
    cols = join([f"CAST(${name} AS DOUBLE) AS {name}" for name in values])
    eng.execute(f"store {table}", render("one_row", table=Fragment(table), columns=cols), values)


@dataclass(frozen=True)
class Plan:
    """How the effects are partialled out, and what was measured to choose it.

    ``levels`` holds each effect's level count after singleton removal and
    ``pair_bounds`` the product of the level counts of each pair of effects, an
    upper bound on its distinct pairs of levels; ``python_bytes`` is the planned
    largest numpy allocation of the strategy.
    """

    strategy: str
    reason: str
    rows: int = 0
    levels: dict[str, int] | None = None
    pair_bounds: dict[str, int] | None = None
    python_bytes: int = 0

    def to_dict(self) -> dict:
        return {"name": self.strategy, "reason": self.reason, "rows": self.rows, "levels": self.levels,
                "pairs_at_most": self.pair_bounds, "python_bytes_planned": self.python_bytes}


def row_code_bytes(rows: int, levels: list[int]) -> int:
    """Peak numpy bytes of the row-codes strategy (see :mod:`bigpanel.numerics.rowcodes`): an int32
    level code per row of every effect but the largest (the link tables' column indices, held
    from the fetch on) and one float64 weight per row, shared by the link tables."""
    return rows * (4 * (len(levels) - 1) + 8)


def choose_strategy(spec: Spec, levels: list[int], rows: int, budget: int, forced: str | None = None) -> Plan:
    """Choose how to partial out two or more effects from their level counts (see the README):

    * pair tables, when for every pair of effects the product of their level counts is at
      most rows / ``COMPRESSION``: the pair tables then surely compress the rows, and no
      iteration reads a row;
    * row codes, otherwise, when each row's level codes fit ``budget`` (bytes);
    * in-engine sweeps, when they do not: every sweep is a grouped pass in the engine.

    ``forced`` (tests, benchmarks) overrides the choice but not the measurement.
    """
    k = len(levels)
    names = spec.fe_names
    bounds = {(d, e): levels[d] * levels[e] for d, e in combinations(range(k), 2)}
    worst = max(bounds, key=lambda de: bounds[de])
    pair_name = f"{names[worst[0]]} x {names[worst[1]]}"
    cells = CELL_BYTES * sum(min(b, rows) for b in bounds.values())
    codes = row_code_bytes(rows, levels)
    per_row = bounds[worst] / rows
    if per_row * COMPRESSION <= 1 and cells <= budget:
        strategy, planned = PAIR_TABLES, cells
        why = f"pairs of levels compress: at most {per_row:.3f} cells per row ({pair_name})"
    elif codes <= budget:
        strategy, planned = ROW_CODES, codes
        why = (f"{pair_name} may hold up to {min(per_row, 1.0):.2f} distinct pairs per row, too many for pair "
               f"tables; per-row level codes need {codes / 2**20:,.0f} MiB")
    else:
        strategy, planned = IN_ENGINE, 0
        why = (f"neither the pair tables nor per-row codes ({codes / 2**20:,.0f} MiB) fit the Python-side budget "
               f"of {budget / 2**20:,.0f} MiB")
    if forced is not None:
        if forced not in STRATEGIES:
            raise BigPanelError(f"unknown strategy {forced!r}: choose one of {', '.join(STRATEGIES)}")
        strategy, why = forced, f"chosen by the caller (measured: {why})"
    return Plan(strategy, why, rows, {names[d]: levels[d] for d in range(k)},
                {f"{names[d]} x {names[e]}": b for (d, e), b in bounds.items()}, planned)


def _sets(spec: Spec) -> list[tuple[int, ...]]:
    """Grouping sets of the reduction: each effect alone."""
    return [(d,) for d in range(len(spec.fe))]


def _set_keys(spec: Spec, dims: tuple[int, ...]) -> list[str]:
    """The key columns of the effects ``dims`` (one grouping set of the reduction)."""
    return [a for d in dims for a in spec.key_aliases(d)]


def _gid(spec: Spec, dims: tuple[int, ...]) -> int:
    return grouping_id(_set_keys(spec, tuple(range(len(spec.fe)))), _set_keys(spec, dims))


def _build_levels(eng: Engine, spec: Spec, min_count: int) -> None:
    for d in range(len(spec.fe)):
        keys = join(spec.key_aliases(d), ", ")
        sql = render("levels", table=level_table(d), keys=keys)
        eng.execute(f"levels of {spec.fe_names[d]}", sql, {"gid": _gid(spec, (d,)), "min_count": min_count})


def _single_levels(eng: Engine, spec: Spec) -> int:
    return sum(
        int(eng.one("singletons", render("singleton_levels", table=level_table(d)))["n_single"])
        for d in range(len(spec.fe))
    )


def products(spec: Spec) -> list[tuple[int, int]]:
    """The off-diagonal products (i < j) of the value columns that one-way cells carry."""
    m = len(spec.value_aliases)
    return [(i, j) for i in range(m) for j in range(i + 1, m)]


def carries_products(spec: Spec) -> bool:
    """Whether the cells carry every product of two shifted columns: with one effect (the level
    co-moments), and with more unless the errors are clustered (the demeaned cross-products
    then follow from the solved effects, :func:`bigpanel.passes.moments.solution_cross_products`; a
    clustered fit needs per-cluster sums of rows anyway)."""
    return len(spec.fe) == 1 or spec.variance != "cr1"


def cell_sums(spec: Spec, t: list[str], with_products: bool) -> list[str]:
    """Per level: weight, the sums and squares of the value expressions ``t`` (one per value
    column), cluster ranges and, ``with_products``, every product of two of them."""
    w = spec.w
    sums = ["sum(w) AS nw" if spec.weights else "count(*) AS nw"]
    sums += [f"sum({w}{tj}) AS s{j}" for j, tj in enumerate(t)]
    sums += [f"sum({w}{tj} * {tj}) AS q{j}" for j, tj in enumerate(t)]
    if with_products:
        sums += [f"sum({w}{t[i]} * {t[j]}) AS p{i}_{j}" for i, j in products(spec)]
    for c in spec.cluster_aliases:
        sums += [f"min({c}) AS {c}_min", f"max({c}) AS {c}_max"]
    return sums


def reduce_cells(eng: Engine, spec: Spec, drop_singletons: bool, budget: int, forced: str | None = None,
                 by_cluster: bool = False) -> Reduction:
    """Pass 2 (repeated only to peel singletons): per-level statistics of every effect, the
    level tables, the strategy (:func:`choose_strategy`) and what it fetches to numpy.
    ``by_cluster`` (the wild bootstrap follows): with one cluster column and two effects (one
    may be nested in the clusters and the other cut across them: the case whose sums these
    cells give without a pass), the pass groups by (cluster, level) instead (:func:`_cells_pass`)."""
    k = len(spec.fe)
    cluster = spec.cluster_aliases[0] if by_cluster and len(spec.cluster_aliases) == 1 and k == 2 else None
    shifted = [f"({v} - s.m{j})" for j, v in enumerate(spec.value_aliases)]
    sums = cell_sums(spec, shifted, carries_products(spec))
    filters = Fragment("")
    rounds = 0
    n_complete = None
    while True:
        rounds += 1
        _cells_pass(eng, spec, sums, filters, rounds, cluster)
        _build_levels(eng, spec, min_count=1)
        if n_complete is None:
            n_complete = int(eng.one("complete rows", render("level_rows", table=level_table(0)))["n"] or 0)
            if n_complete == 0:
                raise BigPanelError("no complete rows: every row misses a used value")
        if not drop_singletons or _single_levels(eng, spec) == 0:
            break
        _build_levels(eng, spec, min_count=2)
        if k == 1:
            break  # one effect: dropping a singleton level changes no other level
        if rounds >= MAX_SINGLETON_ROUNDS:
            raise BigPanelError(f"singletons still left after {rounds} rounds; rerun with --singletons keep")
        filters = Fragment("\n" + level_joins("bp_lev", {d: spec.key_aliases(d) for d in range(k)}))
    return replace(_fetch(eng, spec, n_complete, rounds, budget, forced), cluster_cells=cluster)


def cluster_cells_gid(spec: Spec, cluster: str, d: int) -> int:
    """The ``gid`` of effect d's grouping set in ``bp_cluster_cells`` (:func:`_cells_pass`)."""
    return grouping_id([cluster, *_set_keys(spec, tuple(range(len(spec.fe))))], [cluster, *_set_keys(spec, (d,))])


def _cells_pass(eng: Engine, spec: Spec, sums: list[str], filters: Fragment, rounds: int, cluster: str | None) -> None:
    """Pass 2 into ``bp_cells``: one grouping set per effect. With ``cluster``, one grouping set
    per effect and the cluster column into ``bp_cluster_cells`` instead, then each level's cells
    added up over its clusters into ``bp_cells`` (no further pass; the sums, counts and cluster
    ranges come out as pass 2 writes them). A level nested in the clusters has one cluster, so
    that set has as many groups as the level's own; a cut-across effect has clusters x levels."""
    k = len(spec.fe)
    keys = _set_keys(spec, tuple(range(k)))
    if cluster is None:
        eng.execute(f"per-level statistics (round {rounds})",
                    render("cells", table=Fragment("bp_cells"), keys=join(keys, ", "), sums=join(sums),
                           filters=filters, sets=grouping_sets([_set_keys(spec, s) for s in _sets(spec)])), raw=True)
        return
    eng.execute(f"per-level statistics by cluster (round {rounds})",
                render("cells", table=Fragment("bp_cluster_cells"), keys=join([cluster, *keys], ", "),
                       sums=join(sums), filters=filters,
                       sets=grouping_sets([[cluster, *_set_keys(spec, s)] for s in _sets(spec)])), raw=True)
    columns = [part.rsplit(" AS ", 1)[1] for part in sums]
    again = [f"{'min' if n.endswith('_min') else 'max' if n.endswith('_max') else 'sum'}({n}) AS {n}" for n in columns]
    complete = [" AND ".join([f"gid = $gid{i}"] + [f"{a} IS NOT NULL" for a in _set_keys(spec, s)])
                for i, s in enumerate(_sets(spec))]
    eng.execute("per-level statistics from the cells by cluster",
                render("cells_by_level", keys=join(keys, ", "), sums=join(again),
                       sets=grouping_sets([_set_keys(spec, s) for s in _sets(spec)]),
                       complete=join([f"({c})" for c in complete], " OR ")),
                {f"gid{i}": _gid(spec, s) for i, s in enumerate(_sets(spec))})


def _level_arrays(eng: Engine, spec: Spec, d: int) -> tuple[np.ndarray, np.ndarray, list[bool]]:
    """Weights and row counts of effect d's levels, and for each cluster column whether d is nested in it."""
    tab = eng.arrow("level counts", render("level_table", columns=names(["nw", "n"]), table=level_table(d)))
    weights = tab.column("nw").to_numpy().astype(float)
    rows = tab.column("n").to_numpy().astype(np.int64)
    keys = names(spec.key_aliases(d))
    nested = []
    for c in spec.cluster_aliases:
        sql = render("nested", low=Fragment(f"{c}_min"), high=Fragment(f"{c}_max"), keys=keys, table=level_table(d))
        nested.append(bool(eng.one("nesting", sql, {"gid": _gid(spec, (d,))})["nested"]))
    return weights, rows, nested


def _level_sums(eng: Engine, spec: Spec, d: int) -> tuple[np.ndarray, np.ndarray]:
    """Effect d's per-level sums (levels x columns) and the columns' total sums of squares."""
    m = len(spec.value_aliases)
    sums = join([f"c.s{j}" for j in range(m)] + [f"c.q{j}" for j in range(m)], ", ")
    sql = render("level_sums", sums=sums, table=level_table(d), keys=names(spec.key_aliases(d)))
    tab = eng.arrow("level sums", sql, {"gid": _gid(spec, (d,))})
    rhs = np.column_stack([tab.column(f"s{j}").to_numpy() for j in range(m)])
    return rhs, np.array([pc.sum(tab.column(f"q{j}")).as_py() for j in range(m)], dtype=float)


def _products(eng: Engine, spec: Spec) -> np.ndarray:
    """T'WT: every product of two shifted columns summed over the sample, from the cells of
    the first effect (compensated sums over its levels)."""
    m = len(spec.value_aliases)
    pairs = [(i, j) for i in range(m) for j in range(i, m)]
    sums = join([f"fsum(c.{f'q{i}' if i == j else f'p{i}_{j}'}) AS t_{i}_{j}" for i, j in pairs])
    sql = render("level_moments", sums=sums, keys=names(spec.key_aliases(0)), cells=Fragment("bp_cells"),
                 levels=level_table(0))
    row = eng.one("products of the shifted columns", sql, {"gid": _gid(spec, (0,))})
    out = np.zeros((m, m))
    for i, j in pairs:
        out[i, j] = out[j, i] = row[f"t_{i}_{j}"]
    return out


def _level_joins(spec: Spec) -> Fragment:
    """Inner joins of the sample to every effect's final level table (``l1``, ``l2``, ...)."""
    return level_joins("bp_lev", {d: spec.key_aliases(d) for d in range(len(spec.fe))}, "l")


def level_table(d: int) -> Fragment:
    """The name of effect d's level table (its keys, code, weight and rows per kept level)."""
    return Fragment(f"bp_lev_{d + 1}")


def level_keys(eng: Engine, spec: Spec, d: int) -> pa.Table:
    """Effect d's level keys in code order, from its level table."""
    return eng.arrow("effect keys", render("level_table", columns=join(spec.key_aliases(d), ", "),
                                           table=level_table(d)))


def pair_tables(eng: Engine, spec: Spec, counts: list[np.ndarray]) -> dict[tuple[int, int], sparse.csr_matrix]:
    """One pass: the (weighted) rows per pair of levels of every pair of effects, grouped on the
    integer level codes (one grouping set per pair), then fetched as codes and weights."""
    k = len(spec.fe)
    codes = [f"l{d + 1}.code" for d in range(k)]
    pairs = list(combinations(range(k), 2))
    sql = render("pair_counts", codes=join([f"{c} AS c{d + 1}" for d, c in enumerate(codes)]),
                 grouping=names(codes), weight=Fragment("sum(w)" if spec.weights else "count(*)"),
                 joins=_level_joins(spec),
                 sets=grouping_sets([[codes[d], codes[e]] for d, e in pairs]))
    eng.execute("pairs of levels", sql, raw=True)
    cross: dict[tuple[int, int], sparse.csr_matrix] = {}
    for d, e in pairs:
        tab = eng.arrow("fetch pair tables", render("pair_table", codes=names([f"c{d + 1}", f"c{e + 1}"])),
                        {"gid": grouping_id(codes, [codes[d], codes[e]])})
        nw = tab.column("nw").to_numpy().astype(float)
        code_d, code_e = (tab.column(f"c{a + 1}").to_numpy() for a in (d, e))
        cross[(d, e)] = sparse.csr_matrix((nw, (code_d, code_e)), shape=(len(counts[d]), len(counts[e])))
    return cross


EXTRA_RUNS = 64  # runs beyond one per level that the unsorted row codes may hold (1/64 of the levels, at least 64)


def fetch_codes(eng: Engine, spec: Spec, levels: list[int], n_obs: int) -> RowCodes:
    """Every sample row's int32 level code of each effect but the largest, and its weight, in
    runs of rows of one level of the largest effect, as :mod:`bigpanel.numerics.rowcodes` needs
    them (:func:`stream_in_runs`)."""
    big = int(np.argmax(levels))
    small = [d for d in range(len(levels)) if d != big]
    cols = [f"l{d + 1}.code AS c{d + 1}" for d in small] + (["w"] if spec.weights else [])
    cols.append(f"l{big + 1}.code AS c{big + 1}")

    def sql(sort: bool) -> str:
        return render("row_codes", codes=join(cols), joins=_level_joins(spec),
                      order=Fragment(f"\nORDER BY l{big + 1}.code" if sort else ""))

    codes = {d: np.empty(n_obs, dtype=np.int32) for d in small}
    return stream_in_runs(eng, "level codes of every row", sql, big, levels, codes,
                          np.empty(n_obs) if spec.weights else None)


def stream_in_runs(eng: Engine, label: str, sql: Callable[[bool], str], big: int, levels: list[int],
                   codes: dict[int, np.ndarray], weights: np.ndarray | None) -> RowCodes:
    """Stream rows given as (codes of the other effects in order, weight when ``weights`` is given,
    code of effect ``big``) by ``sql(sort)`` into the arrays ``codes`` (each other effect's, one
    entry per row) and ``weights``, in runs of one level of ``big``; the arrays may be reused
    from an earlier stream (fresh pages cost time on some machines).

    Panels are mostly stored unit by unit, so on an engine that returns rows about in the
    order it reads them the rows first stream unsorted, with the largest effect's code
    beside them to find the runs; a level may come in a few runs (the engine's threads hand
    over batches a little out of order). Only when the runs outnumber the levels by more
    than a 64th (the stream stops there) does a second pass ask the engine to sort the rows
    by that code (it spills if it must); an engine without that order sorts at once. The
    peak is the arrays plus one batch.
    """
    if eng.ordered_scans:
        found = _stream_codes(eng, label, sql(False), big, levels, codes, weights)
        if found is not None:
            return found
    found = _stream_codes(eng, label + ", sorted", sql(True), big, levels, codes, weights)
    if found is None:
        raise RuntimeError("the rows sorted by the engine came back out of order")
    return found


def _stream_codes(eng: Engine, label: str, sql: str, big: int, levels: list[int], codes: dict[int, np.ndarray],
                  weights: np.ndarray | None) -> RowCodes | None:
    """One pass of :func:`stream_in_runs`; None as soon as the runs are too many."""
    small = sorted(codes)
    n_obs = len(weights) if weights is not None else len(codes[small[0]])
    heads: list[np.ndarray] = []
    starts: list[np.ndarray] = []
    n_runs, last, at = 0, -1, 0
    most = levels[big] + max(EXTRA_RUNS, levels[big] // EXTRA_RUNS)
    for batch in eng.stream(label, sql, raw=True):
        size = batch.num_rows
        if at + size > n_obs:
            raise RuntimeError(f"{label}: the pass returned more rows than the levels hold")
        if size == 0:
            continue
        for j, d in enumerate(small):
            codes[d][at:at + size] = batch.column(j).to_numpy()
        if weights is not None:
            weights[at:at + size] = batch.column(len(small)).to_numpy()
        b = batch.column(batch.num_columns - 1).to_numpy()
        first = np.flatnonzero(b[1:] != b[:-1]) + 1
        if b[0] != last:
            first = np.concatenate([[0], first])
        n_runs += len(first)
        if n_runs > most:
            return None
        heads.append(b[first].astype(np.int32))
        starts.append(first + at)
        last, at = b[-1], at + size
    if at != n_obs:
        raise RuntimeError(f"{label}: the pass returned {at:,} rows, the levels hold {n_obs:,}")
    head = np.concatenate(heads) if heads else np.zeros(0, dtype=np.int32)
    if len(head) == levels[big] and np.array_equal(head, np.arange(levels[big])):
        return RowCodes(big, dict(codes), weights)
    return RowCodes(big, dict(codes), weights, (head, np.diff(np.concatenate(starts + [[n_obs]]))))


def _fetch(eng: Engine, spec: Spec, n_complete: int, rounds: int, budget: int, forced: str | None) -> Reduction:
    k = len(spec.fe)
    counts, rows, nested = zip(*(_level_arrays(eng, spec, d) for d in range(k)))
    for d in range(k):
        if len(counts[d]) == 0:
            raise BigPanelError(f"no rows left: every level of {spec.fe_names[d]!r} holds a single row (singletons)")
    sums = [_level_sums(eng, spec, d) for d in range(k)]
    n_obs = int(rows[0].sum())
    plan = (Plan(ONE_WAY, "one effect: exact demeaning by level means", n_obs) if k == 1
            else choose_strategy(spec, [len(c) for c in counts], n_obs, budget, forced))
    cross = pair_tables(eng, spec, list(counts)) if plan.strategy == PAIR_TABLES else None
    codes = fetch_codes(eng, spec, [len(c) for c in counts], n_obs) if plan.strategy == ROW_CODES else None
    totals = _products(eng, spec) if k > 1 and carries_products(spec) else None
    return Reduction(list(counts), list(rows), [s[0] for s in sums], cross, list(nested), sums[0][1],
                     n_complete, n_obs, rounds, plan.strategy, codes, plan, totals)
