"""Saved fits: the schema they follow, reading them back, and running them again (``bigpanel refit``).

Data: the generated panel of conftest.make_panel (invented data, coefficients set by us); the
fit itself is checked against statsmodels elsewhere (test_oneway_lsdv, test_multiway_lsdv):
here what is checked is that the file keeps every number and that a re-run finds them again.
"""

import json
import subprocess
import sys

import jsonschema
import numpy as np
import pytest
from typer.testing import CliRunner

import bigpanel
from bigpanel import BigPanelError
from bigpanel.cli import app
from bigpanel.output.tables import build_table, render
from bigpanel.rerun import differences, rerun_arguments
from bigpanel.results.saved import schema
from conftest import make_panel

runner = CliRunner()


@pytest.fixture(scope="module")
def panel(tmp_path_factory):
    df = make_panel(seed=47)
    df["w"] = 1.0 + df["period"] % 3
    df["x1_int"] = (df["x1"] * 10).round()
    path = tmp_path_factory.mktemp("saved") / "panel.parquet"
    df.to_parquet(path)
    return df, str(path)


# a representative set: every estimator, each variance, weights, a filter, categorical terms,
# the in-memory engine and an in-process source
CASES = {
    "two-way, clustered": dict(formula="y ~ x1 + x2", fe=["unit", "period"], cluster="region"),
    "one-way, hc1, weights, filter": dict(formula="y ~ x1 + x2 + x3", fe="unit", variance="hc1", weights="w",
                                          where="period > 1"),
    "two-way clustering": dict(formula="y ~ x1 + x2", fe=["unit"], cluster=["region", "period"]),
    "categorical, memory engine": dict(formula="y ~ x1 + levels(sector)", fe="unit", engine="memory"),
    "between": dict(formula="y ~ x1 + x2", fe="unit", estimator="between"),
    "first differences": dict(formula="y ~ x1 + x2", fe="unit", estimator="first-difference", time="period"),
    "random effects, hausman": dict(formula="y ~ x1 + x2", fe="unit", estimator="random-effects", hausman=True),
    "max_iter 0 (not converged)": dict(formula="y ~ x1", fe=["unit", "period"], max_iter=0),
    "wild bootstrap with interval": dict(formula="y ~ x1", fe="unit", cluster="region", wild_bootstrap=True,
                                         draws=199, seed=3, bootstrap_interval=True),
}


@pytest.fixture(scope="module")
def saved(panel, tmp_path_factory):
    df, path = panel
    folder = tmp_path_factory.mktemp("fits")
    out = {}
    for name, kw in CASES.items():
        res = bigpanel.fit(path, **kw)
        file = folder / f"{len(out)}.json"
        file.write_text(res.to_json())
        out[name] = (res, file)
    res = bigpanel.fit(df, **CASES["two-way, clustered"])
    file = folder / "frame.json"
    file.write_text(res.to_json())
    out["pandas source"] = (res, file)
    return out


def test_the_schema_is_valid_and_every_saved_fit_follows_it(saved):
    jsonschema.Draft202012Validator.check_schema(schema())
    validator = jsonschema.Draft202012Validator(schema())
    for name, (_, file) in saved.items():
        errors = list(validator.iter_errors(json.loads(file.read_text())))
        assert not errors, f"{name}: {errors[0].message} at {list(errors[0].absolute_path)}"


@pytest.mark.parametrize("break_it", [
    lambda d: d.pop("call"),
    lambda d: d.update(nobs="565"),
    lambda d: d["coefficients"]["x1"].pop("std_error"),
    lambda d: d["coefficients"]["x1"].update(bootstrap=1.0),
    lambda d: d["rows"].update(used=-1),
    lambda d: d.update(schema_version=2),
    lambda d: d["call"].pop("rerunnable"),
])
def test_the_schema_is_strict_on_the_core(saved, break_it):
    doc = json.loads(saved["two-way, clustered"][1].read_text())
    break_it(doc)
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(doc, schema())


def test_estimator_sections_are_free(saved):
    doc = json.loads(saved["random effects, hausman"][1].read_text())
    assert {"random_effects", "hausman", "mundlak"} <= set(doc)
    doc["instruments"] = {"first_stage_f": 31.4, "anything": ["goes"]}  # another estimator's own section
    jsonschema.validate(doc, schema())


def test_load_gives_back_the_result(saved):
    for name, (res, file) in saved.items():
        back = bigpanel.load(file)
        assert back.to_dict() == json.loads(res.to_json()), name
        assert back.names == res.names and np.array_equal(back.coef, res.coef), name
        for part in ("vcov", "std_error", "t", "p", "ci_low", "ci_high"):
            assert np.array_equal(getattr(back, part), getattr(res, part), equal_nan=True), (name, part)
        assert back.effects == {} and back.effects_summary() == res.effects_summary()
        assert back.summary() == res.summary(), name  # the report reads only what the file holds
        assert back.coefficients().equals(res.coefficients())


def test_table_takes_loaded_fits(saved):
    fits = [bigpanel.load(saved[name][1]) for name in ("two-way, clustered", "between")]
    text = render(build_table(fits), "markdown")
    assert "x1" in text and "CR1: region" in text and "between" in text


def test_load_refuses_what_is_not_a_fit(tmp_path, saved):
    bad = tmp_path / "not_a_fit.txt"  # not .json: the schema check of conftest.py skips it
    bad.write_text(json.dumps({"hello": 1}))
    with pytest.raises(BigPanelError, match="not a saved bigpanel fit"):
        bigpanel.load(bad)
    newer = json.loads(saved["between"][1].read_text())
    newer["schema_version"] = 99
    bad.write_text(json.dumps(newer))
    with pytest.raises(BigPanelError, match="schema version 99"):
        bigpanel.load(bad)


def test_a_file_from_before_the_schema_loads(saved, tmp_path):
    old = json.loads(saved["two-way, clustered"][1].read_text())
    del old["schema_version"], old["call"]
    path = tmp_path / "old.saved"  # not .json: it lacks schema_version on purpose
    path.write_text(json.dumps(old))
    back = bigpanel.load(path)
    assert back.params == saved["two-way, clustered"][0].params and back.call == {}


def test_refit_finds_the_same_numbers(panel, tmp_path):
    _, path = panel
    save = tmp_path / "m.json"
    assert runner.invoke(app, ["fit", path, "y ~ x1 + x2", "--fe", "unit", "--fe", "period", "--cluster", "region",
                               "--save", str(save), "--quiet"]).exit_code == 0
    done = runner.invoke(app, ["refit", str(save), "--quiet"])
    assert done.exit_code == 0, done.output
    assert done.output.startswith("same:")


def test_refit_reports_numbers_beyond_the_tolerance(panel, tmp_path):
    _, path = panel
    res = bigpanel.fit(path, **CASES["one-way, hc1, weights, filter"])
    doc = json.loads(res.to_json())
    estimate = doc["coefficients"]["x1"]["estimate"]
    for factor, code in ((1 + 1e-7, 4), (1 + 1e-13, 0)):  # beyond, then within rtol 1e-9
        doc["coefficients"]["x1"]["estimate"] = estimate * factor
        file = tmp_path / "changed.json"
        file.write_text(json.dumps(doc))
        done = runner.invoke(app, ["refit", str(file), "--quiet"])
        assert done.exit_code == code, done.output
        assert ("coefficients.x1.estimate" in done.output) == (code == 4)


def test_refit_sees_changed_data(panel, tmp_path):
    df, _ = panel
    path = tmp_path / "p.parquet"
    df.to_parquet(path)
    file = tmp_path / "m.json"
    file.write_text(bigpanel.fit(str(path), "y ~ x1 + x2", fe="unit").to_json())
    changed = df.copy()
    changed.loc[changed.index[::7], "y"] += 1.0
    changed.to_parquet(path)
    done = runner.invoke(app, ["refit", str(file), "--quiet"])
    assert done.exit_code == 4
    assert "coefficients.x1.estimate" in done.output and "fit.rss" in done.output


def test_refit_of_a_frame_needs_a_source(saved, panel):
    _, path = panel
    file = saved["pandas source"][1]
    done = runner.invoke(app, ["refit", str(file)])
    assert done.exit_code == 2 and "give --source" in done.output
    done = runner.invoke(app, ["refit", str(file), "--source", path, "--quiet"])
    assert done.exit_code == 0, done.output


def test_refit_asks_again_before_reading_the_network(saved):
    res = saved["between"][0]
    res.call = {**res.call, "source": "s3://bucket/p.parquet", "source_kind": "remote",
                "arguments": {**res.call["arguments"], "allow_remote": True}}
    where, args = rerun_arguments(res, None, allow_remote=False)
    assert where == "s3://bucket/p.parquet" and args["allow_remote"] is False
    with pytest.raises(BigPanelError, match="--allow-remote"):
        bigpanel.fit(where, **args)


def test_differences_walk_everything_but_the_run():
    saved = {"timings": {"a": 1.0}, "solver": {"seconds": 1.0, "iterations": 3}, "fit": {"f_df": [2.0, 10.0]},
             "extra": {"z": [1.0, 2.0]}, "text": "a"}
    now = {"timings": {"a": 9.0}, "solver": {"seconds": 2.0, "iterations": 4}, "fit": {"f_df": [2.0, 11.0]},
           "extra": {"z": [1.0, 2.0 + 1e-14]}, "text": "b", "new": 1}
    found = {d.key for d in differences(saved, now)}
    assert found == {"solver.iterations", "fit.f_df[1]", "text", "new"}


def test_python_m_bigpanel_is_the_command(panel):
    _, path = panel
    done = subprocess.run([sys.executable, "-m", "bigpanel", "fit", path, "y ~ x1 + x2", "--fe", "unit", "--json"],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)
    via_app = json.loads(runner.invoke(app, ["fit", path, "y ~ x1 + x2", "--fe", "unit", "--json"]).output)
    assert doc["coefficients"] == via_app["coefficients"] and doc["call"] == via_app["call"]
