"""Outputs: never onto an input, checked before the first pass, unique per effect, all or none
(issue 19 items 7, 8, 9, 10). Reference for the numbers: statsmodels LSDV (conftest.lsdv)."""

import errno
import json
import os

import pyarrow.parquet as pq
import pytest
from typer.testing import CliRunner

import bigpanel.api
from bigpanel.cli import app
from conftest import lsdv, make_panel, rel

runner = CliRunner()


@pytest.fixture
def panel(tmp_path):
    df = make_panel(seed=91)
    df["a b"] = df["unit"]
    df["a_b"] = df["period"]
    path = tmp_path / "data.parquet"
    df.to_parquet(path)
    return df, path


@pytest.fixture
def no_fit(monkeypatch):
    """Fail the test if a fit starts: the path checks must come before the first pass."""
    def refuse(*args, **kwargs):
        raise AssertionError("the fit ran before the output paths were checked")
    monkeypatch.setattr(bigpanel.api, "fit", refuse)  # the CLI imports it when a command runs


def fit(*args):
    return runner.invoke(app, ["fit", *map(str, args)])


def test_save_onto_the_input_is_refused(panel, no_fit):
    # It used to replace data.parquet with JSON after the fit.
    df, path = panel
    before = path.read_bytes()
    out = fit(path, "y ~ x1", "--fe", "unit", "--save", path)
    assert out.exit_code == 2 and "input" in out.output and "Traceback" not in out.output
    assert path.read_bytes() == before


def test_symlink_fifo_folder_and_file_parent_are_refused_before_the_fit(panel, tmp_path, no_fit):
    _, path = panel
    (tmp_path / "target.json").write_text("keep")
    os.symlink(tmp_path / "target.json", tmp_path / "link.json")
    os.mkfifo(tmp_path / "pipe")
    (tmp_path / "folder").mkdir()
    cases = [
        (["--save", tmp_path / "link.json"], "symbolic link"),
        (["--save", "/dev/stdout"], "symbolic link"),  # as root it would become a regular file
        (["--save", tmp_path / "pipe"], "not a regular file"),
        (["--save", tmp_path / "folder"], "is a folder"),
        (["--save", path / "fit.json"], "is a file, not a folder"),
        (["--effects-out", tmp_path / "target.json"], "not a folder"),
        (["--temp-dir", path / "spill"], "is a file, not a folder"),
    ]
    for extra, message in cases:
        out = fit(path, "y ~ x1", "--fe", "unit", *extra)
        assert out.exit_code == 2 and message in out.output, (extra, out.output)
        assert len(out.output.strip().splitlines()) == 1
    assert (tmp_path / "target.json").read_text() == "keep"


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write anywhere")
def test_read_only_folder_is_refused_before_the_fit(panel, tmp_path, no_fit):
    _, path = panel
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o500)
    try:
        out = fit(path, "y ~ x1", "--fe", "unit", "--save", ro / "fit.json")
        assert out.exit_code == 2 and "not writable" in out.output
    finally:
        ro.chmod(0o700)


def test_save_dash_writes_the_json_to_stdout(panel):
    df, path = panel
    out = runner.invoke(app, ["fit", str(path), "y ~ x1", "--fe", "unit", "--save", "-", "--quiet"])
    assert out.exit_code == 0, out.output
    doc = json.loads(out.stdout[out.stdout.index("{"):out.stdout.rindex("}") + 1])
    ref = lsdv(df, "y", ["x1"], ["unit"])
    assert rel(doc["coefficients"]["x1"]["estimate"], ref.params[0]) < 1e-8
    assert not (path.parent / "-").exists()


def test_effects_with_colliding_safe_names_get_distinct_files(panel, tmp_path):
    # 'a b' and 'a_b' both became effects_a_b.parquet; the second replaced the first.
    df, path = panel
    fx = tmp_path / "fx"
    out = fit(path, "y ~ x1", "--fe", "a b", "--fe", "a_b", "--effects-out", fx)
    assert out.exit_code == 0, out.output
    files = sorted(p.name for p in fx.iterdir())
    assert files == ["effects_a_b.parquet", "effects_a_b_2.parquet"]
    levels = {len(pq.read_table(fx / f)) for f in files}
    assert levels == {df["unit"].nunique(), df["period"].nunique()}


def test_disk_full_writes_nothing(panel, tmp_path, monkeypatch):
    # Disk full while the effects are written: neither the JSON nor any effects file appears.
    _, path = panel

    def full(table, where, *args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(pq, "write_table", full)
    save, fx = tmp_path / "fit.json", tmp_path / "fx"
    out = fit(path, "y ~ x1", "--fe", "unit", "--save", save, "--effects-out", fx)
    assert out.exit_code == 2 and "No space left on device" in out.output and "nothing was written" in out.output
    assert not save.exists() and (not fx.exists() or not any(fx.iterdir()))
