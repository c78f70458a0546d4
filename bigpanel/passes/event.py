"""The event study's passes over the rows (the imputation estimator of Borusyak, Jaravel and
Spiess 2024, Review of Economic Studies).

The untreated fit runs on ``bp_sample`` (the complete rows that are not treated); these
passes read ``bp_complete`` (every complete row) under internal names: ``f1_1`` the unit,
``f2_1`` the period, ``ft`` the first treated period, ``cl1`` the cluster, ``uw`` the
target weight. In order:

1. the panel check (:func:`check_panel`): the first-treated value must be one value per
   unit (or missing for all its rows); periods and cohorts are ranked for date periods;
2. the right-hand sides and the sums by cell (:func:`targets`), with the untreated fit's
   effects joined to the rows: per level of every effect, the untreated rows at each lead
   and the target weights of the imputable treated rows of each estimand; the treated rows
   that cannot be imputed, by reason; and per cohort and event time the sums of the
   imputed effects (treated rows) and of the demeaned columns (untreated rows at a lead);
3. the scores per cluster (:func:`cluster_scores`) over :func:`rows_view`, the usable rows
   with the untreated fit's effects and the extra columns' solutions joined back; their
   products over the clusters (:func:`meat`) read that small table, not the rows.

Sums are plain (not compensated): their summands are demeaned values and imputed effects.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from ..engines.base import Engine
from ..errors import BigPanelError
from ..model.event import Design
from ..model.spec import Spec
from ..sql.text import Fragment, grouping_id, grouping_sets, join, names, render
from .moments import store_effects

PANEL_KEYS = ["f1_1", "f2_1", "ft"]


@dataclass(frozen=True)
class PanelCounts:
    """What the panel check found among the complete rows."""

    rows: int
    treated: int
    units: int
    never_treated: int
    cohorts: int


def check_panel(eng: Engine, design: Design) -> PanelCounts:
    """Pass 1 (see the module docstring); makes the view ``bp_event_all`` of the complete rows
    with their event time ``k``, ``treated`` flag and target weight ``wt``."""
    keys = PANEL_KEYS if design.dates else PANEL_KEYS[:1]
    sets = [["f1_1"]] + ([["f2_1"], ["ft"]] if design.dates else [])
    eng.execute("event study: units and cohorts", render("event_panel", keys=names(keys),
                                                         sets=grouping_sets(sets)), raw=True)
    units = eng.one("units", render("event_units"), {"gid": grouping_id(keys, ["f1_1"])})
    bad = int(units["inconsistent"] or 0)
    if bad:
        raise BigPanelError(
            f"first-treated column {design.first_treated!r} is not one value per unit: it varies or is missing in "
            f"part of the rows of {bad:,} value(s) of {design.unit!r}, e.g. {design.unit} {units['example']}; give "
            "every row of a unit "
            "its first treated period, or leave it missing on every row of a unit never treated")
    joins, event_time = "", "CAST(r.f2_1 AS BIGINT) - CAST(r.ft AS BIGINT)"
    if design.dates:
        eng.execute("period ranks", render("event_periods"), {"gid": grouping_id(PANEL_KEYS, ["f2_1"])})
        eng.execute("cohort ranks", render("event_cohorts"), {"gid": grouping_id(PANEL_KEYS, ["ft"])})
        joins = ("\nLEFT JOIN bp_event_periods AS p ON p.f2_1 = r.f2_1"
                 "\nLEFT JOIN bp_event_cohorts AS c ON c.ft = r.ft")
        event_time = "p.r - c.re"
    weight = "CASE WHEN isfinite(r.uw) AND r.uw > 0 THEN r.uw END" if design.weights else "CAST(1 AS DOUBLE)"
    eng.execute("event rows", render("event_all", event_time=Fragment(event_time), weight=Fragment(weight),
                                     joins=Fragment(joins)))
    return PanelCounts(int(units["n"] or 0), int(units["n_treated"] or 0), int(units["units"] or 0),
                       int(units["never_treated"] or 0), int(units["cohorts"] or 0))


@dataclass(frozen=True)
class Targets:
    """The right-hand sides of the extra normal equations and what the pass counted.

    Columns, in order: one per lead (untreated rows at that event time), one per event time
    0..HI (the target weights of its imputable treated rows), one for all imputable treated
    rows. ``rhs[d]`` holds effect d's levels (code order) x columns, ``total`` each column's sum
    over the rows, ``excluded`` the treated rows that cannot be imputed by reason, ``cells``
    the sums by cohort ``fc`` and event time ``k`` of the imputable rows (:func:`targets`)."""

    rhs: list[np.ndarray]
    total: np.ndarray
    excluded: dict[str, int]
    cells: pa.Table


def _key_match(spec: Spec, d: int, alias: str) -> str:
    return " AND ".join(f"{alias}.{a} = r.{a}" for a in spec.key_aliases(d))


def exclusion_reasons(spec: Spec, design: Design, linked: bool) -> list[tuple[str, str]]:
    """(reason, SQL condition) in the order a treated row is tested; the first that holds counts."""
    names = spec.fe_names
    out = [("l1.code IS NULL", f"{design.unit} has no untreated row"),
           ("l2.code IS NULL", f"{design.time} has no untreated row (no comparison in that period)")]
    out += [(f"l{d + 1}.code IS NULL", f"level of {names[d]} without untreated rows") for d in range(2, len(names))]
    if linked:
        out.append(("g1.comp <> g2.comp", f"{design.unit} and {design.time} not linked by untreated rows"))
    if design.weights:
        out.append(("NOT coalesce(isfinite(r.uw), FALSE)", f"{design.weights} missing"))
        out.append(("r.uw <= 0", f"{design.weights} zero or negative"))
    return [(reason, cond) for cond, reason in out]


def put_fit(eng: Engine, keys: list[pa.Table], alpha: list[np.ndarray]) -> None:
    """The tables ``bp_event_fit_d``: each effect's level keys, its code and the untreated fit's
    effects a0.. (one per value column), for :func:`targets`."""
    coded = [k.append_column("code", pa.array(np.arange(k.num_rows, dtype=np.int32))) for k in keys]
    store_effects(eng, coded, alpha, prefix="bp_event_fit")


def targets(eng: Engine, spec: Spec, design: Design, levels: list[int], linked: bool, controls: list[int]) -> Targets:
    """Pass 2 (see the module docstring). ``linked``: the tables ``bp_event_comp_1`` and
    ``bp_event_comp_2`` hold the connected component of each unit and period level; the
    tables of :func:`put_fit` the untreated fit's effects, ``bp_event_coef`` its slopes b0..
    on the kept ``controls`` (value columns 1..K). Plain sums: the summands are demeaned."""
    k, m = len(spec.fe), len(spec.value_aliases)
    codes = [f"c{d + 1}" for d in range(k)]
    joins = [f"LEFT JOIN bp_event_fit_{d + 1} AS l{d + 1} ON {_key_match(spec, d, f'l{d + 1}')}" for d in range(k)]
    if linked:
        joins += [f"LEFT JOIN bp_event_comp_{d} AS g{d} ON g{d}.code = l{d}.code" for d in (1, 2)]
    reasons = exclusion_reasons(spec, design, linked)
    why = "CASE " + " ".join(f"WHEN {cond} THEN {i + 1}" for i, (_, cond) in enumerate(reasons)) + " ELSE 0 END"
    order = ["kk", "why", *codes, "fc", "k"]  # GROUPING's arguments in the order the sets name them (Spark wants that)
    cell_set = ["why", "fc", "k"]
    sets = grouping_sets([["kk", "why", c] for c in codes] + [cell_set])
    columns = [f"l{d + 1}.code AS c{d + 1}" for d in range(k)]
    columns += [f"r.v{j} - s.m{j} - " + " - ".join(f"l{d + 1}.a{j}" for d in range(k)) + f" AS e{j}" for j in range(m)]
    es = [f"e{j}" for j in controls]
    cell_sums = ["sum(wt * tau) AS swt", "sum(wt * wt * tau) AS sw2t", "sum(wt * wt) AS sw2"]
    cell_sums += [f"sum(wt * {e}) AS sw{e}" for e in es]
    eng.execute("event study: right-hand sides, exclusions and sums by cell",
                render("event_rhs", keys=names(order), columns=join(columns, ",\n                   "),
                       why=Fragment(why), joins=join(joins, "\n            "), sets=sets, sums=join(cell_sums),
                       fit=Fragment(_fit("b", es))),
                {"lo": design.lo, "beyond": design.hi + 1}, raw=True)
    rhs = [_level_rhs(eng, design, codes[d], levels[d], grouping_id(order, ["kk", "why", codes[d]]))
           for d in range(k)]
    gid = {"gid": grouping_id(order, cell_set)}
    row = eng.one("right-hand side totals", render("event_rhs_rows", columns=join(_target_sums(design, "k")),
                                                   filter=Fragment(""), group=Fragment("")),
                  {**_target_params(design), **gid})
    why_rows = eng.arrow("exclusions", render("event_exclusions"), gid).to_pylist()
    excluded = {reasons[int(r["why"]) - 1][0]: int(r["n"]) for r in why_rows}
    sums = names(["swt", "sw2t", "sw2", *(f"sw{e}" for e in es)])
    cells = eng.arrow("sums by cell", render("event_cells", sums=sums), gid)
    n_cols = len(design.leads) + len(design.post) + 1
    return Targets(rhs, np.array([float(row[f"r{j}"] or 0.0) for j in range(n_cols)]), excluded, cells)


def _target_params(design: Design) -> dict[str, int]:
    params = {f"lead{i}": a for i, a in enumerate(design.leads)}
    params.update({f"post{h}": p for h, p in enumerate(design.post)})
    return params


def _target_sums(design: Design, time: str) -> list[str]:
    """The sum of the target weights of each column (see :class:`Targets`) over the groups of
    the right-hand-side pass, whose event time is the column ``time``."""
    sums = [f"sum(CASE WHEN {time} = $lead{i} THEN sw ELSE 0 END) AS r{i}" for i in range(len(design.leads))]
    sums += [f"sum(CASE WHEN {time} = $post{h} THEN sw ELSE 0 END) AS r{len(design.leads) + h}"
             for h in range(len(design.post))]
    sums.append(f"sum(CASE WHEN {time} >= 0 THEN sw ELSE 0 END) AS r{len(sums)}")
    return sums


def _level_rhs(eng: Engine, design: Design, code: str, levels: int, gid: int) -> np.ndarray:
    """One effect's right-hand sides: its levels (code order) x the columns of :class:`Targets`."""
    sums = _target_sums(design, "kk")
    sql = render("event_rhs_rows", columns=join([code, *sums]), filter=Fragment(f" AND {code} IS NOT NULL"),
                 group=Fragment(f"GROUP BY {code}"))
    tab = eng.arrow("right-hand sides", sql, {**_target_params(design), "gid": gid})
    out = np.zeros((levels, len(sums)))
    at = tab.column(code).to_numpy().astype(np.int64)
    for j in range(len(sums)):
        out[at, j] = tab.column(f"r{j}").to_numpy(zero_copy_only=False).astype(float)
    return out


def put_components(eng: Engine, labels: np.ndarray, n_unit: int) -> None:
    """The connected component of each unit level and each period level (``bp_event_comp_1/2``)."""
    for d, lab in ((1, labels[:n_unit]), (2, labels[n_unit:])):
        eng.put_table(f"bp_event_comp_{d}", pa.table({"code": pa.array(np.arange(len(lab), dtype=np.int32)),
                                                      "comp": pa.array(lab.astype(np.int64))}))


def rows_view(eng: Engine, spec: Spec, extra: int, linked: bool) -> None:
    """The view ``bp_event_rows``: the usable rows with e_j (j over the outcome and controls) and
    z_i (i over the ``extra`` solved columns), from the tables ``bp_event_fx_d`` (each effect's
    level keys, ``comp`` for effects 1 and 2 when ``linked``, then a0..a{m-1} for the value
    columns and a{m}.. for the extra ones)."""
    k, m = len(spec.fe), len(spec.value_aliases)
    cols = [f"r.v{j} - s.m{j} - " + " - ".join(f"f{d + 1}.a{j}" for d in range(k)) + f" AS e{j}" for j in range(m)]
    cols += [" + ".join(f"f{d + 1}.a{m + i}" for d in range(k)) + f" AS z{i}" for i in range(extra)]
    joins = "\n".join(f"JOIN bp_event_fx_{d + 1} AS f{d + 1} ON {_key_match(spec, d, f'f{d + 1}')}" for d in range(k))
    usable = "NOT r.treated OR (r.wt IS NOT NULL" + (" AND f1.comp = f2.comp)" if linked else ")")
    eng.execute("usable rows", render("event_rows", columns=join(cols), joins=Fragment(joins), usable=Fragment(usable)))


def _fit(coef: str, names: list[str]) -> str:
    """``b.coef0 * name0 + ...`` over the one-row table ``b`` (0 when there is nothing to add)."""
    return " + ".join(f"b.{coef}{i} * {n}" for i, n in enumerate(names)) or "0"


@dataclass(frozen=True)
class ScoreTerms:
    """What the per-cluster scores need: the kept controls, the leads solved (event times;
    z_0.. in their order), and for each estimand its event time (None: every treated row) and
    its extra column, ``first_weight_column`` + its index."""

    controls: list[int]
    leads: list[int]
    estimands: list[int | None]
    first_weight_column: int


def _one(condition: str) -> str:
    """1.0 where ``condition`` holds, else 0 (a boolean times a double, in every dialect)."""
    return f"CAST(CAST({condition} AS INTEGER) AS DOUBLE)"


def cluster_scores(eng: Engine, t: ScoreTerms) -> None:
    """Pass 3: per cluster, the sums that make each estimand's and the pre-trend fit's scores,
    into ``bp_event_scores``: sa_h = sum a [k = h] (or sum a over every treated row), sb_h =
    sum z_h u and sc_j = sum e_j u over the untreated rows, sp_j = sum e_j u2 and sq_a =
    sum (L_a - z_a) u2 (see
    sql/event_scores.sql). The one-row table ``bp_event_coef`` holds the untreated fit's slopes
    (b*) and the pre-trend fit's on the controls (t*) and the leads (l*); ``bp_event_tbar`` each
    treated cell's weighted average imputed effect."""
    es = [f"e{j}" for j in t.controls]
    resid = f"r.e0 - ({_fit('b', [f'r.{e}' for e in es])})"
    lead_cols = [f"({_one(f'coalesce(r.k, 0) = $lead{a}')} - r.z{a})" for a in range(len(t.leads))]
    coefs = [f"b.t{i}" for i in range(len(es))] + [f"b.l{a}" for a in range(len(t.leads))]
    pretrend = f"r.e0 - ({' + '.join(f'{c} * {x}' for c, x in zip(coefs, [f'r.{e}' for e in es] + lead_cols)) or '0'})"
    sums = [f"sum(a * {_one(f'kt = $est{h}')}) AS sa{h}" if k is not None else f"sum(a) AS sa{h}"
            for h, k in enumerate(t.estimands)]
    sums += [f"sum(z{t.first_weight_column + h} * bu) AS sb{h}" for h in range(len(t.estimands))]
    sums += [f"sum({e} * bu) AS sc{i}" for i, e in enumerate(es)]
    sums += [f"sum({e} * u2) AS sp{i}" for i, e in enumerate(es)]
    sums += [f"sum(({_one(f'coalesce(k, 0) = $lead{a}')} - z{a}) * u2) AS sq{a}" for a in range(len(t.leads))]
    params = {f"lead{a}": k for a, k in enumerate(t.leads)}
    params.update({f"est{h}": k for h, k in enumerate(t.estimands) if k is not None})
    sql = render("event_scores", sums=join(sums), resid=Fragment(resid), pretrend=Fragment(pretrend))
    eng.execute("event study: scores per cluster", sql, params, raw=True)


def meat(eng: Engine, t: ScoreTerms) -> tuple[np.ndarray, np.ndarray, int, int]:
    """The scores per cluster from the sums of :func:`cluster_scores`: for estimand h,
    s_h = sa_h / W_h - sb_h - sum_j g_hj sc_j (``bp_event_coef`` holds 1 / W_h as w{h} and the
    weights' slopes on the controls as g{h}_{j}); for the pre-trend fit sp_j and sq_a. Returns
    the sums over clusters of their products (estimands x estimands, and the pre-trend fit's
    controls then leads), the number of clusters and of clusters with untreated rows."""
    n_est, n_reg = len(t.estimands), len(t.controls) + len(t.leads)
    scores = [f"b.w{h} * sa{h} - sb{h} - ({_fit(f'g{h}_', [f'sc{i}' for i in range(len(t.controls))])}) AS s{h}"
              for h in range(n_est)]
    scores += [f"sp{i} AS r{i}" for i in range(len(t.controls))]
    scores += [f"sq{a} AS r{len(t.controls) + a}" for a in range(len(t.leads))]
    sums = [f"fsum(s{h} * s{j}) AS v{h}_{j}" for h in range(n_est) for j in range(h, n_est)]
    sums += [f"fsum(r{a} * r{b}) AS m{a}_{b}" for a in range(n_reg) for b in range(a, n_reg)]
    row = eng.one("event study: products of the scores", render("event_meat", scores=join(scores), sums=join(sums)))

    def square(size: int, key: str) -> np.ndarray:
        out = np.zeros((size, size))
        for a in range(size):
            for b in range(a, size):
                out[a, b] = out[b, a] = float(row[f"{key}{a}_{b}"] or 0.0)
        return out

    return square(n_est, "v"), square(n_reg, "m"), int(row["clusters"]), int(row["clusters_untreated"] or 0)
