"""Speed and memory of a fit on the panel shapes users have, against a plain scan and a plain numpy fit.

    python benchmarks/run.py                      # 10M, 50M and 200M rows of every shape (about 40 minutes)
    python benchmarks/run.py --sizes 1e7          # a quick look
    python benchmarks/run.py --configs bootstrap --sizes 1e7,5e7   # the wild bootstrap's cost at 50 clusters

Panels (all invented, generated once and cached under benchmarks/data/):

* demo: the retail demo, store x product x week (pairs of levels compress);
* store-week: one row per store and week (shape a);
* store-week-supplier: the same plus a supplier effect of ~1,000 levels across rows (shape b);
* staff: employee x store x year with job spells (shape c);
* store-week-region: store-week with 50 regions as clusters (the ``bootstrap`` group).
* store-week-iv: store-week with log_price endogenous and two cost shifters as its
  instruments (group ``iv``: the IV fit beside the within fit with the same effects).

Every measurement runs in a fresh child process (bigpanel.bench.measure): wall time
inside the child, peak resident memory of the child. "scan" is one plain DuckDB
aggregate pass over the same columns (ratios use the fastest scan of the same columns
in the run: the first scan of a file may include reading it from disk); "fit" is bigpanel with ``--memory-limit`` and a
spill folder; "numpy" is benchmarks/plain_numpy.py (pyarrow load, dictionary codes,
bincount alternating projections), run where it fits in memory and time. Writes
benchmarks/results.json, results.md (the table) and results.png and prints the table.
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

import event_study
import plain_numpy
from bigpanel import __version__
from bigpanel.bench import measure
from bigpanel.demo import write_demo
from bigpanel.shapes import COUNT_FORMULA, IV_INSTRUMENTS, SHAPES, write_shape

HERE = Path(__file__).resolve().parent
DEMO_FORMULA = "log_units ~ log_price + promo"
BOOTSTRAP = {"wild_bootstrap": True, "draws": 9_999, "seed": 1}
POISSON = {"model": "poisson"}  # Poisson pseudo-maximum likelihood (the count outcome of POISSON_FORMULAS)
IV = {"endogenous": ["log_price"], "instruments": list(IV_INSTRUMENTS)}  # 2SLS on the panel's cost shifters
# (panel, effects, cluster column or None[, more fit options]): the configurations measured at every size, by group.
CONFIGS = {
    "main": [
        ("demo", ["store"], None),
        ("demo", ["store"], "store"),
        ("demo", ["store", "product", "week"], "store"),
        ("store-week", ["store", "week"], None),
        ("store-week", ["store", "week"], "store"),
        ("store-week-supplier", ["store", "week", "supplier"], None),
        ("store-week-supplier", ["store", "week", "supplier"], "store"),
        ("staff", ["employee", "store", "year"], "employee"),
    ],
    "one-way": [  # one effect on a panel without missing values: the one-pass fit
        ("store-week", ["store"], None),
        ("store-week", ["store"], "store"),
    ],
    "bootstrap": [  # 50 clusters, each fit without and with 9,999 wild bootstrap draws (Rademacher weights, the
        # default above 12 clusters); store effects nested in the regions (no pass: the draws only), then week
        # effects cutting across them (the exact treatment's pass for the per (cluster, level) sums; Sigma from the
        # row codes' link tables)
        ("store-week-region", ["store"], "region"),
        ("store-week-region", ["store"], "region", BOOTSTRAP),
        ("store-week-region", ["store", "week"], "region"),
        ("store-week-region", ["store", "week"], "region", BOOTSTRAP),
        # the demo's 12 regions: products and weeks cut across them, on pair tables (no pair pass)
        ("demo", ["store", "product", "week"], "region"),
        ("demo", ["store", "product", "week"], "region", BOOTSTRAP),
    ],
    "iv": [  # instrumental variables beside the within fit with the same effects (target: IV <= 1.3 x within)
        ("store-week-iv", ["store", "week"], None),
        ("store-week-iv", ["store", "week"], None, IV),
        ("store-week-iv", ["store", "week"], "store"),
        ("store-week-iv", ["store", "week"], "store", IV),
    ],
    "event": [  # the event study by imputation against the within fit on the same rows (issue 18)
        ("store-week-adoption", ["store", "week"], None),
    ],
    "row-codes": [  # the row-codes configurations of the main group but staff (a rerun after a fix)
        ("store-week", ["store", "week"], None),
        ("store-week", ["store", "week"], "store"),
        ("store-week-supplier", ["store", "week", "supplier"], None),
        ("store-week-supplier", ["store", "week", "supplier"], "store"),
    ],
    "staff": [  # job spells alone (shape c), for its slope of log time on log rows
        ("staff", ["employee", "store", "year"], "employee"),
    ],
    "poisson": [  # the Poisson fit against the linear fit with the same effects on the same panel
        ("store-week-counts", ["store", "week"], None),
        ("store-week-counts", ["store", "week"], None, POISSON),
        ("store-week-counts", ["store", "week"], "store", POISSON),
        ("demo", ["store", "product", "week"], "store"),
        ("demo", ["store", "product", "week"], "store", POISSON),
    ],
}
POISSON_FORMULAS = {"store-week-counts": COUNT_FORMULA, "demo": "{round(exp(log_units))} ~ log_price + promo"}
NUMPY_BYTES_PER_ROW = 200  # peak of the plain numpy fit, measured about 150 B/row at 10M rows
NUMPY_MAX_ROWS = {"staff": 10_000_000}  # slow to converge by plain alternating projections


def machine() -> dict:
    mem = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    cpu = next((line.split(":", 1)[1].strip() for line in open("/proc/cpuinfo") if line.startswith("model name")), "")
    return {"cores": os.cpu_count(), "memory_gib": round(mem / 2**30, 1), "cpu": cpu,
            "python": platform.python_version()}


def panel_file(name: str, rows: int, data_dir: Path) -> str:
    path = data_dir / f"{name}_{rows}.parquet"
    if not path.exists():
        start = time.perf_counter()
        write_demo(str(path), rows=rows) if name == "demo" else write_shape(str(path), name, rows)
        print(f"generated {name} with {rows:,} rows in {time.perf_counter() - start:.1f} s", file=sys.stderr)
    return str(path)


def formula(name: str, model: str = "linear") -> str:
    if model == "poisson":
        return POISSON_FORMULAS[name]
    return DEMO_FORMULA if name == "demo" else SHAPES[name].formula


def model_of(config: tuple, path: str) -> dict:
    """The fit's keywords for a configuration (its more options included: the scan reads the same columns)."""
    name, fe, cluster, *more = config
    options = more[0] if more else {}
    return {"source": path, "formula": formula(name, options.get("model", "linear")), "fe": fe, "cluster": cluster,
            **options}


def _record(rows: int, config: tuple, what: str, out: dict) -> dict:
    name, fe, cluster, *more = config
    rec = {"rows": rows, "panel": name, "effects": fe, "cluster": cluster, "what": what, "ok": out["ok"]}
    if more:
        rec["options"] = more[0]
    rec["load_before"] = round(os.getloadavg()[0], 2)
    if not out["ok"]:
        rec["error"] = out["error"]
        return rec
    res = out["result"]
    rec.update(seconds=out["seconds"], peak_mb=out["peak_mb"], nobs=res["nobs"],
               raw_passes=res.get("raw_passes", res.get("solver", {}).get("raw_passes")))
    if what != "scan":
        rec["coefficients"] = {n: c["estimate"] for n, c in res["coefficients"].items()}
        rec["iterations"] = res["solver"]["iterations"]
    if what == "fit" and "bootstrap" in res:
        rec["bootstrap_seconds"] = res["bootstrap"]["seconds"]
    if what in ("fit", "event"):
        s = res["solver"]
        rec.update(strategy=s["strategy"]["name"], reason=s["strategy"]["reason"], converged=s["converged"],
                   cross_products_from=s.get("cross_products_from"),
                   python_bytes=s.get("largest_python_allocation_bytes"), timings=res.get("timings"))
    return rec


def run(sizes: list[int], data_dir: Path, memory_limit: str, large: list[int], group: str = "main",
        repeat: int = 1) -> dict:
    """Every configuration of ``group`` at every size, then its store-week ones at the ``large`` sizes;
    each measurement ``repeat`` times in a row (the tables take the fastest)."""
    spill = data_dir / "spill"
    total_memory = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    records = []
    plan = [(rows, config) for rows in sizes for config in CONFIGS[group]]
    plan += [(rows, config) for rows in large for config in CONFIGS[group] if config[0] == "store-week"]
    for rows, config in plan:
        name, fe, cluster, *more = config
        path = panel_file(name, rows, data_dir)
        model = model_of(config, path)
        steps = [("scan", model, None),
                 ("fit", {**model, "memory_limit": memory_limit, "temp_dir": str(spill)}, None)]
        fits_memory = rows * NUMPY_BYTES_PER_ROW < 0.7 * total_memory
        if group == "event":  # the event study right after the within fit of the same model
            steps.append(("event", steps[1][1], event_study.fit))
        elif (cluster is None or name == "staff") and not more:  # slopes only: one numpy fit per panel and effects
            if fits_memory and rows <= NUMPY_MAX_ROWS.get(name, rows):
                steps.append(("numpy", model, plain_numpy.fit))
        for _ in range(repeat):
            for what, m, runner in steps:
                out = measure("scan" if what == "scan" else "duckdb", m, runner)
                rec = _record(rows, config, what, out)
                records.append(rec)
                print(json.dumps({k: v for k, v in rec.items() if k not in ("coefficients", "timings")}),
                      file=sys.stderr)
    return {"bigpanel_version": __version__, "machine": machine(), "memory_limit": memory_limit,
            "records": records, "summary": summarise(records)}


def _key(rec: dict) -> str:
    cl = f", cluster {rec['cluster']}" if rec["cluster"] else ""
    options = rec.get("options", {})
    extra = (f", wild bootstrap {options['draws']:,}" if "wild_bootstrap" in options else ", IV" if "endogenous" in options
             else f", {options['model']}" if "model" in options else "")
    what = ", event study" if rec["what"] == "event" else ""
    return f"{rec['panel']}: {' + '.join(rec['effects'])}{cl}{extra}{what}"


def reads_instruments(rec: dict) -> bool:
    """Whether a record's model reads the instrument columns (an IV configuration)."""
    return "endogenous" in rec.get("options", {})


def warm_scan(records: list[dict], rec: dict) -> dict | None:
    """The fastest scan of the same columns (same panel, size and effects): the first scan of a
    file may include reading it from disk, which the fits after it do not pay."""
    scans = [r for r in records if r["ok"] and r["what"] == "scan" and r["rows"] == rec["rows"]
             and r["panel"] == rec["panel"] and r["effects"] == rec["effects"] and reads_instruments(r) == reads_instruments(rec)]
    return min(scans, key=lambda r: r["seconds"]) if scans else None


def summarise(records: list[dict]) -> dict:
    """Ratios to the (warm) scan, the numpy fit over the bigpanel fit, slope differences from
    numpy, and log-log slopes of time on rows (10M and up)."""
    ok = [r for r in records if r["ok"]]

    def find(rows: int, key: str, what: str) -> dict | None:
        found = [r for r in ok if r["rows"] == rows and _key(r) == key and r["what"] == what]
        best = min(found, key=lambda r: r["seconds"]) if found else None
        return warm_scan(ok, best) if best is not None and what == "scan" else best

    def numpy_of(rows: int, rec: dict) -> dict | None:
        return next((r for r in ok if r["rows"] == rows and r["what"] == "numpy" and r["panel"] == rec["panel"]
                     and r["effects"] == rec["effects"] and not rec.get("options")), None)

    out: dict = {"ratio_to_scan": {}, "numpy_over_fit": {}, "max_rel_slope_diff_vs_numpy": {}, "loglog_slope": {},
                 "iv_over_within": {}, "event_over_within": {},
                 "poisson_over_linear": {}}
    keys = list(dict.fromkeys(_key(r) for r in ok if r["what"] in ("fit", "event")))
    sizes = sorted({r["rows"] for r in ok})
    for key in keys:
        for rows in sizes:
            what = "event" if key.endswith("event study") else "fit"
            scan, fit = find(rows, key.removesuffix(", event study"), "scan"), find(rows, key, what)
            if what == "event" and fit:
                within = find(rows, key.removesuffix(", event study"), "fit")
                if within:
                    out["event_over_within"][f"{key} @ {rows:,}"] = round(fit["seconds"] / within["seconds"], 2)
            label = f"{key} @ {rows:,}"
            if scan and fit:
                out["ratio_to_scan"][label] = round(fit["seconds"] / scan["seconds"], 2)
            within = find(rows, key.removesuffix(", IV"), "fit") if key.endswith(", IV") else None
            if fit and within:
                out["iv_over_within"][label] = round(fit["seconds"] / within["seconds"], 3)
            ref = numpy_of(rows, fit) if fit else None
            if fit and ref:
                out["numpy_over_fit"][label] = round(ref["seconds"] / fit["seconds"], 2)
                diffs = [abs(fit["coefficients"][n] - b) / abs(b) for n, b in ref["coefficients"].items()]
                out["max_rel_slope_diff_vs_numpy"][label] = float(max(diffs))
            linear = min((r for r in ok if fit and fit.get("options", {}).get("model") == "poisson"
                          and r["what"] == "fit" and r["rows"] == rows and r["panel"] == fit["panel"]
                          and r["effects"] == fit["effects"] and not r.get("options")),
                         key=lambda r: r["seconds"], default=None)
            if linear:  # the best Poisson fit over the best linear fit with the same effects on the same panel
                out["poisson_over_linear"][label] = round(fit["seconds"] / linear["seconds"], 2)
        pts = [(rows, find(rows, key, "event" if key.endswith("event study") else "fit")) for rows in sizes
               if rows >= 10_000_000]
        pts = [(r, f["seconds"]) for r, f in pts if f]
        if len(pts) >= 2:
            x, y = np.log([p[0] for p in pts]), np.log([p[1] for p in pts])
            out["loglog_slope"][key] = round(float(np.polyfit(x, y, 1)[0]), 3)
    out.update(bootstrap_overhead(ok))
    return out


def bootstrap_overhead(ok: list[dict]) -> dict:
    """For each fit with the wild bootstrap, the time it adds to the same fit without: the share of
    the plain fit's time, in total and for the bootstrap step alone (its draws and its passes)."""
    out: dict = {}
    for rec in ok:
        if rec["what"] != "fit" or "bootstrap_seconds" not in rec:
            continue
        plain = next((r for r in ok if r["what"] == "fit" and "options" not in r and r["rows"] == rec["rows"]
                      and r["panel"] == rec["panel"] and r["effects"] == rec["effects"]
                      and r["cluster"] == rec["cluster"]), None)
        if plain:
            out[f"{_key(rec)} @ {rec['rows']:,}"] = {
                "added_share": round(rec["seconds"] / plain["seconds"] - 1, 3),
                "bootstrap_step_share": round(rec["bootstrap_seconds"] / plain["seconds"], 3)}
    return {"bootstrap_overhead": out} if out else {}


def table(result: dict) -> Table:
    t = Table(title=f"bigpanel {result['bigpanel_version']}: fit vs plain scan and plain numpy fit", title_justify="left")
    for col in ("rows", "model", "scan s", "fit s", "x scan", "fit peak MiB", "passes", "strategy",
                "numpy s", "numpy peak MiB"):
        t.add_column(col, justify="left" if col in ("model", "strategy") else "right")
    recs = result["records"]
    for rows in sorted({r["rows"] for r in recs}):
        for key in dict.fromkeys(_key(r) for r in recs if r["what"] in ("fit", "event")):
            got = [r for r in recs if r["rows"] == rows and _key(r) == key and r["what"] in ("fit", "event")]
            fit = min([r for r in got if r["ok"]], key=lambda r: r["seconds"], default=got[0] if got else None)
            scan = warm_scan(recs, fit) if fit is not None else None
            ref = next((r for r in recs if r["rows"] == rows and r["what"] == "numpy" and fit and not fit.get("options")
                        and r["panel"] == fit["panel"] and r["effects"] == fit["effects"]), None)
            if fit is None:
                continue

            def secs(r: dict | None) -> str:
                return "-" if r is None else f"{r['seconds']:.2f}" if r["ok"] else r["error"][:24]

            good = fit["ok"] and scan and scan["ok"]
            t.add_row(f"{rows:,}", key, secs(scan), secs(fit), f"{fit['seconds'] / scan['seconds']:.1f}" if good else "",
                      f"{fit['peak_mb']:,.0f}" if fit["ok"] else "", str(fit.get("raw_passes", "")),
                      fit.get("strategy", ""), secs(ref) if ref else "",
                      f"{ref['peak_mb']:,.0f}" if ref and ref["ok"] else "")
    return t


def markdown(result: dict) -> str:
    """The table as Markdown (the README's performance table is pasted from it)."""
    t = table(result)
    heads = [str(c.header) for c in t.columns]
    cells = [list(c.cells) for c in t.columns]
    lines = ["| " + " | ".join(heads) + " |", "|" + "---|" * len(heads)]
    lines += ["| " + " | ".join(str(col[i]) for col in cells) + " |" for i in range(len(cells[0]))]
    return "\n".join(lines) + "\n"


def plot(result: dict, path: Path) -> None:
    from bigpanel.output.plots import pyplot, save_figure

    plt = pyplot()
    fig, (ax_t, ax_m) = plt.subplots(1, 2, figsize=(12, 4.6))
    colours = ["#3b7d8c", "#c46a2f", "#6b8e23", "#7a5195", "#ef5675", "#ffa600", "#2f4b7c", "#888888"]
    recs = [r for r in result["records"] if r["ok"]]
    for colour, key in zip(colours, dict.fromkeys(_key(r) for r in recs if r["what"] == "fit")):
        for what, line in (("fit", "-"), ("scan", ":")):
            pts = sorted((r["rows"], r["seconds"], r["peak_mb"]) for r in recs if _key(r) == key and r["what"] == what)
            if not pts:
                continue
            rows, secs, peak = zip(*pts)
            ax_t.plot(rows, secs, line, color=colour, marker="o", label=key if what == "fit" else None)
            if what == "fit":
                ax_m.plot(rows, [p / 1024 for p in peak], line, color=colour, marker="o", label=key)
    for ax, ylabel in ((ax_t, "wall time (s); dotted: plain scan"), (ax_m, "peak resident memory of the fit (GiB)")):
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("rows")
        ax.set_ylabel(ylabel)
        ax.grid(True, which="both", alpha=0.3)
    ax_m.axhline(6.0, color="#aa3333", linewidth=0.8)
    ax_m.text(1.1e7, 6.3, "6 GiB", color="#aa3333", fontsize=8)
    ax_t.legend(fontsize=6.5)
    m = result["machine"]
    fig.suptitle(f"bigpanel fit by panel shape ({m['cores']} cores, {m['memory_gib']} GiB, "
                 f"--memory-limit {result['memory_limit']})", fontsize=10)
    save_figure(fig, path)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--sizes", default="1e7,5e7,2e8", help="comma-separated row counts")
    parser.add_argument("--data-dir", default=str(HERE / "data"), help="cache of generated panels")
    parser.add_argument("--memory-limit", default="4GB", help="DuckDB memory limit of the fit")
    parser.add_argument("--large", default="", help="comma-separated row counts for the store-week panel alone")
    parser.add_argument("--configs", default="main", choices=list(CONFIGS), help="which group of configurations")
    parser.add_argument("--out", default=str(HERE / "results.json"))
    parser.add_argument("--png", default=str(HERE / "results.png"))
    parser.add_argument("--again", metavar="JSON", help="redo the summary, table and plot of an earlier run")
    parser.add_argument("--repeat", type=int, default=1, help="run every measurement this many times in a row")
    args = parser.parse_args()
    if args.again:
        result = json.loads(Path(args.again).read_text())
        result["summary"] = summarise(result["records"])
    else:
        sizes = [int(float(s)) for s in args.sizes.split(",")]
        data_dir = Path(args.data_dir)
        data_dir.mkdir(parents=True, exist_ok=True)
        large = [int(float(s)) for s in args.large.split(",") if s]
        result = run(sizes, data_dir, args.memory_limit, large, args.configs, args.repeat)
    from bigpanel.output.files import write_text

    write_text(args.out, json.dumps(result, indent=2))
    plot(result, Path(args.png))
    write_text(Path(args.out).with_suffix(".md"), markdown(result))
    console = Console(width=200)
    console.print(table(result))
    console.print(json.dumps(result["summary"], indent=2))


if __name__ == "__main__":
    main()
