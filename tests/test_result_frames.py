"""A fit's numbers as frames and its displays: the coefficient table, the labelled variance, HTML, rich.

Reference: statsmodels OLS with the effect dummies (LSDV) on the generated panel of
conftest.make_panel (invented data, coefficients set by us).
"""

import io
from html.parser import HTMLParser

import numpy as np
import pyarrow as pa
import pytest
from rich.console import Console

import bigpanel
from bigpanel import BigPanelError
from conftest import lsdv, make_panel, rel


class TagBalance(HTMLParser):
    """Tags opened and not yet closed, and the rows of the table's body."""

    def __init__(self):
        super().__init__()
        self.open, self.rows, self.body = [], 0, False

    def handle_starttag(self, tag, attrs):
        self.open.append(tag)
        self.body = self.body or tag == "tbody"
        self.rows += tag == "tr" and self.body and "tfoot" not in self.open

    def handle_endtag(self, tag):
        assert self.open and self.open.pop() == tag


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    df = make_panel(seed=43)
    df = df.rename(columns={"x2": "price <b>&</b>"})  # a name that must be escaped in HTML
    path = tmp_path_factory.mktemp("frames") / "panel.parquet"
    df.to_parquet(path)
    res = bigpanel.fit(str(path), y="y", x=["x1", "price <b>&</b>", "x3"], fe="unit")
    ref = lsdv(df, "y", ["x1", "price <b>&</b>", "x3"], ["unit"])
    return res, ref


def test_coefficient_table_matches_lsdv(fitted):
    res, ref = fitted
    table = res.coefficients()
    assert isinstance(table, pa.Table)
    assert table.column_names == ["term", "estimate", "std_error", "t", "p_value", "ci_low", "ci_high"]
    assert table.column("term").to_pylist() == ["x1", "price <b>&</b>", "x3"]
    # statsmodels LSDV, one effect: the README's 1e-8 relative for one-way fits
    ci = np.asarray(ref.conf_int(alpha=0.05))[:3]
    for column, expected in [("estimate", ref.params[:3]), ("std_error", ref.bse[:3]), ("t", ref.tvalues[:3]),
                             ("ci_low", ci[:, 0]), ("ci_high", ci[:, 1])]:
        assert rel(table.column(column).to_numpy(), expected) < 1e-8, column
    assert np.allclose(table.column("p_value").to_numpy(), ref.pvalues[:3], rtol=1e-6, atol=1e-300)


def test_other_interval_levels_match_lsdv(fitted):
    res, ref = fitted
    table = res.coefficients(level=0.9)
    ci = np.asarray(ref.conf_int(alpha=0.10))[:3]  # statsmodels: t interval on the LSDV residual df
    assert rel(table.column("ci_low").to_numpy(), ci[:, 0]) < 1e-8
    assert rel(table.column("ci_high").to_numpy(), ci[:, 1]) < 1e-8
    with pytest.raises(BigPanelError, match="between 0 and 1"):
        res.coefficients(level=95)


def test_coefficient_table_round_trips_through_pandas_and_polars(fitted):
    res, _ = fitted
    table = res.coefficients()
    frame = table.to_pandas()
    assert list(frame["term"]) == res.names
    assert frame["estimate"].dtype == np.float64
    back = pa.Table.from_pandas(frame, preserve_index=False)
    assert back.column_names == table.column_names
    assert back.to_pylist() == table.to_pylist()  # every value, exactly
    polars = pytest.importorskip("polars")
    pl_frame = polars.from_arrow(table)
    assert pl_frame["term"].to_list() == res.names
    assert np.array_equal(pl_frame["std_error"].to_numpy(), np.asarray(res.std_error))


def test_vcov_table_is_labelled(fitted):
    res, ref = fitted
    table = res.vcov_table()
    assert table.column_names == ["term", *res.names]
    matrix = np.column_stack([table.column(n).to_numpy() for n in res.names])
    assert rel(matrix, np.asarray(ref.cov_params())[:3, :3]) < 1e-8  # statsmodels LSDV covariance
    frame = table.to_pandas().set_index("term")
    assert frame.loc["x1", "x3"] == pytest.approx(ref.cov_params()[0, 2], rel=1e-8)


def test_html_holds_every_term_escaped(fitted):
    res, _ = fitted
    html = res._repr_html_()
    assert html.startswith("<table") and html.endswith("</table>")
    for name in ("x1", "price &lt;b&gt;&amp;&lt;/b&gt;", "x3"):
        assert f">{name}</th>" in html
    assert "price <b>" not in html
    assert f"{res.coef[0]:.6g}" in html and f"{res.rows.used:,} rows used" in html
    parser = TagBalance()
    parser.feed(html)
    assert parser.open == [] and parser.rows == 3  # the standard library parser: every tag closed, a row per term


def test_rich_renders_the_report(fitted):
    res, _ = fitted
    buf = io.StringIO()
    Console(file=buf, width=120, no_color=True).print(res)
    text = buf.getvalue()
    assert "price <b>&</b>" in text and "within estimate" in text
    assert text == res.summary(width=120)
