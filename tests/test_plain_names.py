"""Column names that look like rich markup or emoji codes are printed as they are (issue 19 item 13).

Reference for the slope: statsmodels LSDV (conftest.lsdv) on the same data with plain names.
"""

import pytest
from typer.testing import CliRunner

from bigpanel.cli import app
from conftest import lsdv, make_panel

runner = CliRunner()
NAMES = {"x1": "price[/usd]", "x2": "[bold]zz", "x3": "qty[red]", "unit": ":x:"}


@pytest.fixture
def odd_panel(tmp_path):
    df = make_panel(seed=93)
    path = tmp_path / "odd.parquet"
    df.rename(columns=NAMES).to_parquet(path)
    return df, path


def test_fit_report_shows_markup_like_names_verbatim(odd_panel, tmp_path):
    df, path = odd_panel
    out = runner.invoke(app, ["fit", str(path), "--y", "y", "--x", "price[/usd]", "--x", "[bold]zz", "--x", "qty[red]",
                              "--fe", ":x:", "--effects-out", str(tmp_path / "fx")])
    assert out.exit_code == 0, out.output
    for name in NAMES.values():
        assert name in out.stdout
    assert "❌" not in out.stdout
    ref = lsdv(df, "y", ["x1", "x2", "x3"], ["unit"])
    assert f"{ref.params[0]:.6g}" in out.stdout


def test_effects_table_and_errors_show_names_verbatim(odd_panel, tmp_path):
    _, path = odd_panel
    # In a formula a name with operator characters is written in backticks.
    out = runner.invoke(app, ["effects", str(path), "y ~ `qty[red]`", "--fe", ":x:", "--out", str(tmp_path / "fx")])
    assert out.exit_code == 0, out.output
    assert ":x:" in out.stdout and "❌" not in out.stdout
    out = runner.invoke(app, ["fit", str(path), "y ~ `[bold]missing[/bold]`", "--fe", ":x:"])
    assert out.exit_code == 2 and "'[bold]missing[/bold]' not found" in out.output
