"""Shared helpers: write panels to Parquet and build LSDV references with statsmodels."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import statsmodels.api as sm
from scipy import linalg


def write_parquet(df: pd.DataFrame, path: Path) -> str:
    pq.write_table(pa.Table.from_pandas(df, preserve_index=False), path)
    return str(path)


@pytest.fixture
def to_parquet(tmp_path):
    counter = iter(range(10_000))

    def _write(df: pd.DataFrame) -> str:
        return write_parquet(df, tmp_path / f"panel_{next(counter)}.parquet")

    return _write


def drop_singletons(df: pd.DataFrame, fe: list[str]) -> pd.DataFrame:
    """Iteratively drop rows alone in a level of any effect (the sample bigpanel fits)."""
    while True:
        keep = np.ones(len(df), dtype=bool)
        for col in fe:
            keep &= df.groupby(col)[col].transform("size").to_numpy() > 1
        if keep.all():
            return df
        df = df[keep]


def dummy_block(df: pd.DataFrame, fe: list[str]) -> np.ndarray:
    """Intercept plus full-rank dummies for every effect (redundant columns removed by pivoted QR)."""
    cols = [np.ones((len(df), 1))]
    for col in fe:
        cols.append(pd.get_dummies(df[col].astype(str), drop_first=True).to_numpy(dtype=float))
    block = np.hstack(cols)
    _, r, piv = linalg.qr(block, mode="economic", pivoting=True)
    rank = int((np.abs(np.diag(r)) > 1e-9 * abs(r[0, 0])).sum())
    return block[:, np.sort(piv[:rank])]


def lsdv(df: pd.DataFrame, y: str, x: list[str], fe: list[str], cov_type: str = "nonrobust", groups=None):
    """statsmodels OLS of y on x and the effect dummies (the LSDV reference)."""
    design = np.hstack([df[x].to_numpy(dtype=float), dummy_block(df, fe)])
    model = sm.OLS(df[y].to_numpy(dtype=float), design)
    if cov_type == "cluster":
        codes = pd.factorize(groups)[0]
        return model.fit(cov_type="cluster", cov_kwds={"groups": codes})
    return model.fit(cov_type=cov_type)


def rel(a, b) -> float:
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.max(np.abs(a - b) / np.maximum(np.abs(b), 1e-300)))


FILE_LAYOUTS = ["units reversed", "two units split", "period by period"]


def in_file_layout(df: pd.DataFrame, layout: str) -> pd.DataFrame:
    """A unit x period panel's rows in one of ``FILE_LAYOUTS``: units in runs out of code order,
    units 3 and 17 in two runs each (their periods from 5 moved to the end), or no runs of a
    unit at all (period by period)."""
    if layout == "units reversed":
        df = df.sort_values(["unit", "period"], ascending=[False, True])
    elif layout == "two units split":
        late = df["unit"].isin([3, 17]) & (df["period"] >= 5)
        df = pd.concat([df[~late], df[late]])
    else:
        df = df.sort_values(["period", "unit"])
    return df.reset_index(drop=True)


def make_panel(seed: int, n_units: int = 60, n_periods: int = 12, k: int = 3, keep: float = 0.8) -> pd.DataFrame:
    """An unbalanced generated panel with unit and period effects correlated with x."""
    rng = np.random.default_rng(seed)
    unit = np.repeat(np.arange(n_units), n_periods)
    period = np.tile(np.arange(n_periods), n_units)
    a = rng.normal(0, 2, n_units)[unit]
    g = rng.normal(0, 1, n_periods)[period]
    X = rng.normal(size=(len(unit), k)) + 0.5 * a[:, None] + 0.3 * g[:, None]
    beta = np.arange(1, k + 1) * 0.5
    e = rng.normal(size=len(unit)) * (1 + 0.5 * np.abs(X[:, 0]))
    y = X @ beta + a + g + e
    df = pd.DataFrame({"unit": unit, "period": period, "y": y})
    for j in range(k):
        df[f"x{j + 1}"] = X[:, j]
    df["region"] = df["unit"] % 7
    df["sector"] = rng.integers(0, 9, len(df))
    return df[rng.random(len(df)) < keep].reset_index(drop=True)


@pytest.fixture(scope="session")
def grunfeld(tmp_path_factory):
    """Grunfeld's investment data as statsmodels ships it (11 firms), restricted to the
    textbook sample of 10 firms (without American Steel), and its Parquet path."""
    from statsmodels.datasets import grunfeld

    df = grunfeld.load_pandas().data
    df = df[df["firm"] != "American Steel"].reset_index(drop=True)
    df["year"] = df["year"].astype(int)
    path = tmp_path_factory.mktemp("grunfeld") / "grunfeld.parquet"
    df.to_parquet(path)
    return df, str(path)


@pytest.fixture(scope="session", autouse=True)
def saved_fits_follow_the_schema(tmp_path_factory):
    """After the session, every saved fit the tests wrote under pytest's temporary folders (``--save``,
    ``to_json()``) validates against the package's schema, bigpanel/results/fit.schema.json. A test that
    writes a deliberately broken fit gives the file another suffix than .json."""
    yield
    import json

    import jsonschema

    from bigpanel.results.saved import schema

    validator = jsonschema.Draft202012Validator(schema())
    bad = []
    for path in Path(tmp_path_factory.getbasetemp()).rglob("*.json"):
        try:
            doc = json.loads(path.read_text())
        except (OSError, ValueError):
            continue
        if isinstance(doc, dict) and "coefficients" in doc and "bigpanel_version" in doc:
            bad += [f"{path}: {e.message} at {list(e.absolute_path)}" for e in validator.iter_errors(doc)][:1]
    assert not bad, "saved fits that do not follow fit.schema.json:\n" + "\n".join(bad)
