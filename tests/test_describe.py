"""The panel description against direct pandas computations on the same frames."""

import datetime as dt
import json
import sys

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from rich.console import Console

from bigpanel import BigPanelError
from bigpanel.describe import coverage, describe_panel, describe_renderable, plot_periods


def write(df: pd.DataFrame, tmp_path, name: str = "panel.parquet") -> str:
    path = tmp_path / name
    df.to_parquet(path, index=False)
    return str(path)


def grid(units: int, periods: list[int], seed: int) -> pd.DataFrame:
    """Every unit in every period, rows shuffled, with one time-varying column."""
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"unit": np.repeat(np.arange(units), len(periods)), "year": np.tile(periods, units)})
    df["x"] = rng.normal(size=len(df))
    return df.sample(frac=1.0, random_state=seed).reset_index(drop=True)


def pandas_gaps(df: pd.DataFrame, id: str, time: str) -> int:
    """Units missing some period that the panel holds between their first and last period."""
    rank = df[time].rank(method="dense")
    by = pd.DataFrame({"u": df[id], "r": rank, "t": df[time]}).groupby("u")
    return int(((by["r"].max() - by["r"].min() + 1) > by["t"].nunique()).sum())


def test_balanced_panel(tmp_path):
    df = grid(20, [2001, 2002, 2003, 2004, 2005, 2006], seed=1)
    d = describe_panel(write(df, tmp_path), "unit", "year")
    # reference: pandas groupby on the same frame
    per_unit = df.groupby("unit")["year"].nunique()
    assert d.rows == len(df)
    assert d.units == df["unit"].nunique() == 20
    assert d.periods == df["year"].nunique() == 6
    assert (d.first_period, d.last_period) == ("2001", "2006")
    assert d.balanced is True
    assert d.units_with_gaps == 0
    assert d.duplicate_keys == d.duplicate_rows == 0
    assert d.period_histogram == [[6, 20]]
    assert d.periods_min == d.periods_max == per_unit.min() == 6
    assert d.warnings == []
    assert d.raw_passes == 2
    assert d.time_varying == ["x"] and d.time_invariant == []


def test_unbalanced_panel_with_gaps(tmp_path):
    # 2003 is absent from the whole panel: skipping it is not a gap.
    full = grid(40, [2000, 2001, 2002, 2004, 2005, 2006, 2007], seed=2)
    df = full.sample(frac=0.7, random_state=3).reset_index(drop=True)
    d = describe_panel(write(df, tmp_path), "unit", "year")
    # reference: pandas groupby on the same frame
    per_unit = df.groupby("unit")["year"].nunique()
    expected_gaps = pandas_gaps(df, "unit", "year")
    assert 0 < expected_gaps < d.units
    assert d.units_with_gaps == expected_gaps
    assert d.balanced is False
    assert d.units == df["unit"].nunique()
    assert d.periods == df["year"].nunique()
    assert d.periods_min == per_unit.min() and d.periods_max == per_unit.max()
    quartiles = per_unit.quantile([0.25, 0.5, 0.75]).to_numpy()
    np.testing.assert_allclose([d.periods_q25, d.periods_median, d.periods_q75], quartiles, rtol=0, atol=1e-12)
    counts = per_unit.value_counts().sort_index()
    assert d.period_histogram == [[int(k), int(n)] for k, n in counts.items()]
    assert d.units_single_period == int((per_unit == 1).sum())


def test_duplicated_keys_are_counted_and_flagged(tmp_path):
    df = grid(10, [1, 2, 3, 4], seed=4)
    df = pd.concat([df, df.iloc[[0, 0, 5, 9]]], ignore_index=True)
    d = describe_panel(write(df, tmp_path), "unit", "year")
    # reference: pandas groupby on the same frame
    size = df.groupby(["unit", "year"]).size()
    assert d.duplicate_keys == int((size > 1).sum()) == 3
    assert d.duplicate_rows == int(size[size > 1].sum()) == 7
    assert d.rows == len(df)
    assert d.balanced is False
    assert d.units_with_gaps == 0
    assert any(w.startswith("DUPLICATED KEYS: 3 ") and "7 rows" in w for w in d.warnings)


def test_time_invariant_columns(tmp_path):
    df = grid(15, [1, 2, 3, 4, 5], seed=5)
    df["size"] = df["unit"] * 10.0
    df.loc[df.index[:3], "size"] = np.nan  # NULLs do not count as variation
    df["region"] = (df["unit"] % 4).astype("int32")
    df["flag"] = df["unit"] % 2 == 0
    df["step"] = df["year"] + df["unit"]
    df["label"] = "u" + df["unit"].astype(str)  # not numeric: not checked
    d = describe_panel(write(df, tmp_path), "unit", "year")
    # reference: pandas groupby on the same frame (nunique ignores missing values)
    numeric = ["x", "size", "region", "flag", "step"]
    constant = [c for c in numeric if df.groupby("unit")[c].nunique().max() == 1]
    assert d.time_invariant == constant == ["size", "region", "flag"]
    assert d.time_varying == ["x", "step"]


def test_null_nan_and_inf_counts(tmp_path):
    n = 30
    values = np.linspace(0.0, 1.0, n)
    values[[1, 2]] = np.nan
    values[3] = np.inf
    values[4] = -np.inf
    null = np.zeros(n, dtype=bool)
    null[[5, 6, 7]] = True
    unit = np.arange(n) // 3
    unit_null = np.zeros(n, dtype=bool)
    unit_null[[8]] = True
    names = np.array([None if i % 7 == 0 else f"n{i}" for i in range(n)], dtype=object)
    table = pa.table({
        "unit": pa.array(unit, mask=unit_null),
        "t": pa.array(np.arange(n) % 3),
        "v": pa.array(values, mask=null),
        "name": pa.array(names),
    })
    path = tmp_path / "nan.parquet"
    pq.write_table(table, path)
    d = describe_panel(str(path), "unit", "t")
    # reference: pandas on the masks and values the table was built from
    frame = pd.DataFrame({"v": values, "null": null, "name": names})
    assert d.nulls == {"unit": 1, "t": 0, "v": int(frame["null"].sum()), "name": int(frame["name"].isna().sum())}
    assert d.not_finite == {"v": int((~np.isfinite(frame["v"]) & ~frame["null"]).sum())}
    assert d.not_finite["v"] == 4 and d.nulls["v"] == 3
    assert d.rows_missing_key == 1
    assert d.units == pd.Series(unit[~unit_null]).nunique()
    assert d.balanced is False
    assert "rows without unit or t: 1; they are left out of the unit figures" in d.warnings


def test_components_of_two_blocks(tmp_path):
    rng = np.random.default_rng(6)
    workers = np.repeat(np.arange(20), 5)
    firm_pool = np.where(workers < 10, 0, 3)  # workers 0-9 move among firms 0-2, 10-19 among 3-5
    df = pd.DataFrame({
        "worker": workers,
        "year": np.tile(np.arange(5), 20),
        "firm": ["f" + str(v) for v in firm_pool + rng.integers(0, 3, len(workers))],
    })
    d = describe_panel(write(df, tmp_path), "worker", "year", effects=("worker", "firm"))
    # reference: pandas on the same frame; two blocks by construction
    assert d.effects.components == 2
    assert d.effects.levels == [df["worker"].nunique(), df["firm"].nunique()]
    assert d.effects.pairs == len(df[["worker", "firm"]].drop_duplicates())
    assert d.raw_passes == 3
    linked = df.assign(firm=np.where(df.index == 0, "f4", df["firm"]))  # worker 0 now also at a firm of block 2
    d2 = describe_panel(write(linked, tmp_path, "linked.parquet"), "worker", "year", effects=("worker", "firm"))
    assert d2.effects.components == 1


def test_date_time_and_string_id(tmp_path):
    days = [dt.date(2024, 1, 1) + dt.timedelta(days=7 * k) for k in range(6)]
    df = pd.DataFrame({
        "store": np.repeat([f"S{i:02d}" for i in range(12)], 6),
        "week": days * 12,
    })
    df["sales"] = np.arange(len(df), dtype=float)
    df = df.drop(index=[2, 9, 10, 30]).reset_index(drop=True)
    path = tmp_path / "dates.parquet"
    pq.write_table(pa.Table.from_pandas(df, preserve_index=False), path)
    d = describe_panel(str(path), "store", "week")
    assert d.columns["store"] == "VARCHAR" and d.columns["week"] == "DATE"
    # reference: pandas groupby on the same frame
    assert d.units == df["store"].nunique()
    assert d.periods == df["week"].nunique()
    assert d.units_with_gaps == pandas_gaps(df, "store", "week") == 2
    assert (d.first_period, d.last_period) == ("2024-01-01", "2024-02-05")
    assert d.period_histogram == [[int(k), int(v)] for k, v in
                                  df.groupby("store")["week"].nunique().value_counts().sort_index().items()]


def test_string_time_has_no_gap_count(tmp_path):
    df = pd.DataFrame({"unit": [1, 1, 2, 2], "quarter": ["2020Q1", "2020Q3", "2020Q1", "2020Q2"]})
    d = describe_panel(write(df, tmp_path), "unit", "quarter")
    assert d.units_with_gaps is None
    assert d.periods == 3 and d.period_histogram == [[2, 2]]


def test_missing_columns_name_the_column(tmp_path):
    path = write(grid(3, [1, 2], seed=7), tmp_path)
    with pytest.raises(BigPanelError, match=r"id column 'unitt' not found .*did you mean 'unit'"):
        describe_panel(path, "unitt", "year")
    with pytest.raises(BigPanelError, match=r"time column 'yaer' not found .*did you mean 'year'"):
        describe_panel(path, "unit", "yaer")
    with pytest.raises(BigPanelError, match=r"effect column 'firm' not found"):
        describe_panel(path, "unit", "year", effects=("unit", "firm"))
    with pytest.raises(BigPanelError, match="both the id .* and the time"):
        describe_panel(path, "unit", "unit")


def test_dict_is_json_and_rendering_has_sections(tmp_path):
    df = grid(8, [1, 2, 3], seed=8)
    df = pd.concat([df, df.iloc[[0]]], ignore_index=True)
    d = describe_panel(write(df, tmp_path), "unit", "year", effects=("unit", "year"))
    doc = json.loads(json.dumps(d.to_dict()))
    assert doc["duplicate_keys"] == 1 and doc["effects"]["components"] == 1
    assert set(doc) >= {"rows", "units", "periods", "balanced", "period_histogram", "units_with_gaps",
                        "duplicate_keys", "duplicate_rows", "nulls", "not_finite", "time_invariant",
                        "effects", "warnings"}
    console = Console(width=120, record=True)
    console.print(describe_renderable(d))
    text = console.export_text()
    for heading in ("shape", "coverage: units by the share", "missing values", "time-invariant within units",
                    "warnings"):
        assert f"\n{heading}" in text
    assert "DUPLICATED KEYS" in text


def test_coverage_bands_match_pandas(tmp_path):
    rng = np.random.default_rng(9)
    df = grid(60, list(range(40)), seed=9)
    keep = np.linspace(0.05, 1.0, 60)[df["unit"]]  # units from about 2 to all 40 periods
    df = df[rng.random(len(df)) < keep]
    d = describe_panel(write(df, tmp_path), "unit", "year")
    # Reference: pandas, each unit's share of the panel's distinct periods, banded
    share = df.groupby("unit")["year"].nunique() / df["year"].nunique()
    expected = [int((share == 1).sum()), int(((share >= 0.75) & (share < 1)).sum()),
                int(((share >= 0.5) & (share < 0.75)).sum()), int(((share >= 0.25) & (share < 0.5)).sum()),
                int((share < 0.25).sum())]
    assert [n for _, n in coverage(d)] == expected
    console = Console(width=120, record=True)
    console.print(describe_renderable(d))
    text = console.export_text()
    assert "every period" in text and "under a quarter" in text and "q25" not in text


def test_composite_id(tmp_path):
    df = grid(6, [1, 2, 3], seed=12)
    df["store"], df["product"] = df["unit"] // 2, df["unit"] % 2
    path = write(df.drop(columns="unit"), tmp_path)
    d = describe_panel(path, "store:product", "year")
    # Reference: pandas groups of (store, product)
    assert d.units == df.groupby(["store", "product"]).ngroups and d.duplicate_keys == 0 and d.balanced
    assert describe_panel(path, "store", "year").duplicate_keys == df.groupby(["store", "year"]).ngroups
    # text parts that would run together ("a:b" + "c" and "a" + "b:c") stay two units
    odd = pd.DataFrame({"a": ["a:b", "a"], "b": ["c", "b:c"], "year": [1, 1]})
    assert describe_panel(write(odd, tmp_path, "odd.parquet"), "a:b", "year").units == 2


def test_float_time_column(tmp_path):
    df = grid(5, [2001, 2002, 2003, 2004], seed=13)
    df["year"] = df["year"].astype(float)
    df = df[~((df["unit"] == 0) & (df["year"] == 2002.0))].reset_index(drop=True)
    df.loc[df.index[-1], "year"] = np.inf
    path = tmp_path / "f.parquet"
    pq.write_table(pa.Table.from_pandas(df, preserve_index=False), path)
    d = describe_panel(str(path), "unit", "year")
    finite = df[np.isfinite(df["year"])]
    assert d.rows_missing_key == 1 and d.periods == finite["year"].nunique()
    assert d.units_with_gaps == pandas_gaps(finite, "unit", "year")  # reference: pandas dense ranks
    assert d.units_with_gaps >= 1


def test_plot_writes_png(tmp_path):
    d = describe_panel(write(grid(5, [1, 2, 3], seed=10), tmp_path), "unit", "year")
    out = tmp_path / "plots" / "periods.png"
    plot_periods(d, out)
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert [p.name for p in out.parent.iterdir()] == ["periods.png"]


def test_plot_without_matplotlib(tmp_path, monkeypatch):
    d = describe_panel(write(grid(5, [1, 2], seed=11), tmp_path), "unit", "year")
    for name in ("matplotlib", "matplotlib.figure", "matplotlib.backends.backend_agg", "matplotlib.ticker"):
        monkeypatch.setitem(sys.modules, name, None)
    with pytest.raises(BigPanelError, match=r"--plot needs matplotlib"):
        plot_periods(d, tmp_path / "p.png")
    assert not (tmp_path / "p.png").exists()
