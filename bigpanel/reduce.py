"""Passes over the raw rows that reduce the panel to group-level statistics.

Pass 1 (:func:`profile`) counts what the filter and the listwise deletion
remove and takes each value column's mean as its shift. Pass 2
(:func:`reduce_cells`) groups the sample once by every effect (one effect) or
every pair of effects (two or more) and keeps, per cell, the row count and the
sums of the shifted values. Dropping singletons repeats pass 2 only while a
level is left with one row.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations

import numpy as np
import pyarrow.compute as pc
from scipy import sparse

from .engine import Engine
from .errors import BigPanelError
from .spec import Spec
from .sqltext import grouping_id, grouping_sets, ident, join, render

MAX_SINGLETON_ROUNDS = 200


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
    the sparse table of rows per pair of levels of effects d < e (None when
    the pair tables exceed the memory budget: the projections then run in the
    engine, see :mod:`bigpanel.sweeps`), and
    ``sumsq`` each shifted column's sum of squares over the sample.
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

    @property
    def singletons(self) -> int:
        return self.n_complete - self.n_obs


def _complete(spec: Spec) -> str:
    parts = [f"isfinite({v})" for v in spec.value_aliases]
    for d in range(len(spec.fe)):
        parts += [f"{k} IS NOT NULL" for k in spec.key_aliases(d)]
    parts += [f"{c} IS NOT NULL" for c in spec.cluster_aliases]
    if spec.time:
        parts.append("tm IS NOT NULL")
    if spec.weights:
        parts.append("isfinite(w) AND w > 0")
    return " AND ".join(parts)


def create_views(eng: Engine, spec: Spec, materialize: bool = False) -> None:
    """``bp_filtered`` (used columns, internal names) and the view ``bp_sample``.

    ``materialize`` makes ``bp_filtered`` a table, read once from the source: for
    CSV, whose every scan would otherwise parse the text again.
    """
    columns = [f"CAST({sql} AS DOUBLE) AS v{j}" for j, sql in enumerate(spec.value_sql)]
    for d, cols in enumerate(spec.fe):
        columns += [f"{ident(c)} AS {a}" for c, a in zip(cols, spec.key_aliases(d))]
    columns += [f"{ident(c)} AS {a}" for c, a in zip(spec.cluster, spec.cluster_aliases)]
    if spec.time:
        columns.append(f"{ident(spec.time)} AS tm")
    if spec.weights:
        columns.append(f"CAST({ident(spec.weights)} AS DOUBLE) AS w")
    where = f"({spec.where})" if spec.where else "TRUE"
    kind = "TABLE" if materialize else "VIEW"
    eng.execute("used columns", render("filtered", kind=kind, columns=join(columns), where=where), raw=materialize)
    eng.execute("sample view", render("sample", complete=_complete(spec)))


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
    scans = eng.count_scans or (bool(spec.where) and source_kind != "csv")
    n_filtered = int(eng.one("count rows", render("count_filtered"), raw=scans)["n"])
    n_source = source_rows(eng, spec, n_filtered)
    avgs = join([f"avg({v}) AS m{j}" for j, v in enumerate(spec.value_aliases)])
    row = eng.one("shifts", render("shift_sample", avgs=avgs, columns=join(spec.value_aliases, ", ")))
    if row["m0"] is None:
        raise no_complete_rows(incomplete(eng, spec), n_filtered)
    shift = np.array([row[f"m{j}"] for j in range(len(spec.value_aliases))], dtype=float)
    put_one_row(eng, "bp_shift", {f"m{j}": float(v) for j, v in enumerate(shift)})
    return Start(n_source, n_filtered, shift)


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
    eng.execute(f"store {table}", render("one_row", table=table, columns=cols), values)


def _sets(spec: Spec) -> list[tuple[int, ...]]:
    k = len(spec.fe)
    return [(0,)] if k == 1 else list(combinations(range(k), 2))


def _set_keys(spec: Spec, dims: tuple[int, ...]) -> list[str]:
    """The key columns of the effects ``dims`` (one grouping set of the reduction)."""
    return [a for d in dims for a in spec.key_aliases(d)]


def _gid(spec: Spec, dims: tuple[int, ...]) -> int:
    return grouping_id(_set_keys(spec, tuple(range(len(spec.fe)))), _set_keys(spec, dims))


def _home_set(spec: Spec, d: int) -> tuple[int, ...]:
    """The first grouping set that holds effect ``d``: its levels are read from there."""
    return next(s for s in _sets(spec) if d in s)


def _build_levels(eng: Engine, spec: Spec, min_count: int) -> None:
    for d in range(len(spec.fe)):
        keys = join(spec.key_aliases(d), ", ")
        sql = render("levels", table=f"bp_lev_{d + 1}", keys=keys)
        eng.execute(f"levels of {spec.fe_names[d]}", sql, {"gid": _gid(spec, _home_set(spec, d)), "min_count": min_count})


def _single_levels(eng: Engine, spec: Spec) -> int:
    return sum(
        int(eng.one("singletons", render("singleton_levels", table=f"bp_lev_{d + 1}"))["n_single"])
        for d in range(len(spec.fe))
    )


def reduce_cells(eng: Engine, spec: Spec, drop_singletons: bool, cell_budget: int) -> Reduction:
    """Pass 2 (repeated only to peel singletons): cells, level tables, numpy arrays.

    Per cell: the row count and the sums and sums of squares of the shifted columns.
    """
    k = len(spec.fe)
    all_keys = join(_set_keys(spec, tuple(range(k))), ", ")
    w = spec.w
    sums = ["sum(w) AS nw" if spec.weights else "count(*) AS nw"]
    sums += [f"sum({w}({v} - s.m{j})) AS s{j}" for j, v in enumerate(spec.value_aliases)]
    sums += [f"sum({w}({v} - s.m{j}) * ({v} - s.m{j})) AS q{j}" for j, v in enumerate(spec.value_aliases)]
    for c in spec.cluster_aliases:
        sums += [f"min({c}) AS {c}_min", f"max({c}) AS {c}_max"]
    sets = grouping_sets([_set_keys(spec, s) for s in _sets(spec)])
    filters = ""
    rounds = 0
    n_complete = None
    while True:
        rounds += 1
        sql = render("cells", keys=all_keys, sums=join(sums), filters=filters, sets=sets)
        eng.execute(f"pass 2: group-level statistics (round {rounds})", sql, raw=True)
        _build_levels(eng, spec, min_count=1)
        if n_complete is None:
            n_complete = int(eng.one("complete rows", render("level_rows", table="bp_lev_1"))["n"] or 0)
            if n_complete == 0:
                raise BigPanelError("no complete rows: every row misses a used value")
        if not drop_singletons or _single_levels(eng, spec) == 0:
            break
        _build_levels(eng, spec, min_count=2)
        if k == 1:
            break  # one effect: dropping a singleton level changes no other level
        if rounds >= MAX_SINGLETON_ROUNDS:
            raise BigPanelError(f"singletons still left after {rounds} rounds; rerun with --keep-singletons")
        filters = "".join(
            f"\nJOIN bp_lev_{d + 1} USING ({', '.join(spec.key_aliases(d))})" for d in range(k)
        )
    return _fetch(eng, spec, n_complete, rounds, cell_budget)


def _level_arrays(eng: Engine, spec: Spec, d: int) -> tuple[np.ndarray, np.ndarray, list[bool]]:
    """Weights and row counts of effect d's levels, and for each cluster column whether d is nested in it."""
    tab = eng.arrow("level counts", render("level_table", columns="nw, n", table=f"bp_lev_{d + 1}"))
    weights = tab.column("nw").to_numpy().astype(float)
    rows = tab.column("n").to_numpy().astype(np.int64)
    keys = ", ".join(spec.key_aliases(d))
    nested = []
    for c in spec.cluster_aliases:
        sql = render("nested", low=f"{c}_min", high=f"{c}_max", keys=keys, table=f"bp_lev_{d + 1}")
        nested.append(bool(eng.one("nesting", sql, {"gid": _gid(spec, _home_set(spec, d))})["nested"]))
    return weights, rows, nested


def _level_sums(eng: Engine, spec: Spec, d: int) -> tuple[np.ndarray, np.ndarray]:
    """Effect d's per-level sums (levels x columns) and the columns' total sums of squares."""
    m = len(spec.value_aliases)
    sums = join([f"sum(c.s{j}) AS s{j}" for j in range(m)] + [f"sum(c.q{j}) AS q{j}" for j in range(m)], ", ")
    sql = render("level_sums", sums=sums, table=f"bp_lev_{d + 1}", keys=", ".join(spec.key_aliases(d)))
    tab = eng.arrow("level sums", sql, {"gid": _gid(spec, _home_set(spec, d))})
    rhs = np.column_stack([tab.column(f"s{j}").to_numpy() for j in range(m)])
    return rhs, np.array([pc.sum(tab.column(f"q{j}")).as_py() for j in range(m)], dtype=float)


def _fetch(eng: Engine, spec: Spec, n_complete: int, rounds: int, cell_budget: int) -> Reduction:
    k = len(spec.fe)
    m = len(spec.value_aliases)
    counts, rows, nested = zip(*(_level_arrays(eng, spec, d) for d in range(k)))
    for d in range(k):
        if len(counts[d]) == 0:
            raise BigPanelError(f"no rows left: every level of {spec.fe_names[d]!r} holds a single row (singletons)")
    n_cells = int(eng.one("cell count", render("cell_count"))["n"])
    if k >= 2 and n_cells * 8 * (2 * m + 3) > cell_budget:
        sums = [_level_sums(eng, spec, d) for d in range(k)]
        return Reduction(list(counts), list(rows), [s[0] for s in sums], None, list(nested), sums[0][1],
                         n_complete, int(rows[0].sum()), rounds)
    rhs: list[np.ndarray | None] = [None] * k
    cross: dict[tuple[int, int], sparse.csr_matrix] = {}
    for dims in _sets(spec):
        codes = join([f"l{d + 1}.code AS c{d + 1}" for d in dims], ", ")
        joins = "\n".join(
            f"JOIN bp_lev_{d + 1} AS l{d + 1} USING ({', '.join(spec.key_aliases(d))})" for d in dims
        )
        sql = render(
            "cell_stats",
            codes=codes,
            sums=join(["c.nw"] + [f"c.s{j}" for j in range(m)] + [f"c.q{j}" for j in range(m)], ", "),
            joins=joins,
            order=join([f"c{d + 1}" for d in dims], ", "),
        )
        tab = eng.arrow("fetch cells", sql, {"gid": _gid(spec, dims)})
        code = {d: tab.column(f"c{d + 1}").to_numpy() for d in dims}
        n = tab.column("nw").to_numpy().astype(float)
        s = np.column_stack([tab.column(f"s{j}").to_numpy() for j in range(m)])
        if dims == _sets(spec)[0]:
            sumsq = np.array([pc.sum(tab.column(f"q{j}")).as_py() for j in range(m)], dtype=float)
        for d in dims:
            if rhs[d] is None:
                g = len(counts[d])
                rhs[d] = np.column_stack([np.bincount(code[d], weights=s[:, j], minlength=g) for j in range(m)])
        if len(dims) == 2:
            d, e = dims
            cross[dims] = sparse.csr_matrix((n, (code[d], code[e])), shape=(len(counts[d]), len(counts[e])))
    return Reduction(
        counts=list(counts),
        rows=list(rows),
        rhs=[r for r in rhs if r is not None],
        cross=cross,
        nested=list(nested),
        sumsq=sumsq,
        n_complete=n_complete,
        n_obs=int(rows[0].sum()),
        rounds=rounds,
    )
