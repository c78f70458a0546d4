"""The event study by imputation (issue 18) against a direct numpy implementation of the
published estimator and its variance (tests/event_reference.py: explicit dummies, least
squares, the implied weights -Z0 (Z0'Z0)^+ Z1'w and the sum over clusters of Borusyak, Jaravel
and Spiess 2024's Theorem 3 construction), and against the plain two-way regression on
simulated panels. All panels are invented data whose effects we set.
"""

from __future__ import annotations

import datetime as dt
import json

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

import bigpanel
from bigpanel import BigPanelError
from bigpanel.cli import app
from conftest import rel
from event_reference import reference

TIGHT = 1e-12  # stopping rule of the projections in the comparisons, so that 1e-8 is the claim checked
COHORTS = [2003, 2005, 2007, 2009]


def staggered(seed: int = 1, units: int = 60, periods: int = 12, drop: float = 0.1, effect=None,
              never: float = 0.2, always: int = 3) -> pd.DataFrame:
    """Invented store x year sales with a staggered remodel: cohorts adopt in COHORTS, a share
    ``never`` never does, ``always`` stores are treated from before the panel starts; about
    ``drop`` of the cells are missing. y = 0.5 x + store + year effects + effect(k) + noise."""
    rng = np.random.default_rng(seed)
    unit = np.repeat(np.arange(units), periods)
    year = np.tile(np.arange(periods), units) + 2000
    keep = rng.random(len(unit)) > drop
    unit, year = unit[keep], year[keep]
    cohort = rng.choice(COHORTS, size=units).astype(float)
    cohort[rng.random(units) < never] = np.nan
    cohort[:always] = 1999
    first = cohort[unit]
    k = year - first
    x = rng.normal(size=len(unit)) + 0.1 * (year - 2000)
    tau = np.where(k >= 0, (effect or (lambda kk, e: 1.0 + 0.3 * (kk + 1)))(k, first), 0.0)
    noise = rng.normal(size=len(unit))
    y = 0.5 * x + rng.normal(size=units)[unit] + rng.normal(size=periods)[year - 2000] + tau + noise
    return pd.DataFrame({"store": unit.astype(np.int32), "year": year.astype(np.int32),
                         "adopt": pd.array(np.where(np.isnan(first), pd.NA, first), dtype="Int32"),
                         "x": x, "y": y, "w": rng.uniform(0.5, 2.0, len(unit)), "region": (unit % 9).astype(np.int32),
                         "shelf": rng.integers(0, 4, len(unit)).astype(np.int32), "tau": tau})


def _post(res) -> tuple[np.ndarray, np.ndarray]:
    post = [e for e in res.event_time if e.estimated_by == "imputation"] + [res.overall]
    return np.array([e.estimate for e in post]), np.array([e.std_error for e in post])


def _check_against(res, ref: dict, claim: float = 1e-8) -> None:
    est, se = _post(res)
    assert [e.k for e in res.event_time if e.estimated_by == "imputation"] == ref["k"]
    assert rel(est, ref["estimate"]) < claim
    assert rel(se, ref["se"]) < claim
    assert rel(res.covariance, ref["vcov"]) < claim
    assert [e.rows for e in res.event_time if e.estimated_by == "imputation"] == ref["rows_by_k"]
    assert res.overall.rows == res.rows["imputed"] == ref["imputed"]
    pt = ref["pretrend"]
    leads = [e for e in res.event_time if e.estimated_by == "pre-trend fit"]
    assert [e.k for e in leads] == pt["leads"] and [e.rows for e in leads] == pt["rows"]
    assert rel(np.array([e.estimate for e in leads]), pt["estimate"]) < claim
    assert rel(np.array([e.std_error for e in leads]), pt["se"]) < claim
    assert abs(res.pretrend["statistic"] - pt["statistic"]) < claim * pt["statistic"]
    assert res.pretrend["df"] == len(pt["leads"])


@pytest.mark.parametrize("strategy", ["pair tables", "row codes", "in-engine sweeps"])
def test_imputation_and_variance_match_numpy(strategy, to_parquet):
    # Unbalanced staggered panel with a control, never-treated stores and three stores treated
    # in every observed year (their treated rows cannot be imputed: counted, not used).
    df = staggered()
    ref = reference(df, "y", "store", "year", "adopt", x=["x"], lo=-3, hi=5)
    res = bigpanel.event(to_parquet(df), y="y", unit="store", time="year", first_treated="adopt", x="x",
                         horizon="-3:5", tol=TIGHT, strategy=strategy)
    _check_against(res, ref)
    assert res.untreated_fit["strategy"] == strategy and res.solver["implied_weights"]["converged"]
    always = int(((df.year >= df.adopt) & (df.store < 3)).sum())
    assert res.rows["excluded"] == {"store has no untreated row": always}
    assert res.rows["treated"] == int((df.year >= df.adopt).sum())


def test_dates_weights_further_effect_cluster_and_filter(to_parquet):
    # Date periods at irregular intervals (event time = difference of ranks), first-treated dates
    # that fall between periods, target weights with a missing and a zero one on treated rows,
    # a further effect, clustering by region and a row filter.
    df = staggered(seed=3, units=80, periods=14, never=0.25)
    rng = np.random.default_rng(5)
    days = np.sort(rng.choice(np.arange(0, 3000), 14, replace=False))
    when = {2000 + i: dt.date(2010, 1, 1) + dt.timedelta(days=int(d)) for i, d in enumerate(days)}
    df["when"] = pd.to_datetime(df.year.map(when))
    df["start"] = pd.to_datetime(df.adopt.map(lambda a: None if pd.isna(a) else when.get(a, dt.date(2009, 1, 1))
                                              - dt.timedelta(days=3)))
    treated_rows = np.flatnonzero((df.year >= df.adopt).fillna(False).to_numpy() & (df.store >= 3).to_numpy())
    df.loc[treated_rows[:2], "w"] = np.nan
    df.loc[treated_rows[2:5], "w"] = 0.0
    path = to_parquet(df.assign(when=df.when.dt.date, start=df.start.dt.date))
    kept = df[df.x > -2.5]
    ref = reference(kept, "y", "store", "when", "start", x=["x"], fe=["shelf"], weights="w", cluster="region",
                    lo=-4, hi=6, dates=True)
    res = bigpanel.event(path, y="y", unit="store", time="when", first_treated="start", x="x", fe="shelf",
                         weights="w", cluster="region", horizon="-4:6", where="x > -2.5", tol=TIGHT)
    _check_against(res, ref)
    assert res.rows["excluded"]["w missing"] == 2 and res.rows["excluded"]["w zero or negative"] == 3
    assert res.variance["clusters"] == 9 and any("only 9 clusters" in w for w in res.warnings)
    assert res.design["event_time_unit"] == "difference of period ranks"
    assert res.rows["after_filter"] == len(kept) and res.rows["source"] == len(df)


def test_every_exclusion_reason_counted(to_parquet):
    # No store is never treated in 2000-2009, so 2009 has no untreated comparison; stores 0-2
    # are treated in every year they are seen. Stores 40-42 are seen only in 2010-2011, untreated
    # there but for store 42's 2011 (imputable inside that part); store 43 is untreated in
    # 2000-2002 and treated from 2010: its store and those years are not linked by untreated rows.
    df = staggered(seed=7, units=40, periods=10, drop=0.0, never=0.0)
    extra = [(s, y, None) for s in (40, 41) for y in (2010, 2011)] + [(42, 2010, 2011), (42, 2011, 2011)]
    extra += [(43, y, 2010) for y in (2000, 2001, 2002, 2010, 2011)]
    rng = np.random.default_rng(0)
    more = pd.DataFrame(extra, columns=["store", "year", "adopt"])
    more["x"], more["y"], more["w"] = rng.normal(size=len(more)), rng.normal(size=len(more)), 1.0
    more["region"], more["shelf"], more["tau"] = 0, 0, 0.0
    df = pd.concat([df, more], ignore_index=True).astype({"store": np.int32, "year": np.int32, "adopt": "Int32"})
    ref = reference(df, "y", "store", "year", "adopt", x=["x"], lo=-2, hi=4)
    res = bigpanel.event(to_parquet(df), y="y", unit="store", time="year", first_treated="adopt", x="x",
                         horizon="-2:4", tol=TIGHT)
    _check_against(res, ref)
    is_treated = (df.year >= df.adopt).fillna(False).to_numpy()
    treated, untreated = df[is_treated], df[~is_treated]
    no_unit = ~treated.store.isin(untreated.store)
    no_year = treated.store.isin(untreated.store) & ~treated.year.isin(untreated.year)
    assert res.rows["excluded"] == {"store has no untreated row": int(no_unit.sum()),
                                    "year has no untreated row (no comparison in that period)": int(no_year.sum()),
                                    "store and year not linked by untreated rows": 2}
    assert sum(res.rows["excluded"].values()) == res.rows["treated"] - res.rows["imputed"]
    assert res.rows["imputed"] == ref["imputed"] and res.rows["treated"] == len(treated)


def _two_way(df: pd.DataFrame) -> float:
    """The static two-way regression y on a treated dummy, x and store and year dummies (numpy lstsq)."""
    treated = (df.year >= df.adopt).fillna(False).to_numpy(float)
    design = np.column_stack([treated, df.x, pd.get_dummies(df.store).to_numpy(float),
                              pd.get_dummies(df.year).to_numpy(float)[:, 1:]])
    return float(np.linalg.lstsq(design, df.y.to_numpy(), rcond=None)[0][0])


def test_homogeneous_effect_agrees_with_two_way_regression(to_parquet):
    # Invented data with one constant effect (2.0): both estimators are unbiased, so they agree
    # within sampling error (a few standard errors; BJS 2024 and common practice).
    df = staggered(seed=11, units=400, periods=14, always=0, effect=lambda k, e: 2.0 + 0 * k)
    res = bigpanel.event(to_parquet(df), y="y", unit="store", time="year", first_treated="adopt", x="x",
                         horizon="0:6")
    twfe, est, se = _two_way(df), res.overall.estimate, res.overall.std_error
    assert abs(est - 2.0) < 4 * se
    assert abs(est - twfe) < 3 * se


def test_heterogeneous_effects_bias_the_two_way_regression_downward(to_parquet):
    # Invented data where the effect grows with the years since adoption (0.5 per year): the
    # static two-way regression compares later adopters with earlier ones already treated and
    # puts negative weight on long-run effects, so it falls below the true average effect
    # (Goodman-Bacon 2021; de Chaisemartin and D'Haultfoeuille 2020; Borusyak, Jaravel and
    # Spiess 2024), while imputation recovers it.
    df = staggered(seed=13, units=400, periods=14, always=0, never=0.0,
                   effect=lambda k, e: 0.5 * (k + 1))
    res = bigpanel.event(to_parquet(df), y="y", unit="store", time="year", first_treated="adopt", x="x",
                         horizon="0:8")
    is_treated = (df.year >= df.adopt).fillna(False).to_numpy()
    compared = df.year.isin(df.year[~is_treated]).to_numpy()  # years with an untreated row
    truth = float(df.tau[is_treated & compared].mean())
    est, se, twfe = res.overall.estimate, res.overall.std_error, _two_way(df)
    assert abs(est - truth) < 4 * se
    assert twfe < truth - 10 * se
    for e in res.event_time:  # each event time's effect is 0.5 (k + 1)
        assert abs(e.estimate - 0.5 * (e.k + 1)) < 4.5 * e.std_error


def test_bad_inputs_are_one_line(to_parquet):
    df = staggered(seed=2, units=30, periods=8)
    path = to_parquet(df)
    common = dict(y="y", unit="store", time="year", first_treated="adopt")
    bad = df.copy()
    bad.loc[bad.index[bad.store == 5][0], "adopt"] = 2001  # one row of store 5 disagrees
    with pytest.raises(BigPanelError, match="'adopt' is not one value per unit.*store 5"):
        bigpanel.event(to_parquet(bad), **common)
    with pytest.raises(BigPanelError, match="--horizon 1:3: LO must be 0 or less"):
        bigpanel.event(path, **common, horizon="1:3")
    with pytest.raises(BigPanelError, match="--horizon 'a:b' is not LO:HI"):
        bigpanel.event(path, **common, horizon="a:b")
    with pytest.raises(BigPanelError, match="first-treated column 'when' has type DATE"):
        bigpanel.event(to_parquet(df.assign(when=dt.date(2020, 1, 1))), **{**common, "first_treated": "when"})
    with pytest.raises(BigPanelError, match="no row is treated"):
        bigpanel.event(to_parquet(df.assign(adopt=pd.array([pd.NA] * len(df), dtype="Int32"))), **common)
    with pytest.raises(BigPanelError, match="first-treated column 'adopz' not found.*did you mean 'adopt'"):
        bigpanel.event(path, **{**common, "first_treated": "adopz"})
    with pytest.raises(BigPanelError, match="clusters on one column"):
        bigpanel.event(path, **common, cluster=["region", "shelf"])
    out = CliRunner().invoke(app, ["event", path, "--y", "y", "--unit", "store", "--time", "year",
                                   "--first-treated", "adopt", "--horizon", "2"])
    assert out.exit_code == 2 and "--horizon '2' is not LO:HI" in out.output and "Traceback" not in out.output


def test_command_writes_json_and_plot(to_parquet, tmp_path):
    df = staggered(seed=4, units=50, periods=10)
    path = to_parquet(df)
    save, plot = tmp_path / "event.json", tmp_path / "event.png"
    out = CliRunner().invoke(app, ["event", path, "--y", "y", "--unit", "store", "--time", "year",
                                   "--first-treated", "adopt", "--x", "x", "--horizon", "-2:3", "--save", str(save),
                                   "--plot", str(plot)])
    assert out.exit_code == 0, out.output
    assert "event study by imputation" in out.output and "pre-trend" in out.output
    doc = json.loads(save.read_text())
    assert [e["k"] for e in doc["event_time"]] == [-2, -1, 0, 1, 2, 3]
    assert set(doc["event_time"][0]) >= {"k", "estimate", "std_error", "n"}
    assert set(doc["overall"]) >= {"estimate", "std_error"} and set(doc["pretrend"]) >= {"statistic", "df", "p_value"}
    assert doc["rows"]["excluded"] and doc["covariance"]["labels"][-1] == "overall"
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    res = bigpanel.event(path, y="y", unit="store", time="year", first_treated="adopt", x="x", horizon="-2:3")
    assert abs(doc["overall"]["estimate"] - res.overall.estimate) < 1e-12 * abs(res.overall.estimate)
    assert "imputation" in res.summary()


def test_benchmark_adoption_panel(tmp_path):
    # The invented benchmark panel (bigpanel/shapes.py): 30% of the stores never adopt, the
    # others from a week in 20..140, one value per store; imputation recovers the invented
    # effect 0.05 + 0.002 k within sampling error.
    from bigpanel.shapes import write_shape

    path = str(tmp_path / "adoption.parquet")
    write_shape(path, "store-week-adoption", 150 * 400)
    df = pd.read_parquet(path)
    per_store = df.groupby("store").first_week.agg(["min", "max", "count", "size"])
    one_value = (per_store["min"] == per_store["max"]) & (per_store["count"] == per_store["size"])
    assert ((per_store["count"] == 0) | one_value).all()
    assert 0.2 < (per_store["count"] == 0).mean() < 0.4
    assert df.first_week.min() >= 20 and df.first_week.max() <= 140
    res = bigpanel.event(path, y="log_sales", unit="store", time="week", first_treated="first_week",
                         x=["log_price", "promo_share", "staff_hours"], horizon="-2:10")
    post = [e for e in res.event_time if e.estimated_by == "imputation"]
    assert [e.k for e in post] == list(range(11))
    for e in post:
        assert abs(e.estimate - (0.05 + 0.002 * e.k)) < 4.5 * e.std_error


def test_event_help_loads_nothing_heavy():
    # as tests/test_cli.py checks for the other commands: `bigpanel event --help` answers at once
    import subprocess
    import sys

    from test_cli import HEAVY, PROBE

    out = subprocess.run([sys.executable, "-c", PROBE.format(args=["event", "--help"], heavy=HEAVY)],
                         capture_output=True, text=True, check=True).stdout.strip().splitlines()[-1]
    assert out == "0 []"
