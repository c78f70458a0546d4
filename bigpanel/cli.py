"""The ``bigpanel`` command: a thin layer over the Python API."""

from __future__ import annotations

import contextlib
import enum
import functools
import inspect
import json
import signal
import sys
import traceback
from pathlib import Path
from typing import Callable, Iterator, List, Optional

import typer
from typer.core import TyperArgument, TyperGroup
from rich import box
from rich.console import Console
from rich.table import Table
from rich.text import Text

from .command import interrupted
from .engines.registry import ENGINES
from .errors import BigPanelError
from .options import BOOTSTRAP_WEIGHTS, ESTIMATORS, MODELS, SINGLETONS, VARIANCE_TYPES
from .output.tables import RENDERERS

# Only typer, rich and the light modules above load at start: the commands import the
# numerics (numpy, scipy, duckdb, pyarrow, sqlglot) when they run, so --help and usage
# errors answer at once (tests/test_cli.py checks sys.modules).

SOURCE_HELP = "Parquet file, folder or glob; CSV file; DuckDB file or postgresql:// URL with --table."
DELIMITER_HELP = "Field separator of a CSV source, e.g. ';' or tab (default: comma; tab for .tsv)."
TABLE_HELP = (
    "Table to read: in a DuckDB database file, in PostgreSQL (SOURCE a postgresql:// URL; schema.table allowed) "
    "or in the Spark catalog (with --engine spark)."
)
ENGINE_HELP = ("Where the passes run: duckdb (default for files), postgresql (default for a postgresql:// URL), "
               "spark (Spark SQL) or memory (load the used columns into numpy).")
SPARK_MASTER_HELP = "Spark master URL for --engine spark (default local[*])."
REMOTE_HELP = ("Read a remote Parquet SOURCE (s3://, gs://, https://, ...) through DuckDB's httpfs extension; "
               "without it such a source is refused before any network access.")
# options of earlier versions, with what replaced them (the tool is pre-1.0: no aliases)
RENAMED = {"--vcov": "--variance classical|hc1|cr1", "--keep-singletons": "--singletons keep"}


def _choices(name: str, values: object) -> type[enum.Enum]:
    """An enumeration of ``values``, so that the help lists them and typer refuses any other."""
    return enum.Enum(name, {str(v): str(v) for v in values}, type=str)  # type: ignore[return-value]


Variance = _choices("Variance", VARIANCE_TYPES)
Singletons = _choices("Singletons", SINGLETONS)
Estimator = _choices("Estimator", ESTIMATORS)
Model = _choices("Model", MODELS)
MODEL_HELP = ("linear (default) or poisson: Poisson pseudo-maximum likelihood, E[y] = exp(x'b + effects), for an "
              "outcome that is never negative (counts, trade flows, sales with zeros); robust (hc1) errors by default.")
EXPONENTIATE_HELP = "With --model poisson: add exp(effect), the factor by which each level multiplies the mean."
EngineName = _choices("EngineName", ENGINES)
TableFormat = _choices("TableFormat", RENDERERS)
BootstrapWeights = _choices("BootstrapWeights", BOOTSTRAP_WEIGHTS)


def _plain_argument(param: TyperArgument) -> None:
    """Show a positional argument as its metavar alone: no ``<str>`` type after it in the help,
    and ``SOURCE`` (``[FORMULA]`` when optional, ``FILE.json...`` when repeated) in the usage line."""
    name = param.metavar or param.name.upper()
    shown = (name if param.required else f"[{name}]") + ("..." if param.nargs != 1 else "")
    param.display_type_rich = lambda ctx: None  # type: ignore[method-assign]
    param._usage_display_name = lambda: shown  # type: ignore[method-assign]


class OneLineErrors(TyperGroup):
    """Usage mistakes (unknown command or option, bad or missing value) as one line on stderr, exit 2;
    positional arguments shown by their names alone (:func:`_plain_argument`)."""

    def get_command(self, ctx: object, cmd_name: str) -> object:
        cmd = super().get_command(ctx, cmd_name)
        for param in getattr(cmd, "params", []):
            if isinstance(param, TyperArgument):
                _plain_argument(param)
        return cmd

    def main(self, *args: object, standalone_mode: bool = True, **kwargs: object) -> object:
        if not standalone_mode:
            return super().main(*args, standalone_mode=False, **kwargs)
        try:
            code = super().main(*args, standalone_mode=False, **kwargs)
        except typer.Abort:
            err.print("bigpanel: aborted")
            sys.exit(1)
        except Exception as exc:  # noqa: BLE001 - click's usage errors carry exit_code 2
            if not hasattr(exc, "format_message") or getattr(exc, "exit_code", None) != 2:
                raise
            name = getattr(exc, "option_name", None)
            message = f"{name} is no longer an option: use {RENAMED[name]}" if name in RENAMED else exc.format_message()
            err.print(f"[bold red]bigpanel: error:[/] {' '.join(message.split())} (see --help)", highlight=False)
            sys.exit(2)
        sys.exit(code if isinstance(code, int) else 0)


app = typer.Typer(
    cls=OneLineErrors,
    help=(
        "Fixed-effects (within) regressions on panels too big for memory. The data stay in "
        "DuckDB; only small matrices reach Python.\n\n"
        "Example:  bigpanel demo sales.parquet --rows 1000000  then  "
        "bigpanel fit sales.parquet 'log_units ~ log_price + promo' --fe store --fe week --cluster store"
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,  # plain help: option, value placeholder (COL, N, the choices) and text
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
        err.print(Text("bigpanel: error: ", style="bold red") + Text(str(exc)), highlight=False)
        raise typer.Exit(2) from None
    except KeyboardInterrupt:
        err.print("bigpanel: interrupted; nothing was written")
        raise typer.Exit(130) from None
    except Exception as exc:  # noqa: BLE001 - the last line of defence against tracebacks
        if debug:
            traceback.print_exc()
        err.print(Text("bigpanel: internal error: ", style="bold red")
                  + Text(f"{type(exc).__name__}: {exc} (rerun with --debug)"))
        raise typer.Exit(1) from None


@contextlib.contextmanager
def progress(quiet: bool) -> Iterator:
    """A status line on a terminal only: the current step (passes over the rows numbered), the
    running query's percent when the engine knows it, and the elapsed time (see bigpanel.progress)."""
    if quiet or not err.is_terminal:
        yield None
        return
    import threading

    from .progress import PassProgress

    with err.status(Text("starting"), spinner="dots") as status:
        line = PassProgress(lambda text: status.update(Text(text)))
        refresher = threading.Thread(target=line.run, daemon=True)
        refresher.start()
        try:
            yield line
        finally:
            line.stop()
            refresher.join()


def _effect_files(folder: Path, names: list[str]) -> dict[str, Path]:
    """One Parquet file per effect in ``folder``, names made unique (``a b`` and ``a_b`` differ)."""
    from .output.files import unique_stems

    return {name: folder / f"{stem}.parquet" for name, stem in unique_stems(names, "effects_").items()}


def _check_outputs(model: dict, files: dict[str, Optional[Path]], effects_dir: Optional[Path]) -> None:
    """Check every output path before the first pass (``-`` is stdout); see :func:`check_output`."""
    from .output.files import check_output, input_files

    inputs = input_files(str(model["source"]))
    for role, path in files.items():
        if path is not None and str(path) != "-":
            check_output(path, role, inputs)
    if effects_dir is not None:
        check_output(effects_dir, "effects folder", inputs, folder=True)
        for path in _effect_files(effects_dir, [str(t) for t in model["fe"]]).values():
            check_output(path, "effects file", inputs)


def _model_options(
    source: str = typer.Argument(
        ..., help=SOURCE_HELP, metavar="SOURCE"
    ),
    formula: Optional[str] = typer.Argument(
        None, help="Model as 'y ~ x1 + x2' (or use --y and --x).", metavar="FORMULA"
    ),
    y: Optional[str] = typer.Option(None, "--y", help="Outcome column.", metavar="COL"),
    x: Optional[List[str]] = typer.Option(None, "--x", help="Regressor column; repeat for more.", metavar="COL"),
    fe: List[str] = typer.Option(
        ..., "--fe", help="Fixed-effect column; repeat for more; 'a:b' is one effect per pair.", metavar="COL"
    ),
    cluster: Optional[List[str]] = typer.Option(
        None, "--cluster", help="Cluster column for cluster-robust (CR1) errors; repeat for multi-way clustering.",
        metavar="COL",
    ),
    variance: Optional[Variance] = typer.Option(
        None, "--variance",
        help="Standard errors: classical, hc1 (robust to unequal variances) or cr1 (cluster-robust; "
        "implied by --cluster).",
    ),
    where: Optional[str] = typer.Option(
        None, "--where", help="Row filter: one SQL boolean expression over the source's columns.", metavar="EXPR"
    ),
    table: Optional[str] = typer.Option(
        None, "--table", help=TABLE_HELP, metavar="NAME"
    ),
    tol: Optional[float] = typer.Option(
        None, "--tol", help="Tolerance on the relative change of the demeaned columns (default 1e-8).", metavar="X"
    ),
    max_iter: Optional[int] = typer.Option(
        None, "--max-iter", help="Limit on accelerated projection iterations (default 10000).", metavar="N"
    ),
    singletons: Optional[Singletons] = typer.Option(
        None, "--singletons", help="Rows alone in a level of some fixed effect: drop (default) or keep."
    ),
    memory_limit: Optional[str] = typer.Option(
        None, "--memory-limit", help="DuckDB memory limit, e.g. 2GB; beyond it DuckDB spills.", metavar="SIZE"
    ),
    cell_budget: Optional[str] = typer.Option(
        None, "--python-memory", metavar="SIZE",
        help="Budget for the pair tables or row codes held in numpy (default a quarter of RAM); over it the "
             "projections run in the engine.",
    ),
    temp_dir: Optional[str] = typer.Option(
        None, "--temp-dir", help="Folder where DuckDB spills when over the memory limit.", metavar="DIR"
    ),
    threads: Optional[int] = typer.Option(
        None, "--threads", help="DuckDB worker threads (default: all cores).", metavar="N"
    ),
    delimiter: Optional[str] = typer.Option(None, "--delimiter", help=DELIMITER_HELP, metavar="CHAR"),
    allow_remote: bool = typer.Option(False, "--allow-remote", help=REMOTE_HELP, metavar=""),
    debug: bool = typer.Option(False, "--debug", help="Show the traceback of an error.", metavar=""),
) -> None:
    """The model options shared by every command that fits (their declarations live here once)."""


_SHARED = inspect.signature(_model_options).parameters


def model_command(*groups: Callable[..., None]) -> Callable[[Callable[..., None]], Callable[..., None]]:
    """Give ``fn(model, **own)`` the shared model options and those of the option ``groups`` (functions
    whose parameters declare them); ``model`` holds them all as ``bigpanel.fit`` keywords (an empty
    repeated option as None, a choice as its value)."""
    declared = [*_SHARED.values(), *(p for g in groups for p in inspect.signature(g).parameters.values())]
    names = [p.name for p in declared]

    def decorate(fn: Callable[..., None]) -> Callable[..., None]:
        own = [p for p in inspect.signature(fn).parameters.values() if p.name != "model"]

        @functools.wraps(fn)
        def wrapper(**kwargs: object) -> None:
            shared = {name: _plain(kwargs.pop(name)) for name in names}
            with guarded(bool(shared.pop("debug"))):
                if shared["temp_dir"]:
                    from .output.files import check_output, input_files

                    check_output(shared["temp_dir"], "--temp-dir", input_files(str(shared["source"])), folder=True)
                fn(model=shared, **{k: _plain(v) for k, v in kwargs.items()})

        params = declared + own
        wrapper.__signature__ = inspect.Signature(params)  # type: ignore[attr-defined]
        wrapper.__annotations__ = {p.name: p.annotation for p in params}
        return wrapper

    return decorate


def _plain(value: object) -> object:
    """A choice as its value, an empty repeated option as None (not given), anything else as it is."""
    if isinstance(value, enum.Enum):
        return value.value
    return None if isinstance(value, list) and not value else value


def _estimation_options(
    engine: Optional[EngineName] = typer.Option(None, "--engine", help=ENGINE_HELP),
    spark_master: Optional[str] = typer.Option(None, "--spark-master", help=SPARK_MASTER_HELP, metavar="URL"),
    estimator: Estimator = typer.Option(
        "within", "--estimator",
        help="within (fixed effects, default), between (unit means), first-difference or random-effects (GLS).",
    ),
    time: Optional[str] = typer.Option(
        None, "--time", help="Period column that orders rows within a unit (for --estimator first-difference).",
        metavar="COL",
    ),
    hausman: bool = typer.Option(
        False, "--hausman", help="With --estimator random-effects: Hausman test against the within fit.", metavar=""
    ),
    weights: Optional[str] = typer.Option(
        None, "--weights",
        help="Column of analytic weights (any estimator; prior weights with --model poisson); rows with a missing "
        "weight and with a zero or negative one are dropped and counted apart.",
        metavar="COL",
    ),
    endogenous: Optional[List[str]] = typer.Option(
        None, "--endogenous", metavar="COL",
        help="Endogenous regressor, instrumented by the --instrument columns (2SLS); repeat for more. Or in the "
        "formula: 'y ~ x + p, p instrumented by z1 + z2'.",
    ),
    instruments: Optional[List[str]] = typer.Option(
        None, "--instrument", metavar="COL",
        help="Excluded instrument for the --endogenous regressors; repeat for more.",
    ),
    liml: bool = typer.Option(
        False, "--liml", help="With instruments: LIML instead of 2SLS (better with many or weak instruments).",
        metavar="",
    ),
    irls_tol: Optional[float] = typer.Option(
        None, "--irls-tol", metavar="X",
        help="With --model poisson: stop when the deviance changes by less than X relative and no coefficient "
        "moves by more than X (default 1e-8).",
    ),
    irls_max_iter: Optional[int] = typer.Option(
        None, "--irls-max-iter", metavar="N", help="With --model poisson: at most N weighted fits (default 100).",
    ),
) -> None:
    """The options of ``fit`` that choose and configure the estimator (declared once; passed to ``bigpanel.fit``)."""


def _bootstrap_options(
    wild_bootstrap: bool = typer.Option(
        False, "--wild-bootstrap", metavar="",
        help="Add restricted wild cluster bootstrap p-values (null: slope = 0) to the CR1 t tests; needs --cluster.",
    ),
    draws: Optional[int] = typer.Option(
        None, "--draws", metavar="B",
        help="Bootstrap draws (default 9999); with Rademacher weights and 2^G <= B all 2^G sign vectors are used.",
    ),
    bootstrap_weights: Optional[BootstrapWeights] = typer.Option(
        None, "--bootstrap-weights", help="rademacher or webb (default: webb with 12 clusters or fewer)."
    ),
    seed: Optional[int] = typer.Option(
        None, "--seed", metavar="S", help="Seed of the bootstrap weights (default: drawn and reported)."
    ),
    test: Optional[List[str]] = typer.Option(
        None, "--test", metavar="NAME", help="Regressor to bootstrap; repeat for more (default: every slope)."
    ),
    bootstrap_interval: bool = typer.Option(
        False, "--bootstrap-interval", metavar="",
        help="Also a 95% interval for each tested slope by inverting the bootstrap test (about 50 bootstraps each).",
    ),
    bootstrap_cluster: Optional[str] = typer.Option(
        None, "--bootstrap-cluster", metavar="COL",
        help="With several --cluster columns, the one whose clusters are resampled (default: fewest clusters).",
    ),
) -> None:
    """The wild cluster bootstrap's options of ``fit`` (passed to ``bigpanel.fit``)."""


def _mean_options(
    model: Model = typer.Option("linear", "--model", help=MODEL_HELP),
    exponentiate: bool = typer.Option(False, "--exponentiate", help=EXPONENTIATE_HELP, metavar=""),
) -> None:
    """How the mean of y depends on the regressors and effects, and the effects' scale (fit and effects)."""


@app.command("fit")
@model_command(_estimation_options, _mean_options, _bootstrap_options)
def fit_command(
    model: dict,
    json_out: bool = typer.Option(
        False, "--json", help="Print the full result as one JSON object instead of the table.", metavar=""
    ),
    save: Optional[Path] = typer.Option(
        None, "--save", help="Also store the full result as JSON in this file.", metavar="FILE.json"
    ),
    effects_out: Optional[Path] = typer.Option(
        None, "--effects-out", help="Folder for the estimated effects, one Parquet file per effect.", metavar="DIR"
    ),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="No progress display.", metavar=""),
) -> None:
    """Fit a within (fixed-effects) regression, or with --model poisson a Poisson one, and report slopes, errors and
    diagnostics.

    Example: bigpanel fit sales.parquet 'log_units ~ log_price + promo' --fe store --fe product --fe week
    --cluster store
    """
    from .api import fit as run_fit
    from .output.files import parquet_writer, text_writer, write_all
    from .results.report import fit_renderable

    _check_outputs(model, {"--save": save}, effects_out)
    with progress(quiet or json_out) as on_step:
        res = run_fit(**model, on_step=on_step, effect_errors=effects_out is not None)
    files = _effect_files(Path(effects_out), list(res.effects)) if effects_out is not None else {}
    writers = [(files[name], parquet_writer(tab)) for name, tab in res.effects.items() if name in files]
    if save is not None and str(save) != "-":
        writers.insert(0, (Path(save), text_writer(res.to_json())))
    write_all(writers)
    if json_out or (save is not None and str(save) == "-"):
        sys.stdout.write(res.to_json() + "\n")
    if not json_out:
        out.print(fit_renderable(res))
        if effects_out is not None:
            for name, s in res.effects_summary().items():
                out.print(
                    f"effects of {name}: {s['levels']:,} levels, mean {s['mean']:.4g}, sd {s['sd'] or 0:.4g}, "
                    f"min {s['min']:.4g}, max {s['max']:.4g} -> {files[name]}",
                    highlight=False, markup=False, emoji=False,
                )
    if not res.solver.converged:
        raise typer.Exit(3)


@app.command("event")
def event_command(
    source: str = typer.Argument(..., help=SOURCE_HELP, metavar="SOURCE"),
    y: str = typer.Option(..., "--y", help="Outcome column.", metavar="COL"),
    unit: str = typer.Option(
        ..., "--unit", help="Unit column (store, firm...): its effect is fitted, and the errors are clustered by it "
        "unless --cluster says otherwise.", metavar="COL"),
    time: str = typer.Option(..., "--time", help="Period column: integers, dates or timestamps.", metavar="COL"),
    first_treated: str = typer.Option(
        ..., "--first-treated", help="Each unit's first treated period, of the period column's kind; missing for "
        "units never treated.", metavar="COL"),
    x: Optional[List[str]] = typer.Option(None, "--x", help="Control column; repeat for more.", metavar="COL"),
    fe: Optional[List[str]] = typer.Option(
        None, "--fe", help="A further fixed effect of the untreated fit; repeat for more; 'a:b' is one per pair.",
        metavar="COL"),
    cluster: Optional[str] = typer.Option(
        None, "--cluster", help="Cluster column of the standard errors (default: the unit).", metavar="COL"),
    horizon: str = typer.Option(
        "-5:10", "--horizon", help="Event times to report, LO:HI: leads LO..-1 from the pre-trend fit on the untreated "
        "rows, 0..HI by imputation (the overall average covers every treated row).", metavar="LO:HI"),
    weights: Optional[str] = typer.Option(
        None, "--weights", help="Target weights: each treated row's share in the averages is proportional to this "
        "column (the untreated fit stays unweighted).", metavar="COL"),
    where: Optional[str] = typer.Option(
        None, "--where", help="Row filter: one SQL boolean expression over the source's columns.", metavar="EXPR"),
    table: Optional[str] = typer.Option(None, "--table", help=TABLE_HELP, metavar="NAME"),
    engine: Optional[EngineName] = typer.Option(None, "--engine", help="Where the passes run: duckdb (default for "
                                                "files), postgresql (default for a postgresql:// URL) or spark."),
    spark_master: Optional[str] = typer.Option(None, "--spark-master", help=SPARK_MASTER_HELP, metavar="URL"),
    tol: Optional[float] = typer.Option(
        None, "--tol", help="Tolerance of the projections (default 1e-8), for the fit and the implied weights.",
        metavar="X"),
    max_iter: Optional[int] = typer.Option(None, "--max-iter", help="Limit on projection iterations (default 10000).",
                                           metavar="N"),
    memory_limit: Optional[str] = typer.Option(None, "--memory-limit", help="DuckDB memory limit, e.g. 2GB.",
                                               metavar="SIZE"),
    cell_budget: Optional[str] = typer.Option(
        None, "--python-memory", help="Budget for the pair tables or row codes held in numpy (default a quarter of "
        "RAM).", metavar="SIZE"),
    temp_dir: Optional[str] = typer.Option(None, "--temp-dir", help="Folder where DuckDB spills.", metavar="DIR"),
    threads: Optional[int] = typer.Option(None, "--threads", help="DuckDB worker threads.", metavar="N"),
    delimiter: Optional[str] = typer.Option(None, "--delimiter", help=DELIMITER_HELP, metavar="CHAR"),
    plot: Optional[Path] = typer.Option(
        None, "--plot", help="Also draw the estimates and their 95% intervals against event time to this PNG "
        "(needs matplotlib).", metavar="FILE.png"),
    json_out: bool = typer.Option(False, "--json", help="Print the full result as one JSON object.", metavar=""),
    save: Optional[Path] = typer.Option(None, "--save", help="Also store the full result as JSON in this file.",
                                        metavar="FILE.json"),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="No progress display.", metavar=""),
    debug: bool = typer.Option(False, "--debug", help="Show the traceback of an error.", metavar=""),
) -> None:
    """Event study for staggered adoption by imputation (Borusyak, Jaravel and Spiess 2024).

    Fits the untreated outcome on never- and not-yet-treated rows, imputes it for treated rows and
    averages the differences by periods since treatment, with conservative clustered errors and a
    pre-trend test. Example: bigpanel event panel.parquet --y log_sales --unit store --time week
    --first-treated remodel_week --horizon -4:8 --plot event.png
    """
    from .output.files import check_output, input_files, text_writer, write_all

    with guarded(debug):
        inputs = input_files(source)
        for role, path in (("--save", save), ("--plot", plot)):
            if path is not None and str(path) != "-":
                check_output(path, role, inputs)
        if temp_dir:
            check_output(temp_dir, "--temp-dir", inputs, folder=True)
        from .api import event as run_event
        from .results.event_report import event_renderable

        with progress(quiet or json_out) as on_step:
            res = run_event(
                source, y=y, unit=unit, time=time, first_treated=first_treated, x=x or None, fe=fe or [],
                cluster=cluster, horizon=horizon, weights=weights, where=where, table=table,
                engine=engine.value if engine else None, spark_master=spark_master, memory_limit=memory_limit,
                temp_dir=temp_dir, threads=threads, delimiter=delimiter, on_step=on_step, tol=tol, max_iter=max_iter,
                cell_budget=cell_budget,
            )
        writers = []
        if save is not None and str(save) != "-":
            writers.append((Path(save), text_writer(res.to_json())))
        if plot is not None:
            from .output.event_plot import plot_event

            writers.append((Path(plot), functools.partial(plot_event, res)))
        write_all(writers)
        if json_out or (save is not None and str(save) == "-"):
            sys.stdout.write(res.to_json() + "\n")
        if not json_out:
            out.print(event_renderable(res))
            if plot is not None:
                out.print(f"event-time plot: {plot}", highlight=False, markup=False, emoji=False)
        if not (res.untreated_fit["converged"] and res.solver["implied_weights"]["converged"]):
            raise typer.Exit(3)


@app.command("effects")
@model_command(_mean_options)
def effects_command(
    model: dict,
    out_dir: Path = typer.Option(..., "--out", help="Folder for one Parquet file per effect (level, effect, rows)."),
    plot: Optional[Path] = typer.Option(
        None, "--plot", metavar="FILE.png",
        help="Also draw the effects to this PNG (needs matplotlib): a line over time for periods, else a histogram.",
    ),
    period: Optional[str] = typer.Option(
        None, "--time", metavar="COL", help="The period column among the effects: its effect is drawn against time."
    ),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="No progress display.", metavar=""),
) -> None:
    """Fit the model and export the estimated fixed effects of every dimension, with a summary.

    Normalisation: one effect holds the intercept (mean_g(y) - mean_g(x)'b); with more, effect 2 has
    row-weighted mean zero in each connected component and effects 3+ row-weighted mean zero.
    One effect also gets standard errors (classical; CR1 too with --cluster when its levels span clusters);
    with more, levels are identified only up to the normalisation and get none.
    Example: bigpanel effects sales.parquet 'log_units ~ log_price + promo' --fe store --fe week --out fx/ --plot fx.png
    """
    from .api import fit as run_fit
    from .output.files import parquet_writer, write_all
    from .output.plots import plot_effects

    _check_outputs(model, {"--plot": plot}, out_dir)
    with progress(quiet) as on_step:
        res = run_fit(**model, on_step=on_step, effect_errors=True)
    files = _effect_files(Path(out_dir), list(res.effects))
    writers = [(files[name], parquet_writer(tab)) for name, tab in res.effects.items()]
    if plot is not None:
        writers.append((Path(plot), functools.partial(plot_effects, res.effects, period=period)))
    write_all(writers)
    table = Table(box=box.SIMPLE_HEAD, title="estimated effects", title_justify="left")
    for col in ("effect", "levels", "mean", "sd", "min", "max", "file"):
        table.add_column(col, justify="left" if col in ("effect", "file") else "right")
    for name in res.effects:
        path = files[name]
        s = res.effects_summary()[name]
        sd = f"{s['sd']:.4g}" if s["sd"] is not None else ""
        table.add_row(Text(name), f"{s['levels']:,}", f"{s['mean']:.4g}", sd, f"{s['min']:.4g}", f"{s['max']:.4g}",
                      Text(str(path)))
    out.print(table)
    notes = res.extras.get("effect_errors", {})
    for key in ("std_error", "std_error_clustered", "note"):
        if key in notes:
            out.print(f"{key.replace('_', ' ')}: {notes[key]}", highlight=False, markup=False, emoji=False)
    if plot is not None:
        out.print(f"histograms: {plot}", highlight=False, markup=False, emoji=False)


@app.command("bench")
@model_command()
def bench_command(
    model: dict,
    json_out: bool = typer.Option(False, "--json", help="Print the comparison as JSON."),
) -> None:
    """Fit the model in DuckDB and in memory on the same data; compare time, peak memory and estimates.

    Each run is a fresh child process, so peak memory is its own. Example:
    bigpanel bench sales.parquet 'log_units ~ log_price + promo' --fe store --where "store <= 50"
    """
    from .bench import bench_renderable, compare_engines

    report = compare_engines(model)
    if json_out:
        sys.stdout.write(json.dumps(report, indent=2) + "\n")
    else:
        out.print(bench_renderable(report))


@app.command("describe")
def describe_command(
    source: str = typer.Argument(
        ..., help=SOURCE_HELP, metavar="SOURCE"
    ),
    id: str = typer.Option(
        ..., "--id", help="Unit identifier column (worker, firm, store...); 'a:b' is one unit per distinct pair.",
        metavar="COL",
    ),
    time: str = typer.Option(
        ..., "--time", help="Period column (year, quarter, week...): integer, date, timestamp or floating-point.",
        metavar="COL",
    ),
    effects: Optional[List[str]] = typer.Option(
        None, "--effects",
        help="Two effect columns (give --effects twice): count the connected components linking them.",
        metavar="COL",
    ),
    table: Optional[str] = typer.Option(
        None, "--table", help=TABLE_HELP, metavar="NAME"
    ),
    delimiter: Optional[str] = typer.Option(None, "--delimiter", help=DELIMITER_HELP, metavar="CHAR"),
    engine: Optional[EngineName] = typer.Option(None, "--engine", help=ENGINE_HELP),
    spark_master: Optional[str] = typer.Option(None, "--spark-master", help=SPARK_MASTER_HELP, metavar="URL"),
    allow_remote: bool = typer.Option(False, "--allow-remote", help=REMOTE_HELP, metavar=""),
    plot: Optional[Path] = typer.Option(
        None, "--plot", help="Draw the coverage curve (share of units seen in at least k periods) to this PNG.",
        metavar="FILE.png",
    ),
    json_out: bool = typer.Option(False, "--json", help="Print the description as JSON.", metavar=""),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="No progress display.", metavar=""),
    debug: bool = typer.Option(False, "--debug", help="Show the traceback of an error.", metavar=""),
) -> None:
    """Describe the panel before any model: shape, balance, gaps, duplicated keys, missing values,
    time-invariant columns, and connected components of two effects.

    Example: bigpanel describe sales.parquet --id store:product --time week --effects store --effects product
    --plot periods.png
    """
    from .describe import describe_panel, describe_renderable, plot_periods
    from .output.files import check_output, input_files

    with guarded(debug):
        if plot is not None:
            check_output(plot, "--plot", input_files(source))
        if effects is not None and len(effects) != 2:
            raise BigPanelError(f"--effects takes exactly two columns (got {len(effects)}): --effects a --effects b")
        with progress(quiet or json_out) as on_step:
            desc = describe_panel(source, id, time, table=table, effects=tuple(effects) if effects else None,
                                  on_step=on_step, delimiter=delimiter, engine=engine.value if engine else None,
                                  spark_master=spark_master, allow_remote=allow_remote or None)
        if plot is not None:
            plot_periods(desc, plot)
        if json_out:
            sys.stdout.write(json.dumps(desc.to_dict(), indent=2) + "\n")
        else:
            out.print(describe_renderable(desc))
            if plot is not None:
                out.print(f"coverage curve: {plot}", highlight=False, markup=False, emoji=False)


@app.command("table")
def table_command(
    fits: List[Path] = typer.Argument(
        ..., help="Saved fits (JSON from 'bigpanel fit ... --save FILE.json').", metavar="FILE.json"
    ),
    to: TableFormat = typer.Option(
        "terminal", "--to", help="terminal, markdown, latex (booktabs), or csv: one row per model and term, unrounded."
    ),
    stars: bool = typer.Option(
        False, "--stars", help="Mark significance with stars (*** p<0.01, ** p<0.05, * p<0.1).", metavar=""
    ),
    digits: int = typer.Option(
        2, "--digits", help="Significant digits of each standard error; its estimate gets as many decimals.",
        metavar="N",
    ),
    label: Optional[List[str]] = typer.Option(
        None, "--label", help="Column heading; repeat once per fit.", metavar="TEXT"
    ),
    out_file: Optional[Path] = typer.Option(
        None, "--out", help="Write the table to this file instead of the terminal.", metavar="FILE"
    ),
    debug: bool = typer.Option(False, "--debug", help="Show the traceback of an error.", metavar=""),
) -> None:
    """Lay saved fits side by side: slopes with standard errors beneath, N, effects, clusters, variance, R-squared.

    Example: bigpanel table one.json two.json three.json --to latex --out table.tex
    """
    from .output.files import check_output, write_text
    from .output.tables import build_table, load_fits
    from .output.tables import render as render_table

    with guarded(debug):
        if out_file is not None:
            check_output(out_file, "--out", [Path(f) for f in fits])
        table = build_table(load_fits([str(f) for f in fits]), stars=stars, digits=digits, labels=label or None)
        rendered = render_table(table, to.value)
        if out_file is not None:
            if not isinstance(rendered, str):
                raise BigPanelError("--out needs a file format: use --to markdown, latex or csv")
            write_text(out_file, rendered)
            out.print(f"wrote {out_file}", highlight=False, markup=False, emoji=False)
        elif isinstance(rendered, str):
            sys.stdout.write(rendered)
        else:
            out.print(rendered)


@app.command("refit")
def refit_command(
    saved: Path = typer.Argument(..., help="A saved fit (JSON from 'bigpanel fit ... --save FILE.json').",
                                 metavar="FILE.json"),
    source: Optional[str] = typer.Option(
        None, "--source", metavar="SOURCE",
        help="Read the rows from here instead of the saved location (needed when the fit read a panel held in "
             "memory).",
    ),
    allow_remote: bool = typer.Option(False, "--allow-remote", help=REMOTE_HELP, metavar=""),
    rtol: float = typer.Option(1e-9, "--rtol", help="Relative tolerance: numbers closer than this are equal.",
                               metavar="X"),
    atol: float = typer.Option(1e-12, "--atol", help="Absolute tolerance: differences below it are ignored.",
                               metavar="X"),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="No progress display.", metavar=""),
    debug: bool = typer.Option(False, "--debug", help="Show the traceback of an error.", metavar=""),
) -> None:
    """Run a saved fit again with the arguments it records and report every number that changed.

    Exit code 0 when every number agrees within the tolerances, 4 when some differ.
    Example: bigpanel refit m1.json
    """
    from .rerun import refit

    with guarded(debug):
        with progress(quiet) as on_step:
            now, diffs = refit(str(saved), source=source, allow_remote=allow_remote, rtol=rtol, atol=atol,
                               on_step=on_step)
        if not diffs:
            out.print(f"same: the fit of {now.source} agrees with {saved} (rtol {rtol:g}, atol {atol:g})",
                      highlight=False, markup=False, emoji=False)
            return
        table = Table(box=box.SIMPLE_HEAD, title=f"{len(diffs)} differences from {saved}", title_justify="left")
        for col in ("key", "saved", "now", "relative difference"):
            table.add_column(col, justify="left" if col == "key" else "right")
        for d in diffs:
            rel = f"{d.relative:.2e}" if d.relative is not None else ""
            table.add_row(Text(d.key), Text(repr(d.saved)), Text(repr(d.now)), rel)
        out.print(table)
    raise typer.Exit(4)


@app.command("demo")
def demo_command(
    out_path: Path = typer.Argument(..., help="File to write: .parquet, or .csv (with a header row).", metavar="FILE"),
    rows: int = typer.Option(1_000_000, "--rows", help="Number of store-product-week rows.", metavar="N"),
    seed: int = typer.Option(7, "--seed", help="Seed of the pseudo-random draws.", metavar="N"),
    debug: bool = typer.Option(False, "--debug", help="Show the traceback of an error.", metavar=""),
) -> None:
    """Write an invented retail panel (stores x products x weeks) with known coefficients.

    Example: bigpanel demo sales.parquet --rows 10000000
    """
    from .demo import write_demo
    from .output.files import check_output

    with guarded(debug):
        check_output(out_path, "demo file", [])
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
    """Run the command (with the interrupt handler of :mod:`bigpanel.command`, installed again
    for callers that start here)."""
    signal.signal(signal.SIGINT, interrupted)
    app()
