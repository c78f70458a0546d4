"""The command line, driven by typer's test runner: output, JSON, files and one-line errors."""

import json
import re

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from bigpanel.cli import app
from conftest import lsdv, make_panel, rel

runner = CliRunner()


@pytest.fixture(scope="module")
def panel_path(tmp_path_factory):
    df = make_panel(seed=21)
    df["name"] = "u" + df["unit"].astype(str)
    df.loc[df.index[:5], "x2"] = np.nan
    df["one"] = 1
    df["w"] = 1.0 + df["period"] % 4
    df["nothing"] = pd.Series([None] * len(df), dtype="Int64")
    path = tmp_path_factory.mktemp("cli") / "panel.parquet"
    df.to_parquet(path)
    return df, str(path)


def run(*args):
    return runner.invoke(app, list(args))


def test_fit_json_matches_lsdv(panel_path):
    # Reference: statsmodels LSDV on the complete rows.
    df, path = panel_path
    out = run("fit", path, "y ~ x1 + x2", "--fe", "unit", "--variance", "hc1", "--json")
    assert out.exit_code == 0, out.output
    doc = json.loads(out.stdout)
    sample = df.dropna(subset=["x2"])
    ref = lsdv(sample, "y", ["x1", "x2"], ["unit"], cov_type="HC1")
    assert doc["nobs"] == len(sample)
    est = [doc["coefficients"][c]["estimate"] for c in ["x1", "x2"]]
    se = [doc["coefficients"][c]["std_error"] for c in ["x1", "x2"]]
    assert rel(est, ref.params[:2]) < 1e-8
    assert rel(se, ref.bse[:2]) < 1e-8
    assert doc["rows"]["incomplete"] == {"x2": 5}
    assert doc["estimator"] == "within"


def test_fit_table_save_and_effects(panel_path, tmp_path):
    df, path = panel_path
    save = tmp_path / "fit.json"
    fx = tmp_path / "fx"
    out = run("fit", path, "--y", "y", "--x", "x1", "--x", "x3", "--x", "one", "--fe", "unit", "--fe", "period",
              "--cluster", "unit", "--save", str(save), "--effects-out", str(fx))
    assert out.exit_code == 0, out.output
    assert "x1" in out.stdout and "CR1, robust to errors correlated within clusters; clusters: unit" in out.stdout
    assert "one (absorbed" in out.stdout
    doc = json.loads(save.read_text())
    assert doc["vcov"]["type"] == "cr1"
    eff = pd.read_parquet(fx / "effects_unit.parquet")
    assert list(eff.columns) == ["unit", "effect", "rows"]
    assert eff["rows"].sum() == doc["nobs"]
    assert (fx / "effects_period.parquet").exists()


def test_demo_writes_panel_with_known_truth(tmp_path):
    path = tmp_path / "sales.parquet"
    out = run("demo", str(path), "--rows", "50000")
    assert out.exit_code == 0, out.output
    assert "- 1.8 log_price + 0.35 promo" in out.stdout
    df = pd.read_parquet(path)
    assert len(df) == 50000
    assert {"store", "product", "week", "region", "log_price", "promo", "log_units", "shelf_m2"} <= set(df.columns)
    fit = run("fit", str(path), "log_units ~ log_price + promo", "--fe", "store", "--fe", "product",
              "--fe", "week", "--json")
    doc = json.loads(fit.stdout)
    # True coefficients set by the generator; the estimate is within a few standard errors.
    for name, truth in {"log_price": -1.8, "promo": 0.35}.items():
        c = doc["coefficients"][name]
        assert abs(c["estimate"] - truth) < 5 * c["std_error"] + 1e-3


@pytest.mark.parametrize(
    "args, needle",
    [
        (["fit", "missing.parquet", "y ~ x1", "--fe", "unit"], "file not found: missing.parquet"),
        (["fit", "{p}", "y ~ x11", "--fe", "unit"], "did you mean 'x1'"),
        (["fit", "{p}", "y ~ name", "--fe", "unit"], "column 'name' has type VARCHAR"),
        (["fit", "{p}", "y ~ x1", "--fe", "nope"], "fixed-effect column 'nope' not found"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--where", "x1 > 1e9"], "the filter 'x1 > 1e9' keeps none"),
        (["fit", "{p}", "y ~ x1", "--fe", "nothing"], "column 'nothing' is missing or not finite in"),
        (["describe", "{p}", "--id", "unt", "--time", "period"], "did you mean 'unit'"),
        (["describe", "{p}", "--id", "unit", "--time", "period", "--effects", "unit"], "--effects takes exactly two"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--cluster", "one"], "cluster column 'one' takes a single value"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--cluster", "unit", "--variance", "hc1"], "conflicts with --variance hc1"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--variance", "hc9"], "'hc9' is not one of 'classical', 'hc1', 'cr1'"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--where", "1=1); DROP TABLE t; SELECT (1"], "must be a single SQL expression"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--where", "nosuchcol > 2"], "not a valid filter"),
        (["fit", "{p}", "y x1", "--fe", "unit"], "needs exactly one '~'"),
        (["fit", "{p}", "y ~ one", "--fe", "unit"], "every regressor is absorbed"),
        (["fit", "{p}", "y ~ x1", "--y", "y", "--fe", "unit"], "either a formula or --y/--x"),
        (["demo", "{d}", "--rows", "0"], "--rows must be at least 1"),
        # renamed options and usage mistakes: one line too, not click's usage block
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--vcov", "hc1"], "--vcov is no longer an option: use --variance"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--keep-singletons"], "use --singletons keep"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--estimator", "fd"], "'fd' is not one of"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--singletons", "no"], "'no' is not one of 'drop', 'keep'"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--variance", "cr1"], "--variance cr1 needs a --cluster column"),
        (["fit", "{p}", "y ~ x1", "--fe", "unit", "--colour"], "No such option: --colour"),
        (["fitt", "{p}"], "No such command 'fitt'"),
        (["fit", "{p}", "y ~ x1"], "Missing option '--fe'"),
    ],
)
def test_errors_are_one_line_with_exit_2(panel_path, tmp_path, args, needle):
    _, path = panel_path
    args = [a.replace("{p}", path).replace("{d}", str(tmp_path / "d.parquet")) for a in args]
    out = run(*args)
    assert out.exit_code == 2, out.output
    assert needle in out.output
    assert "Traceback" not in out.output
    assert len(out.stderr.strip().splitlines()) == 1


def test_unreadable_parquet(tmp_path):
    bad = tmp_path / "bad.parquet"
    bad.write_text("this is not parquet")
    out = run("fit", str(bad), "y ~ x", "--fe", "g")
    assert out.exit_code == 2
    assert "cannot read" in out.output and "Traceback" not in out.output


def test_help_explains_options():
    out = run("fit", "--help")
    assert out.exit_code == 0
    for word in ["--fe", "--cluster", "--variance", "--where", "--effects-out", "--memory-limit", "Example"]:
        assert word in out.stdout


def test_table_command_formats(panel_path, tmp_path):
    _, path = panel_path
    files = []
    for i, extra in enumerate([[], ["--fe", "period", "--cluster", "unit"]]):
        f = tmp_path / f"m{i}.json"
        assert run("fit", path, "y ~ x1 + x3", "--fe", "unit", *extra, "--save", str(f), "-q").exit_code == 0
        files.append(str(f))
    out = run("table", *files, "--to", "markdown")
    assert out.exit_code == 0 and "| x1" in out.stdout and "period effects" in out.stdout
    tex = tmp_path / "t.tex"
    out = run("table", *files, "--to", "latex", "--out", str(tex))
    assert out.exit_code == 0 and "\\toprule" in tex.read_text()
    out = run("table", *files, "--to", "pdf")
    assert out.exit_code == 2 and "pdf" in out.output


def test_effects_command_writes_files_and_plot(panel_path, tmp_path):
    _, path = panel_path
    out = run("effects", path, "y ~ x1 + x3", "--fe", "unit", "--fe", "period", "--out", str(tmp_path / "fx"),
              "--plot", str(tmp_path / "fx.png"))
    assert out.exit_code == 0, out.output
    assert (tmp_path / "fx" / "effects_unit.parquet").exists()
    assert (tmp_path / "fx.png").read_bytes()[:4] == b"\x89PNG"


@pytest.mark.slow
def test_bench_command_compares_engines(panel_path):
    _, path = panel_path
    out = run("bench", path, "y ~ x1 + x3", "--fe", "unit", "--json")
    assert out.exit_code == 0, out.output
    doc = json.loads(out.stdout)
    assert set(doc["runs"]) == {"scan", "duckdb", "memory"}
    assert all(r["ok"] for r in doc["runs"].values())
    assert doc["max_abs_coef_diff"] < 1e-9


def test_describe_command(panel_path, tmp_path):
    # Reference: pandas on the same frame.
    df, path = panel_path
    out = run("describe", path, "--id", "unit", "--time", "period", "--effects", "unit", "--effects", "sector",
              "--json", "--plot", str(tmp_path / "p.png"))
    assert out.exit_code == 0, out.output
    doc = json.loads(out.stdout)
    assert doc["rows"] == len(df) and doc["units"] == df["unit"].nunique()
    assert doc["balanced"] is False and "one" in doc["time_invariant"]
    assert (tmp_path / "p.png").exists()
    text = run("describe", path, "--id", "unit", "--time", "period")
    assert text.exit_code == 0 and "coverage: units by the share" in text.stdout


def test_weighted_estimators_say_so(panel_path, tmp_path):
    # Every estimator takes --weights; the report, the JSON and the model table name the column.
    df, path = panel_path
    files = []
    for est in ["within", "between", "first-difference", "random-effects"]:
        f = tmp_path / f"{est}.json"
        extra = ["--time", "period"] if est == "first-difference" else []
        out = run("fit", path, "y ~ x1 + x3", "--fe", "unit", "--estimator", est, "--weights", "w", *extra,
                  "--save", str(f))
        assert out.exit_code == 0, out.output
        assert "each row counts in proportion to w" in out.stdout
        assert json.loads(f.read_text())["weights"] == "w"
        files.append(str(f))
    out = run("table", *files, "--to", "markdown")
    assert out.exit_code == 0 and re.search(r"\| weights +\| w +\| w +\| w +\| w +\|", out.stdout)


@pytest.mark.parametrize("command", ["fit", "effects", "bench", "describe", "table", "demo"])
def test_help_shows_placeholders_and_choices_not_type_names(command):
    out = run(command, "--help")
    assert out.exit_code == 0
    assert "<bool>" not in out.stdout and "list[str]" not in out.stdout and "<int>" not in out.stdout
    assert not re.search(r"<(str|Path|list\[Path\])>", out.stdout)  # positional arguments too
    assert "{" not in out.stdout.splitlines()[0]  # the usage line names arguments plainly
    if command == "fit":
        assert "--variance <classical|hc1|cr1>" in out.stdout and "--singletons <drop|keep>" in out.stdout
        assert "--fe COL" in out.stdout and "PostgreSQL" in out.stdout and "Spark" in out.stdout


HEAVY = ("numpy", "scipy", "duckdb", "pyarrow", "statsmodels", "sqlglot", "pandas")
PROBE = """
import sys
sys.argv = ["bigpanel", *{args!r}]
import bigpanel.cli
try:
    bigpanel.cli.app()
except SystemExit as exc:
    code = exc.code
print(code, [m for m in {heavy!r} if m in sys.modules])
"""


@pytest.mark.parametrize("args, code", [(["--help"], 0), (["fit", "--help"], 0), (["describe", "--help"], 0),
                                        (["fit", "p.parquet", "y ~ x", "--variance", "nosuch"], 2)])
def test_help_and_usage_errors_load_nothing_heavy(args, code):
    # `bigpanel --help` took 1.5-2 s when the CLI imported scipy, duckdb and numpy at start;
    # a fresh interpreter shows what importing the CLI and answering loads
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-c", PROBE.format(args=args, heavy=HEAVY)], capture_output=True, text=True,
                         check=True).stdout.strip().splitlines()[-1]
    assert out == f"{code} []"


def test_python_m_bigpanel_runs_the_cli():
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-m", "bigpanel", "--help"], capture_output=True, text=True)
    assert done.returncode == 0 and "fit" in done.stdout and "describe" in done.stdout
