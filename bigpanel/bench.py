"""Measure a fit against the floor and against the in-memory engine, each in a fresh child process.

Wall time is measured inside the child (start-up and the package's imports
excluded, pandas too, which pyarrow imports at its first conversion to numpy
when it is installed); peak memory is the child's own maximum resident set size.
"""

from __future__ import annotations

import multiprocessing as mp
import resource
import time
from typing import Any, Callable

import numpy as np
from rich import box
from rich.table import Table

from .errors import BigPanelError
from .sql.text import Fragment, ident, join, render


def _scan_floor(model: dict[str, Any]) -> dict[str, Any]:
    """One aggregate pass over the model's columns: sums of values, minimum of keys."""
    from .options import as_list
    from .engines.registry import open_session
    from .model.spec import build_spec, parse_formula

    y, x = (parse_formula(model["formula"]) if model.get("formula") else (model["y"], as_list(model["x"])))
    eng, src = open_session(
        model["source"], model.get("table"), memory_limit=model.get("memory_limit"),
        temp_dir=model.get("temp_dir"), threads=model.get("threads"), delimiter=model.get("delimiter"),
        allow_remote=model.get("allow_remote") or None,
    )
    try:
        spec = build_spec(
            src, y, x, as_list(model["fe"]), as_list(model.get("cluster")), model.get("variance"), model.get("where"),
            eng=eng, endogenous=as_list(model.get("endogenous")), instruments=as_list(model.get("instruments")),
        )
        aggs = [f"sum(CAST({c} AS DOUBLE)) AS s{i}" for i, c in enumerate(spec.value_sql)]
        keys = [c for cols in spec.fe for c in cols] + list(spec.cluster)
        aggs += [f"min({ident(c)}) AS k{i}" for i, c in enumerate(dict.fromkeys(keys))]
        where = Fragment(f"({spec.where})" if spec.where else "TRUE")
        row = eng.one("scan", render("scan_floor", aggregates=join(aggs), where=where), raw=True)
        return {"nobs": int(row["n"]), "raw_passes": eng.raw_passes}
    finally:
        eng.close()


def _fit(model: dict[str, Any], engine: str) -> dict[str, Any]:
    from .api import fit

    return fit(**model, engine=engine).to_dict()


def _child(conn: Any, what: str, model: dict[str, Any], runner: Callable[[dict], dict] | None) -> None:
    try:
        from . import api  # noqa: F401 - imported before the clock starts: a run times work, not imports
        import pyarrow

        pyarrow.array([0.0]).to_numpy()  # pyarrow imports pandas, when installed, at its first conversion (0.25 s)

        start = time.perf_counter()
        out = runner(model) if runner is not None else _scan_floor(model) if what == "scan" else _fit(model, what)
        seconds = time.perf_counter() - start
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
        conn.send({"ok": True, "seconds": seconds, "peak_mb": peak, "result": out})
    except BigPanelError as exc:
        conn.send({"ok": False, "error": str(exc)})
    except MemoryError:
        conn.send({"ok": False, "error": "out of memory"})
    finally:
        conn.close()


def measure(what: str, model: dict[str, Any], runner: Callable[[dict], dict] | None = None) -> dict[str, Any]:
    """Run ``what`` ("scan", "duckdb" or "memory", or ``runner(model)`` when given: an importable
    function) in a fresh process; time, peak memory, result."""
    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_child, args=(child, what, model, runner))
    proc.start()
    child.close()
    try:
        msg = parent.recv()
    except EOFError:
        msg = {"ok": False, "error": f"the child process died (exit code {proc.exitcode}; out of memory?)"}
    proc.join()
    if proc.exitcode not in (0, None) and msg.get("ok"):
        msg = {"ok": False, "error": f"exit code {proc.exitcode}"}
    msg["what"] = what
    return msg


def compare_engines(model: dict[str, Any]) -> dict[str, Any]:
    """The scan floor, the DuckDB fit and the in-memory fit of one model, with the largest differences."""
    runs = {what: measure(what, model) for what in ("scan", "duckdb", "memory")}
    for what in ("duckdb", "memory"):
        if not runs[what]["ok"]:
            if what == "duckdb":
                raise BigPanelError(runs[what]["error"])
    report: dict[str, Any] = {"runs": runs}
    if runs["memory"]["ok"]:
        a, b = runs["duckdb"]["result"]["coefficients"], runs["memory"]["result"]["coefficients"]
        est = [abs(a[k]["estimate"] - b[k]["estimate"]) for k in a]
        se = [abs(a[k]["std_error"] - b[k]["std_error"]) / abs(b[k]["std_error"]) for k in a]
        report["max_abs_coef_diff"] = float(np.max(est))
        report["max_rel_se_diff"] = float(np.max(se))
    return report


def bench_renderable(report: dict[str, Any]) -> Table:
    """A table of the three runs, times as multiples of the scan floor."""
    runs = report["runs"]
    floor = runs["scan"]["seconds"] if runs["scan"]["ok"] else None
    table = Table(box=box.SIMPLE_HEAD, title="bigpanel bench", title_justify="left")
    for col in ("run", "seconds", "x scan", "peak MiB", "passes", "rows"):
        table.add_column(col, justify="left" if col == "run" else "right")
    labels = {"scan": "plain DuckDB scan (floor)", "duckdb": "bigpanel fit, DuckDB",
              "memory": "bigpanel fit, in memory"}
    for what, run in runs.items():
        if not run["ok"]:
            table.add_row(labels[what], "failed", "", "", "", run["error"])
            continue
        res = run["result"]
        passes = res.get("raw_passes", res.get("solver", {}).get("raw_passes", ""))
        ratio = f"{run['seconds'] / floor:.1f}" if floor else ""
        table.add_row(labels[what], f"{run['seconds']:.2f}", ratio, f"{run['peak_mb']:.0f}", str(passes),
                      f"{res['nobs']:,}")
    if "max_abs_coef_diff" in report:
        table.caption = (
            f"largest slope difference {report['max_abs_coef_diff']:.2e}; "
            f"largest relative s.e. difference {report['max_rel_se_diff']:.2e}"
        )
    return table
