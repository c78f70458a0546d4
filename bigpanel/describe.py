"""What a panel looks like before it is fitted: shape, balance, gaps, duplicated keys,
missing values, columns that do not vary within units, and the connected components
of two effects.

Two aggregate passes read the rows (three with ``effects``): the row and missing-value
counts, then one grouping by (unit, period) and by unit that leaves a per-unit table in
DuckDB. Everything else is computed from that table or from the distinct pairs of the
two effect columns; only the histogram of periods per unit and those pairs reach Python.
"""

from __future__ import annotations

import re
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np
from rich import box
from rich.console import Group
from rich.table import Table
from rich.text import Text
from scipy import sparse
from scipy.sparse.csgraph import connected_components

from .engines.base import Engine
from .errors import BigPanelError
from .engines.registry import open_session
from .engines.source import Source
from .model.spec import NUMERIC, check_column
from .output.plots import pyplot, save_figure
from .sql.text import Fragment, ident, join, render

_FLOAT = re.compile(r"^(FLOAT|DOUBLE|REAL)$")
_ORDERED_TIME = re.compile(
    r"^(TINYINT|SMALLINT|INTEGER|BIGINT|HUGEINT|UTINYINT|USMALLINT|UINTEGER|UBIGINT|UHUGEINT"
    r"|FLOAT|DOUBLE|REAL|DECIMAL.*|DATE|TIMESTAMP.*)$"
)
# bands of the share of all periods in which a unit is seen, for the coverage section
COVERAGE_BANDS = ((1.0, "every period"), (0.75, "three quarters or more"), (0.5, "half to three quarters"),
                  (0.25, "a quarter to half"), (0.0, "under a quarter"))
BAR_WIDTH = 30


@dataclass
class EffectGraph:
    """The bipartite graph of two effect columns: levels, distinct pairs, components."""

    columns: list[str]
    levels: list[int]
    pairs: int
    components: int


@dataclass
class PanelDescription:
    """The description of a panel of units (``id``) observed over periods (``time``).

    Unit-level figures use the rows whose id and time are both present
    (``rows - rows_missing_key`` rows). ``balanced`` means every unit is observed in
    every period exactly once and no row lacks its id or time. A unit has a gap when
    some period seen elsewhere in the panel falls between its first and last period
    but not in its rows (integer, date and timestamp time columns only; otherwise
    ``units_with_gaps`` is None). ``period_histogram`` holds ``[periods, units]``
    pairs: how many units are observed in that many distinct periods.
    """

    source: str
    id: str
    time: str
    columns: dict[str, str]
    rows: int
    rows_missing_key: int
    units: int
    periods: int
    first_period: str
    last_period: str
    balanced: bool
    periods_min: int
    periods_q25: float
    periods_median: float
    periods_q75: float
    periods_max: int
    period_histogram: list[list[int]]
    units_with_gaps: int | None
    units_single_period: int
    duplicate_keys: int
    duplicate_rows: int
    nulls: dict[str, int]
    not_finite: dict[str, int]
    time_invariant: list[str]
    time_varying: list[str]
    effects: EffectGraph | None
    raw_passes: int
    warnings: list[str]

    def to_dict(self) -> dict[str, Any]:
        """The description as plain ints, floats, strings, lists and dicts (JSON-ready)."""
        return asdict(self)


def _col(j: int) -> str:
    return f"c{j}"


def _finite(kind: str, j: int) -> str:
    """The FILTER clause that keeps only finite values of a floating-point column."""
    return f" FILTER (WHERE isfinite({_col(j)}))" if _FLOAT.match(kind) else ""


def _id_columns(src: Source, id: str) -> list[str]:
    """The columns of the unit: ``id`` itself, or the parts of ``a:b`` (one unit per distinct pair)."""
    return [id] if id in src.columns else [part.strip() for part in id.split(":")]


def _unit_sql(columns: list[str]) -> Fragment:
    """The unit as one value: the column, or its parts as text, each but the last prefixed by its
    length so that no two different tuples give the same text; NULL when any part is NULL."""
    if len(columns) == 1:
        return ident(columns[0])
    text = [f"CAST({ident(c)} AS VARCHAR)" for c in columns]
    pieces = [f"CAST(length({t}) AS VARCHAR) || ':' || {t}" for t in text[:-1]] + [text[-1]]
    return join(pieces, " || ':' || ")


def _time_sql(time: str, kind: str) -> Fragment:
    """The period; a NaN or infinite floating-point period counts as missing."""
    return Fragment(f"CASE WHEN isfinite({ident(time)}) THEN {ident(time)} END") if _FLOAT.match(kind) else ident(time)


def _check_columns(src: Source, id: str, time: str, effects: tuple[str, str] | None) -> None:
    if effects is not None and len(effects) != 2:
        raise BigPanelError(f"effects needs exactly two columns, got {len(effects)}")
    for name in _id_columns(src, id):
        check_column(name, src, "id")
    check_column(time, src, "time")
    if time in _id_columns(src, id):
        raise BigPanelError(f"column {time!r} cannot be both the id (or part of it) and the time")
    for name in effects or ():
        check_column(name, src, "effect")


def _count_missing(eng: Engine, kinds: list[str]) -> dict[str, int]:
    """Pass 1: rows, NULLs per column (null_j) and non-finite values per float column (nonfinite_j)."""
    counts = [f"count(*) - count({_col(j)}) AS null_{j}" for j in range(len(kinds))]
    counts += [
        f"count(*) FILTER (WHERE NOT isfinite({_col(j)})) AS nonfinite_{j}"
        for j, kind in enumerate(kinds)
        if _FLOAT.match(kind)
    ]
    return eng.one("describe pass 1: rows and missing values", render("describe_counts", counts=join(counts)), raw=True)


def _group_units(eng: Engine, kinds: list[str], numeric: list[int]) -> dict[str, Any]:
    """Pass 2: the per-unit table ``bp_units``, then its summary (not a pass over the rows)."""
    cell_ranges = join([
        f",\n         min({_col(j)}){_finite(kinds[j], j)} AS lo{j}, max({_col(j)}){_finite(kinds[j], j)} AS hi{j}"
        for j in numeric
    ], "")
    unit_flags = join([f",\n       min(c.lo{j}) = max(c.hi{j}) AS same{j}" for j in numeric], "")
    eng.execute(
        "describe pass 2: periods per unit",
        render("describe_units", cell_ranges=cell_ranges, unit_flags=unit_flags),
        raw=True,
    )
    invariant = join([f",\n       bool_and(same{j}) AS inv{j}" for j in numeric], "")
    return eng.one("summary of units", render("describe_unit_summary", invariant=invariant))


def _effect_graph(eng: Engine, names: list[str], effects: tuple[str, str]) -> EffectGraph:
    """Pass 3: connected components of the graph whose edges are the distinct (a, b) pairs."""
    a, b = (_col(names.index(name)) for name in effects)
    pairs = eng.arrow("describe pass 3: effect pairs", render("describe_pairs", a=Fragment(a), b=Fragment(b)), raw=True)
    code_a = pairs.column("code_a").to_numpy()
    code_b = pairs.column("code_b").to_numpy()
    n_a = int(code_a.max()) + 1 if len(code_a) else 0
    n_b = int(code_b.max()) + 1 if len(code_b) else 0
    edges = sparse.coo_matrix(
        (np.ones(len(code_a)), (code_a, n_a + code_b)), shape=(n_a + n_b, n_a + n_b)
    )
    n_comp, _ = connected_components(edges, directed=False)
    return EffectGraph(columns=list(effects), levels=[n_a, n_b], pairs=len(code_a), components=int(n_comp))


def _warnings(desc: PanelDescription) -> list[str]:
    found = []
    if desc.duplicate_keys:
        found.append(
            f"DUPLICATED KEYS: {desc.duplicate_keys:,} ({desc.id}, {desc.time}) pairs occur more than once, "
            f"in {desc.duplicate_rows:,} rows; a panel should hold one row per unit and period"
        )
    if desc.rows_missing_key:
        found.append(
            f"rows without {desc.id} or {desc.time}: {desc.rows_missing_key:,}; they are left out of the unit figures"
        )
    if desc.units_single_period:
        found.append(
            f"units observed in a single period: {desc.units_single_period:,}; "
            "they carry no information under unit effects"
        )
    return found


def describe_panel(
    source: str,
    id: str,
    time: str,
    table: str | None = None,
    effects: tuple[str, str] | None = None,
    memory_limit: str | None = None,
    temp_dir: str | None = None,
    threads: int | None = None,
    on_step: Callable[[str], None] | None = None,
    delimiter: str | None = None,
    engine: str | None = None,
    spark_master: str | None = None,
    allow_remote: bool | None = None,
) -> PanelDescription:
    """Describe the panel in ``source`` whose units are ``id`` and periods ``time``.

    ``effects=(a, b)`` adds the number of connected components of the graph linking
    levels of ``a`` and ``b`` that share a row (the C in P = G_1 + G_2 - C).
    ``memory_limit``, ``temp_dir`` and ``threads`` are DuckDB's settings; ``delimiter``
    is a CSV source's field separator; ``engine`` and ``spark_master`` pick the engine as for a fit
    (:mod:`bigpanel.engines.registry`).
    """
    eng, src = open_session(
        source, table, engine=engine, memory_limit=memory_limit, temp_dir=temp_dir, threads=threads,
        on_step=on_step, delimiter=delimiter, spark_master=spark_master, allow_remote=allow_remote,
    )
    try:
        _check_columns(src, id, time, effects)
        names, kinds = list(src.columns), list(src.columns.values())
        keys = [*_id_columns(src, id), time]
        numeric = [j for j, (name, kind) in enumerate(src.columns.items())
                   if name not in keys and NUMERIC.match(kind)]
        columns = join([f"{ident(name)} AS {_col(j)}" for j, name in enumerate(names)])
        eng.execute("name columns", render("describe_view", id=_unit_sql(_id_columns(src, id)),
                                           time=_time_sql(time, src.columns[time]), columns=columns))
        counts = _count_missing(eng, kinds)
        shape = _group_units(eng, kinds, numeric)
        if shape["n_units"] == 0:
            raise BigPanelError(f"{source} has no row with both {id!r} and {time!r} present")
        histogram = eng.arrow("units by periods", render("describe_histogram"))
        graph = _effect_graph(eng, names, effects) if effects else None
        raw_passes = eng.raw_passes
    finally:
        eng.close()
    rows = int(counts["n_rows"])
    missing_key = rows - int(shape["rows_keyed"])
    q25, median, q75 = (float(shape[f"periods_q{p}"]) for p in (25, 50, 75))
    desc = PanelDescription(
        source=str(source),
        id=id,
        time=time,
        columns=dict(src.columns),
        rows=rows,
        rows_missing_key=missing_key,
        units=int(shape["n_units"]),
        periods=int(shape["n_periods"]),
        first_period=str(shape["first_period"]),
        last_period=str(shape["last_period"]),
        balanced=(shape["periods_min"] == shape["n_periods"] and shape["dup_keys"] == 0 and missing_key == 0),
        periods_min=int(shape["periods_min"]),
        periods_q25=q25,
        periods_median=median,
        periods_q75=q75,
        periods_max=int(shape["periods_max"]),
        period_histogram=[[int(k), int(n)]
                          for k, n in zip(histogram["periods"].to_pylist(), histogram["units"].to_pylist())],
        units_with_gaps=int(shape["units_with_gaps"]) if _ORDERED_TIME.match(src.columns[time]) else None,
        units_single_period=int(shape["units_single_period"]),
        duplicate_keys=int(shape["dup_keys"]),
        duplicate_rows=int(shape["dup_rows"]),
        nulls={name: int(counts[f"null_{j}"]) for j, name in enumerate(names)},
        not_finite={name: int(counts[f"nonfinite_{j}"]) for j, name in enumerate(names) if f"nonfinite_{j}" in counts},
        time_invariant=[names[j] for j in numeric if shape[f"inv{j}"] is True],
        time_varying=[names[j] for j in numeric if shape[f"inv{j}"] is False],
        effects=graph,
        raw_passes=raw_passes,
        warnings=[],
    )
    desc.warnings = _warnings(desc)
    return desc


def coverage(desc: PanelDescription) -> list[tuple[str, int]]:
    """Units per band of coverage, the share of the panel's periods in which a unit is seen
    (bands in :data:`COVERAGE_BANDS`, from every period down to under a quarter)."""
    counts = [0] * len(COVERAGE_BANDS)
    for k, n in desc.period_histogram:
        share = k / desc.periods
        counts[next(i for i, (low, _) in enumerate(COVERAGE_BANDS) if share >= low)] += n
    return [(label, n) for (_, label), n in zip(COVERAGE_BANDS, counts)]


def _coverage_table(desc: PanelDescription) -> Table:
    table = Table.grid(padding=(0, 2))
    for justify in ("left", "right", "left", "right"):
        table.add_column(justify=justify)  # type: ignore[arg-type]
    for label, n in coverage(desc):
        share = n / desc.units
        table.add_row(label, f"{n:,}", "\u2588" * round(BAR_WIDTH * share) or ("\u258f" if n else ""),
                      f"{100 * share:.0f}%")
    return table


def _heading(title: str) -> Text:
    return Text(f"\n{title}", style="bold")


def _pairs(items: list[tuple[str, str]]) -> Table:
    grid = Table.grid(padding=(0, 2))
    grid.add_column(style="dim")
    grid.add_column()
    for label, value in items:
        grid.add_row(label, value)
    return grid


def describe_renderable(desc: PanelDescription) -> Group:
    """The description laid out for the terminal: shape, coverage of the periods by the units,
    missing values, time-invariant columns, the effect graph and the warnings."""
    gaps = "not defined for this time type" if desc.units_with_gaps is None else f"{desc.units_with_gaps:,} units"
    parts: list[Any] = [
        Text(f"panel {desc.source}  (units: {desc.id}, periods: {desc.time})", style="bold magenta"),
        _heading("shape"),
        _pairs([
            ("rows", f"{desc.rows:,}"),
            ("units", f"{desc.units:,}"),
            ("periods", f"{desc.periods:,}, from {desc.first_period} to {desc.last_period}"),
            ("balanced", "yes" if desc.balanced else "no"),
            ("with gaps", gaps),
            ("duplicated keys", f"{desc.duplicate_keys:,} (in {desc.duplicate_rows:,} rows)"),
        ]),
        _heading(f"coverage: units by the share of the {desc.periods:,} periods they are seen in"),
        _coverage_table(desc),
        Text(
            f"half the units are seen in {desc.periods_median:g} periods or more; the sparsest in "
            f"{desc.periods_min}, the fullest in {desc.periods_max}",
            style="dim",
        ),
    ]

    parts.append(_heading("missing values"))
    missing = [name for name in desc.columns if desc.nulls[name] or desc.not_finite.get(name)]
    if missing:
        table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, header_style="bold")
        table.add_column("column")
        table.add_column("type")
        table.add_column("NULL", justify="right")
        table.add_column("NaN or inf", justify="right")
        for name in missing:
            bad = desc.not_finite.get(name)
            table.add_row(name, desc.columns[name], f"{desc.nulls[name]:,}", "" if bad is None else f"{bad:,}")
        parts.append(table)
    parts.append(Text(f"{len(desc.columns) - len(missing)} of {len(desc.columns)} columns complete"))

    parts.append(_heading("time-invariant within units"))
    checked = len(desc.time_invariant) + len(desc.time_varying)
    parts.append(Text(
        ", ".join(desc.time_invariant) + " (absorbed by unit effects)"
        if desc.time_invariant
        else f"none (numeric columns checked: {checked})"
    ))

    if desc.effects is not None:
        g = desc.effects
        a, b = g.columns
        parts.append(_heading(f"effect graph {a} x {b}"))
        parts.append(_pairs([
            ("levels", f"{g.levels[0]:,} {a}, {g.levels[1]:,} {b}"),
            ("linked pairs", f"{g.pairs:,}"),
            ("connected components", f"{g.components:,}"),
        ]))

    parts.append(_heading("warnings"))
    parts.extend(Text(w, style="bold red") for w in desc.warnings)
    if not desc.warnings:
        parts.append(Text("none"))
    return Group(*parts)


def plot_periods(desc: PanelDescription, path: str | Path) -> None:
    """Coverage curve: the share of units seen in at least k distinct periods, for every k.

    A balanced panel is a flat line at 100%; the drop shows where units start to thin out.
    """
    plt = pyplot()
    periods = np.array([k for k, _ in desc.period_histogram])
    units = np.array([n for _, n in desc.period_histogram])
    ks = np.arange(1, desc.periods + 1)
    at_least = np.array([units[periods >= k].sum() for k in ks]) / desc.units * 100
    fig, ax = plt.subplots(figsize=(7, 4), layout="constrained")
    ax.step(ks, at_least, where="mid", color="#3b7d8c")
    ax.fill_between(ks, at_least, step="mid", color="#3b7d8c", alpha=0.15)
    ax.set_ylim(0, 105)
    ax.xaxis.get_major_locator().set_params(integer=True)
    ax.set_xlabel(f"seen in at least this many of the {desc.periods:,} periods ({desc.time})")
    ax.set_ylabel(f"share of the {desc.units:,} units ({desc.id}), %")
    ax.set_title("coverage of the panel by its units")
    save_figure(fig, path)
