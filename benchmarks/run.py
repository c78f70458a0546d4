"""Speed and memory of a fit against the plain scan floor and the in-memory fit, 1M to 200M rows.

    python benchmarks/run.py                      # all sizes (about 30 minutes on 2 cores)
    python benchmarks/run.py --sizes 1e6,1e7      # a quick look

Demo panels are generated once and cached under benchmarks/data/. Every
measurement runs in a fresh child process (bigpanel.bench.measure): wall time
inside the child, peak resident memory of the child. The DuckDB path runs with
a memory limit and a spill folder; the in-memory fit is skipped where its
estimated footprint would not fit the machine, and a failure is recorded, not
hidden. Writes benchmarks/results.json and benchmarks/results.png and prints a
table of ratios to the scan floor.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np
from rich.console import Console
from rich.table import Table

from bigpanel import __version__
from bigpanel.bench import measure
from bigpanel.demo import write_demo

HERE = Path(__file__).resolve().parent
EFFECTS = {1: ["store"], 2: ["store", "week"], 3: ["store", "product", "week"]}
FORMULA = "log_units ~ log_price + promo"
MEMORY_BYTES_PER_ROW = 320  # measured peak of the in-memory fit, about 280 B/row at 10M rows


def machine() -> dict:
    mem = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    cpu = next((l.split(":", 1)[1].strip() for l in open("/proc/cpuinfo") if l.startswith("model name")), "")
    return {"cores": os.cpu_count(), "memory_gib": round(mem / 2**30, 1), "cpu": cpu, "python": platform.python_version()}


def demo_file(rows: int, data_dir: Path) -> str:
    path = data_dir / f"demo_{rows}.parquet"
    if not path.exists():
        start = time.perf_counter()
        write_demo(str(path), rows=rows)
        print(f"generated {rows:,} rows in {time.perf_counter() - start:.1f} s", file=sys.stderr)
    return str(path)


def run(sizes: list[int], data_dir: Path, memory_limit: str) -> dict:
    spill = data_dir / "spill"
    records = []
    total_memory = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    for rows in sizes:
        path = demo_file(rows, data_dir)
        for k, fe in EFFECTS.items():
            model = {"source": path, "formula": FORMULA, "fe": fe, "cluster": "store"}
            sql_model = {**model, "memory_limit": memory_limit, "temp_dir": str(spill)}
            plan = [("scan", model), ("duckdb", sql_model)]
            if rows * MEMORY_BYTES_PER_ROW < 0.8 * total_memory:
                plan.append(("memory", model))
            else:
                records.append({"rows": rows, "effects": k, "what": "memory", "ok": False,
                                "error": f"skipped: needs about {rows * MEMORY_BYTES_PER_ROW / 2**30:.0f} GiB"})
            for what, m in plan:
                out = measure(what, m)
                rec = {"rows": rows, "effects": k, "what": what, "ok": out["ok"]}
                if out["ok"]:
                    res = out["result"]
                    rec.update(seconds=out["seconds"], peak_mb=out["peak_mb"], nobs=res["nobs"],
                               raw_passes=res.get("raw_passes", res.get("solver", {}).get("raw_passes")))
                    if what != "scan":
                        rec["iterations"] = res["solver"]["iterations"]
                        rec["coefficients"] = {n: c["estimate"] for n, c in res["coefficients"].items()}
                else:
                    rec["error"] = out["error"]
                records.append(rec)
                print(json.dumps({k2: v for k2, v in rec.items() if k2 != "coefficients"}), file=sys.stderr)
    return {"bigpanel_version": __version__, "machine": machine(), "memory_limit": memory_limit,
            "formula": FORMULA, "cluster": "store", "records": records, "summary": summarise(records)}


def summarise(records: list[dict]) -> dict:
    """Ratios to the scan floor, in-memory speed-ups, log-log slopes of time on rows, and the memory peak."""
    def get(rows, k, what):
        return next((r for r in records if r["rows"] == rows and r["effects"] == k and r["what"] == what and r["ok"]), None)

    out: dict = {"ratio_to_scan": {}, "memory_over_duckdb": {}, "loglog_slope": {}, "peak_mb_duckdb": {}}
    sizes = sorted({r["rows"] for r in records})
    for k in EFFECTS:
        for rows in sizes:
            scan, sql, mem = get(rows, k, "scan"), get(rows, k, "duckdb"), get(rows, k, "memory")
            key = f"{k}-way@{rows}"
            if scan and sql:
                out["ratio_to_scan"][key] = round(sql["seconds"] / scan["seconds"], 2)
            if sql and mem:
                out["memory_over_duckdb"][key] = round(mem["seconds"] / sql["seconds"], 2)
            if sql:
                out["peak_mb_duckdb"][key] = round(sql["peak_mb"])
        pts = [(rows, get(rows, k, "duckdb")) for rows in sizes if rows >= 10_000_000]
        pts = [(r, s["seconds"]) for r, s in pts if s]
        if len(pts) >= 2:
            x, y = np.log([p[0] for p in pts]), np.log([p[1] for p in pts])
            out["loglog_slope"][f"{k}-way"] = round(float(np.polyfit(x, y, 1)[0]), 3)
    return out


def table(result: dict) -> Table:
    t = Table(title=f"bigpanel {result['bigpanel_version']}: {FORMULA}, clustered by store", title_justify="left")
    for col in ("rows", "effects", "scan s", "duckdb s", "x scan", "duckdb peak MiB", "passes", "memory s", "memory peak MiB", "memory / duckdb"):
        t.add_column(col, justify="right")
    recs = result["records"]
    for rows in sorted({r["rows"] for r in recs}):
        for k in EFFECTS:
            row = {r["what"]: r for r in recs if r["rows"] == rows and r["effects"] == k}
            scan, sql, mem = row.get("scan"), row.get("duckdb"), row.get("memory")
            def secs(r):
                return f"{r['seconds']:.2f}" if r and r["ok"] else ("-" if not r else r["error"][:28])
            t.add_row(
                f"{rows:,}", str(k), secs(scan), secs(sql),
                f"{sql['seconds'] / scan['seconds']:.1f}" if sql and sql["ok"] and scan and scan["ok"] else "",
                f"{sql['peak_mb']:.0f}" if sql and sql["ok"] else "",
                str(sql.get("raw_passes", "")) if sql and sql["ok"] else "",
                secs(mem), f"{mem['peak_mb']:.0f}" if mem and mem["ok"] else "",
                f"{mem['seconds'] / sql['seconds']:.1f}" if mem and mem["ok"] and sql and sql["ok"] else "",
            )
    return t


def plot(result: dict, path: Path) -> None:
    from bigpanel.plots import pyplot, save_figure

    plt = pyplot()
    fig, (ax_t, ax_m) = plt.subplots(1, 2, figsize=(11, 4.2))
    styles = {"scan": ("#888888", ":"), "duckdb": ("#3b7d8c", "-"), "memory": ("#c46a2f", "--")}
    markers = {1: "o", 2: "s", 3: "^"}
    for what, (color, line) in styles.items():
        for k in EFFECTS:
            pts = sorted((r["rows"], r["seconds"], r["peak_mb"]) for r in result["records"]
                         if r["what"] == what and r["effects"] == k and r["ok"])
            if not pts or (what == "scan" and k > 1):
                continue
            rows, secs, peak = zip(*pts)
            label = "scan floor" if what == "scan" else f"{what}, {k} effect{'s' if k > 1 else ''}"
            ax_t.plot(rows, secs, line, color=color, marker=markers[k], label=label)
            ax_m.plot(rows, [p / 1024 for p in peak], line, color=color, marker=markers[k], label=label)
    for ax, ylabel in ((ax_t, "wall time (s)"), (ax_m, "peak resident memory (GiB)")):
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("rows")
        ax.set_ylabel(ylabel)
        ax.grid(True, which="both", alpha=0.3)
    ax_m.axhline(2.0, color="#aa3333", linewidth=0.8)
    ax_m.text(1.1e6, 2.1, "2 GiB", color="#aa3333", fontsize=8)
    ax_t.legend(fontsize=7)
    m = result["machine"]
    fig.suptitle(f"bigpanel fit vs plain scan and in-memory fit ({m['cores']} cores, {m['memory_gib']} GiB)", fontsize=10)
    save_figure(fig, path)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--sizes", default="1e6,1e7,5e7,2e8", help="comma-separated row counts")
    parser.add_argument("--data-dir", default=str(HERE / "data"), help="cache of generated demo panels")
    parser.add_argument("--memory-limit", default="1GB", help="DuckDB memory limit of the SQL path")
    parser.add_argument("--out", default=str(HERE / "results.json"))
    parser.add_argument("--png", default=str(HERE / "results.png"))
    args = parser.parse_args()
    sizes = [int(float(s)) for s in args.sizes.split(",")]
    data_dir = Path(args.data_dir)
    data_dir.mkdir(parents=True, exist_ok=True)
    result = run(sizes, data_dir, args.memory_limit)
    from bigpanel.files import write_text

    write_text(args.out, json.dumps(result, indent=2))
    plot(result, Path(args.png))
    console = Console(width=160)
    console.print(table(result))
    console.print(json.dumps(result["summary"], indent=2))


if __name__ == "__main__":
    main()
