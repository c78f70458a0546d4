"""The formula language: operators, transforms, SQL terms and categorical controls.

Reference for the fits: statsmodels' formula OLS (patsy) with the unit effect as explicit
dummies, C(unit), and categorical controls as C(col) with the first level left out.
"""

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from typer.testing import CliRunner

import bigpanel
from bigpanel.cli import app
from bigpanel.errors import BigPanelError
from bigpanel.model.formula import parse_rhs, term_label
from conftest import rel


@pytest.fixture(scope="module")
def panel(tmp_path_factory):
    rng = np.random.default_rng(31)
    units, periods = 60, 8
    unit = np.repeat(np.arange(units), periods)
    a = rng.normal(size=units)[unit]
    df = pd.DataFrame({
        "unit": unit,
        "x1": np.exp(rng.normal(size=unit.size) + 0.3 * a),
        "x2": rng.normal(size=unit.size) + 0.5 * a,
        "z": rng.normal(size=unit.size),
        "region": rng.choice(["east", "north", "south", "west"], size=unit.size),
    })
    df["y"] = (0.5 * np.log(df.x1) - 0.7 * df.x2 + 0.2 * df.x2 * df.z + 0.3 * (df.region == "north")
               + 0.1 * df.x2 ** 2 + a + rng.normal(size=unit.size))
    df.loc[[3, 77], "x1"] = 0.0  # log(0) is not finite: these two rows are dropped and counted
    path = tmp_path_factory.mktemp("formula") / "panel.parquet"
    df.to_parquet(path)
    return df, str(path)


def _reference(df: pd.DataFrame, formula: str):
    """statsmodels formula OLS with unit dummies on the rows bigpanel keeps; classical errors."""
    return smf.ols(formula + " + C(unit)", data=df).fit()


@pytest.mark.parametrize(
    "ours, theirs, names",
    [
        # a*b is a + b + a:b; transforms evaluated in the engine
        ("y ~ log(x1) + x2*z", "y ~ np.log(x1) + x2*z",
         {"log(x1)": "np.log(x1)", "x2": "x2", "z": "z", "x2:z": "x2:z"}),
        # (a + b):c distributes; - removes a term; powers and sqrt
        ("y ~ (x2 + z)*log(x1) - z + x2^2 + sqrt(x1)", "y ~ x2 + np.log(x1) + x2:np.log(x1) + z:np.log(x1) + I(x2**2) + np.sqrt(x1)",
         {"x2": "x2", "log(x1)": "np.log(x1)", "x2:log(x1)": "x2:np.log(x1)", "z:log(x1)": "z:np.log(x1)",
          "x2^2": "I(x2 ** 2)", "sqrt(x1)": "np.sqrt(x1)"}),
        # an SQL expression of columns, and a categorical control with its first level left out
        ("y ~ x2 + {x1 / (1 + z * z)} + levels(region) + levels(region):x2",
         "y ~ x2 + I(x1 / (1 + z * z)) + C(region) + C(region):x2",
         {"x2": "x2", "{x1 / (1 + z * z)}": "I(x1 / (1 + z * z))",
          "region[north]": "C(region)[T.north]", "region[south]": "C(region)[T.south]",
          "region[west]": "C(region)[T.west]", "region[north]:x2": "C(region)[T.north]:x2",
          "region[south]:x2": "C(region)[T.south]:x2", "region[west]:x2": "C(region)[T.west]:x2"}),
    ],
)
def test_formula_terms_match_statsmodels_formula_ols(panel, ours, theirs, names):
    df, path = panel
    res = bigpanel.fit(path, ours, fe="unit")
    sample = df[df.x1 > 0] if "log(" in ours else df  # log(0) rows are dropped; the others kept
    ref = _reference(sample, theirs)
    assert set(res.names) == set(names)
    ours_b = [res.params[n] for n in names]
    ours_se = [res.std_error[res.names.index(n)] for n in names]
    # reference names may be spelled differently by patsy: look them up loosely
    lookup = {k.replace(" ", ""): k for k in ref.params.index}
    theirs_keys = [lookup[v.replace(" ", "")] for v in names.values()]
    assert rel(ours_b, ref.params[theirs_keys].to_numpy()) < 1e-8
    assert rel(ours_se, ref.bse[theirs_keys].to_numpy()) < 1e-8
    assert res.nobs == len(sample)


def test_dropped_rows_counted_under_the_term(panel):
    df, path = panel
    res = bigpanel.fit(path, "y ~ log(x1) + x2", fe="unit")
    assert res.rows.incomplete == {"log(x1)": 2}


def test_categorical_levels_reported(panel):
    _, path = panel
    res = bigpanel.fit(path, "y ~ x2 + levels(region)", fe="unit")
    doc = json.loads(res.to_json())
    assert doc["categorical"] == [{"term": "levels(region)", "levels": 4, "base": "east"}]
    assert "levels(region): 4 levels" in res.summary()


def test_missing_category_drops_the_row(panel, tmp_path):
    df, _ = panel
    d = df[df.x1 > 0].copy()
    d.loc[d.index[:3], "region"] = None
    path = tmp_path / "na.parquet"
    d.to_parquet(path)
    res = bigpanel.fit(str(path), "y ~ x2 + levels(region)", fe="unit")
    assert res.nobs == len(d) - 3 and res.rows.incomplete["region[north]"] == 3
    ref = _reference(d.dropna(subset=["region"]), "y ~ x2 + C(region)")  # statsmodels formula OLS, unit dummies
    assert abs(res.params["x2"] - ref.params["x2"]) < 1e-8 * abs(ref.params["x2"])


def test_outcome_transform_matches_statsmodels(panel, tmp_path):
    df, _ = panel
    d = df[df.x1 > 0].assign(pos=lambda t: np.exp(t.y))
    path = tmp_path / "pos.parquet"
    d.to_parquet(path)
    res = bigpanel.fit(str(path), "log(pos) ~ x2 + z", fe="unit")
    ref = _reference(d, "np.log(pos) ~ x2 + z")  # statsmodels formula OLS, unit dummies
    assert rel([res.params["x2"], res.params["z"]], ref.params[["x2", "z"]].to_numpy()) < 1e-8


@pytest.mark.parametrize(
    "rhs, terms",
    [
        # Wilkinson and Rogers (1973) operator rules, from memory of the paper
        ("a + b + a", ["a", "b"]),
        ("a*b", ["a", "b", "a:b"]),
        ("(a + b):c", ["a:c", "b:c"]),
        ("(a + b)*c", ["a", "b", "c", "a:c", "b:c"]),
        ("a*b*c - a:b:c", ["a", "b", "a:b", "c", "a:c", "b:c"]),
        ("a*b - a", ["b", "a:b"]),
        ("a:b + b:a", ["a:b"]),
    ],
)
def test_operator_algebra(rhs, terms):
    assert sorted(map(term_label, parse_rhs(rhs))) == sorted(terms)


@pytest.mark.parametrize(
    "formula, needle",
    [
        ("y ~ poly(x2, 2)", "function poly() is not a formula term; supported:"),
        ("y ~ x2 %in% z", "is not understood; supported:"),
        ("y ~ {(SELECT max(x2) FROM bp_source)}", "subquery is not allowed"),
        ("y ~ {x2 + random()}", "function rand() is not allowed"),
        ("y ~ {sum(x2)}", "function sum() is not allowed"),
        ("y ~ {x2 + nosuch}", "column 'nosuch' not found"),
        ("y ~ x2 + 1", "the intercept is absorbed"),
        ("y ~ levels(x2)", "more than 200 levels"),
        ("y ~ region", "levels(column) makes indicators"),
        ("y ~ {CASE WHEN x2 > 0 THEN region ELSE 'a' END}", "not a number"),
        ("y ~ {region || 'a'}", "dpipe is not allowed"),
        ("y ~ (x2 + z", "never closed"),
    ],
)
def test_unknown_terms_give_one_line(panel, formula, needle):
    _, path = panel
    with pytest.raises(BigPanelError) as info:
        bigpanel.fit(path, formula, fe="unit")
    assert needle in str(info.value) and "\n" not in str(info.value)


def test_cli_formula_error_is_one_line(panel):
    _, path = panel
    out = CliRunner().invoke(app, ["fit", path, "y ~ x2 + poly(z)", "--fe", "unit"])
    assert out.exit_code == 2 and len(out.stderr.strip().splitlines()) == 1


def test_undefined_transforms_are_dropped_and_counted(panel):
    df, path = panel
    res = bigpanel.fit(path, "y ~ sqrt(x2) + z^-1 + exp(z)", fe="unit")
    neg = int((df.x2 < 0).sum())
    assert res.rows.incomplete["sqrt(x2)"] == neg
    sample = df[df.x2 >= 0]
    ref = _reference(sample, "y ~ np.sqrt(x2) + I(z ** -1) + np.exp(z)")  # statsmodels formula OLS, unit dummies
    assert rel([res.params["sqrt(x2)"], res.params["z^-1"], res.params["exp(z)"]],
               ref.params[["np.sqrt(x2)", "I(z ** -1)", "np.exp(z)"]].to_numpy()) < 1e-8
