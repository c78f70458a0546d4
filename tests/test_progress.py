"""What the progress display is told and shows (the status line itself needs a terminal)."""

import bigpanel
from bigpanel.progress import PassProgress
from test_strategies import unit_period_panel


def test_every_pass_over_the_rows_is_announced_and_numbered(to_parquet):
    # The fit's own count of passes (solver.raw_passes) against what on_step heard.
    df = unit_period_panel(seed=11)
    heard: list[str] = []
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe=["unit", "period"], cluster="unit",
                       on_step=heard.append)
    passes = [label for label in heard if label.startswith("pass ")]
    assert len(passes) == res.solver.raw_passes == 3
    # two effects, CR1: at least 3 passes (the README's table in "How it scales")
    assert [p.split(":")[0] for p in passes] == ["pass 1 of at least 3", "pass 2 of at least 3",
                                                 "pass 3 of at least 3"]


def test_passes_beyond_the_least_are_numbered_alone(to_parquet):
    # One effect with HC1 errors takes at least 2 passes (README table); a missing value adds
    # the incomplete-row pass, which the line numbers without a total.
    df = unit_period_panel(seed=13)
    df.loc[3, "x1"] = float("nan")
    heard: list[str] = []
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe="unit", variance="hc1", on_step=heard.append)
    passes = [label.split(":")[0] for label in heard if label.startswith("pass ")]
    assert len(passes) == res.solver.raw_passes == 3
    assert passes == ["pass 1 of at least 2", "pass 2 of at least 2", "pass 3"]


def test_the_line_shows_step_percent_and_elapsed_time():
    shown: list[str] = []
    clock = iter([100.0, 102.5, 104.0]).__next__
    line = PassProgress(shown.append, clock=clock)
    line("pass 1: per-level statistics (round 1)")
    line.attach(lambda: 42.4)
    line.refresh()
    assert shown == ["pass 1: per-level statistics (round 1) - 2.5 s",
                     "pass 1: per-level statistics (round 1) - 42% - 4.0 s"]


def test_duckdb_reports_no_progress_when_idle(to_parquet):
    # The probe the engine attaches: None outside a query (DuckDB says -1 then).
    df = unit_period_panel(seed=12)
    probes = []

    class Recorder:
        def __call__(self, label):
            pass

        def attach(self, probe):
            probes.append(probe)

    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe="unit", on_step=Recorder())
    assert res.nobs == len(df) and len(probes) == 1 and probes[0]() is None


def test_period_effects_are_drawn_against_time(tmp_path):
    # Dates are periods, and so is the integer column named as the period (years); store
    # numbers and string keys are not (a histogram then).
    import datetime

    import pyarrow as pa

    from bigpanel.output.plots import over_time, plot_effects

    def table(keys):
        return pa.table({"k": keys, "effect": [0.1 * i for i in range(len(keys))], "rows": [5] * len(keys)})

    weeks = table([datetime.date(2024, 1, 1) + datetime.timedelta(days=7 * i) for i in range(30)])
    years = table(list(range(2000, 2020)))
    stores = table(list(range(1, 40)))
    names = table(["a", "b", "c"])
    assert over_time(weeks) and over_time(years, period="k") and not over_time(years)
    assert not over_time(stores) and not over_time(names)
    plot_effects({"week": weeks, "store": stores}, tmp_path / "fx.png")
    assert (tmp_path / "fx.png").stat().st_size > 1000
