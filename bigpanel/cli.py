"""The ``bigpanel`` command: a thin layer over the Python API."""

from __future__ import annotations

import contextlib
import sys
import traceback
from pathlib import Path
from typing import Iterator, List, Optional

import typer
from rich.console import Console

from .demo import write_demo
from .errors import BigPanelError
from .files import write_parquet, write_text
from .estimate import fit as run_fit
from .report import fit_renderable

app = typer.Typer(
    help=(
        "Fixed-effects (within) regressions on panels too big for memory. The data stay in "
        "DuckDB; only small matrices reach Python.\n\n"
        "Example:  bigpanel demo sales.parquet --rows 1000000  then  "
        "bigpanel fit sales.parquet 'log_units ~ log_price + promo' --fe store --fe week --cluster store"
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
out = Console()
if not out.is_terminal:
    out = Console(width=120)
err = Console(stderr=True, soft_wrap=True)


@contextlib.contextmanager
def guarded(debug: bool) -> Iterator[None]:
    """Turn errors into one line on stderr and an exit code (2: user error, 1: bug, 130: interrupt)."""
    try:
        yield
    except typer.Exit:
        raise
    except BigPanelError as exc:
        if debug:
            traceback.print_exc()
        err.print(f"[bold red]bigpanel: error:[/] {exc}", highlight=False)
        raise typer.Exit(2) from None
    except KeyboardInterrupt:
        err.print("bigpanel: interrupted; nothing was written")
        raise typer.Exit(130) from None
    except Exception as exc:  # noqa: BLE001 - the last line of defence against tracebacks
        if debug:
            traceback.print_exc()
        err.print(f"[bold red]bigpanel: internal error:[/] {type(exc).__name__}: {exc} (rerun with --debug)")
        raise typer.Exit(1) from None


@contextlib.contextmanager
def progress(quiet: bool) -> Iterator:
    """A status line naming the current pass, on a terminal only."""
    if quiet or not err.is_terminal:
        yield None
        return
    with err.status("starting", spinner="dots") as status:
        yield lambda label: status.update(label)


def _safe_name(name: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in name)


@app.command("fit")
def fit_command(
    source: str = typer.Argument(..., help="Parquet file, folder or glob; CSV file; or DuckDB file with --table."),
    formula: Optional[str] = typer.Argument(None, help="Model as 'y ~ x1 + x2' (or use --y and --x)."),
    y: Optional[str] = typer.Option(None, "--y", help="Outcome column."),
    x: Optional[List[str]] = typer.Option(None, "--x", help="Regressor column; repeat for more."),
    fe: List[str] = typer.Option(..., "--fe", help="Fixed-effect column; repeat for more; 'a:b' is one effect per pair."),
    cluster: Optional[str] = typer.Option(None, "--cluster", help="Cluster column for cluster-robust (CR1) errors."),
    vcov: Optional[str] = typer.Option(None, "--vcov", help="iid, hc1 or cluster (default: cluster if --cluster, else iid)."),
    where: Optional[str] = typer.Option(None, "--where", help="Row filter: one SQL boolean expression over the source's columns."),
    table: Optional[str] = typer.Option(None, "--table", help="Table name inside a DuckDB database file."),
    json_out: bool = typer.Option(False, "--json", help="Print the full result as one JSON object instead of the table."),
    save: Optional[Path] = typer.Option(None, "--save", help="Also store the full result as JSON in this file."),
    effects_out: Optional[Path] = typer.Option(None, "--effects-out", help="Folder for the estimated effects, one Parquet file per effect."),
    tol: float = typer.Option(1e-8, "--tol", help="Tolerance on the relative change of the demeaned columns."),
    max_iter: int = typer.Option(10_000, "--max-iter", help="Limit on accelerated projection iterations."),
    keep_singletons: bool = typer.Option(False, "--keep-singletons", help="Keep rows alone in a fixed-effect level."),
    memory_limit: Optional[str] = typer.Option(None, "--memory-limit", help="DuckDB memory limit, e.g. 2GB; beyond it DuckDB spills."),
    temp_dir: Optional[str] = typer.Option(None, "--temp-dir", help="Folder where DuckDB spills when over the memory limit."),
    threads: Optional[int] = typer.Option(None, "--threads", help="DuckDB worker threads (default: all cores)."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="No progress display."),
    debug: bool = typer.Option(False, "--debug", help="Show the traceback of an error."),
) -> None:
    """Fit a within (fixed-effects) regression and report slopes, errors and diagnostics.

    Example: bigpanel fit sales.parquet 'log_units ~ log_price + promo' --fe store --fe product --fe week --cluster store
    """
    with guarded(debug):
        with progress(quiet or json_out) as on_step:
            res = run_fit(
                source,
                formula,
                y=y,
                x=x or None,
                fe=fe,
                cluster=cluster,
                vcov=vcov,
                where=where,
                table=table,
                tol=tol,
                max_iter=max_iter,
                drop_singletons=not keep_singletons,
                memory_limit=memory_limit,
                temp_dir=temp_dir,
                threads=threads,
                on_step=on_step,
            )
        if save is not None:
            write_text(save, res.to_json())
        if effects_out is not None:
            for name, tab in res.effects.items():
                write_parquet(Path(effects_out) / f"effects_{_safe_name(name)}.parquet", tab)
        if json_out:
            sys.stdout.write(res.to_json() + "\n")
        else:
            out.print(fit_renderable(res))
            if effects_out is not None:
                summ = res.effects_summary()
                for name, s in summ.items():
                    out.print(
                        f"effects of {name}: {s['levels']:,} levels, mean {s['mean']:.4g}, sd {s['sd'] or 0:.4g}, "
                        f"min {s['min']:.4g}, max {s['max']:.4g} -> {effects_out}/effects_{_safe_name(name)}.parquet",
                        highlight=False,
                    )
        if not res.solver["converged"]:
            raise typer.Exit(3)


@app.command("demo")
def demo_command(
    out_path: Path = typer.Argument(..., help="Parquet file to write."),
    rows: int = typer.Option(1_000_000, "--rows", help="Number of store-product-week rows."),
    seed: int = typer.Option(7, "--seed", help="Seed of the pseudo-random draws."),
    debug: bool = typer.Option(False, "--debug", help="Show the traceback of an error."),
) -> None:
    """Write an invented retail panel (stores x products x weeks) with known coefficients.

    Example: bigpanel demo sales.parquet --rows 10000000
    """
    with guarded(debug):
        panel = write_demo(str(out_path), rows=rows, seed=seed)
        out.print(
            f"wrote {panel.rows:,} rows to {panel.path}: {panel.stores:,} stores x {panel.products:,} products x "
            f"{panel.weeks} weeks (last store partial)\n"
            "columns: store, product, week, region, shelf_m2, promo, log_price (0.1% missing), log_units\n"
            "true model: log_units = 2 "
            + " ".join(f"{'+' if b >= 0 else '-'} {abs(b)} {n}" for n, b in panel.coefficients.items())
            + " + store + product + week effects + noise",
            highlight=False,
        )


def main() -> None:
    """Console-script entry point."""
    app()
