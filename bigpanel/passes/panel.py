"""The passes of the panel estimators beside the within one (one column given with ``fe`` is the unit).

Each leaves the view ``bp_tilde`` that the moment passes (:mod:`bigpanel.passes.moments`)
read: e0 the transformed outcome, e1..eK the regressors, e(K+1) the constant's column, the
cluster columns and, when weighted, ``w``. The formulas are stated in the estimators'
modules (:mod:`bigpanel.estimators.between`, ``first_difference``, ``random_effects``).
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from ..engines.base import Engine
from ..errors import BigPanelError
from ..model.spec import Spec
from ..sql.text import join, render


def unit_table(eng: Engine, spec: Spec) -> pa.Table:
    """One grouped pass: per unit (in key order) the keys, row count n, total weight nw (n when
    unweighted), shifted means (weighted means sum(w v) / sum(w) when weighted) and cluster range."""
    keys = join(spec.key_aliases(0), ", ")
    if spec.weights:
        means = ["sum(w) AS nw"]
        means += [f"sum(w * ({v} - s.m{j})) / sum(w) AS b{j}" for j, v in enumerate(spec.value_aliases)]
    else:
        means = ["count(*) AS nw"] + [f"avg({v} - s.m{j}) AS b{j}" for j, v in enumerate(spec.value_aliases)]
    for c in spec.cluster_aliases:
        means += [f"min({c}) AS {c}_min", f"max({c}) AS {c}_max"]
    eng.execute("unit means", render("unit_means", keys=keys, means=join(means)), raw=True)
    return eng.arrow("fetch unit means", render("unit_table", keys=keys))


def columns(tab: pa.Table) -> dict[str, np.ndarray]:
    """An Arrow table's columns as numpy arrays."""
    return {name: tab.column(name).to_numpy(zero_copy_only=False) for name in tab.column_names}


def between_view(eng: Engine, cols: dict[str, np.ndarray]) -> None:
    """Upload the unit means (``e0..eK`` and the constant's column, clusters, weights) as ``bp_tilde``."""
    eng.put_table("bp_between", pa.table(cols))
    eng.execute("between view", render("between_view"))


def quasi_demeaned_view(eng: Engine, spec: Spec, extra: list[str], units: pa.Table | None = None) -> None:
    """Define ``bp_tilde``: each shifted value minus theta_i times its unit mean, then the
    columns ``extra`` (SQL over ``u``, the unit row of ``bp_theta``). ``units`` (keys, ``theta``,
    ``uid`` and the unit means ``b0..bK``) is uploaded as ``bp_theta``; without it the table is
    already there and the view is dropped first (PostgreSQL cannot replace a view with other
    columns)."""
    if units is not None:
        eng.put_table("bp_theta", units)
    else:
        eng.execute("drop the quasi-demeaned view", render("drop_tilde"))
    cols = [f"{v} - s.m{j} - u.theta * u.b{j} AS e{j}" for j, v in enumerate(spec.value_aliases)] + extra
    eng.execute("quasi-demeaned view", render("quasi_demeaned", columns=join(cols),
                                              keys=join(spec.key_aliases(0), ", ")))


def first_differences(eng: Engine, spec: Spec) -> dict[str, int]:
    """Within-unit differences over consecutive periods as ``bp_tilde`` (gaps and first rows
    counted, repeated unit-period keys refused); returns the counts."""
    m = len(spec.value_aliases)
    diffs = [f"{v} - lag({v}) OVER by_unit AS e{j}" for j, v in enumerate(spec.value_aliases)]
    diffs.append(f"1.0 AS e{m}")
    diffs += list(spec.cluster_aliases)
    if spec.weights:
        diffs.append("2.0 / (1.0 / w + 1.0 / lag(w) OVER by_unit) AS w")
    eng.execute("period ranks", render("fd_periods"), raw=True)
    eng.execute("first differences", render("first_differences", diffs=join(diffs),
                                            keys=join(spec.key_aliases(0), ", ")), raw=True)
    counts = eng.one("difference counts", render("fd_counts"))
    if counts["repeated"]:
        raise BigPanelError(
            f"{counts['repeated']:,} rows repeat a (unit, period) key: first differences need one row per unit and "
            "period"
        )
    eng.execute("differenced view", render("fd_view"))
    return {k: int(counts[k]) for k in ("usable", "gaps", "first_rows")}
