"""The engine interface: run SQL on one connection, name and count the passes.

A *raw pass* is a query that reads the rows of the panel (as opposed to the
small level tables); the count is reported with every fit. An engine
implements five primitives (``_execute``, ``_fetch``, ``_stream``, ``_put``,
``close``) over its driver and names the driver's exception types; everything
else (labels, timings, the statements kept, the byte count, one-line errors)
lives here once.
"""

from __future__ import annotations

import time
from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import Any, Callable, ClassVar, Iterator

from ..errors import BigPanelError
from ..sql.text import Fragment, ident, render, render_variant

STREAM_BATCH = 1 << 20  # rows per batch of a streamed result


class EngineError(BigPanelError):
    """A statement failed in the engine; ``detail`` holds the engine's own first line."""

    def __init__(self, label: str, detail: str, engine: str) -> None:
        super().__init__(f"{label} failed in {engine}: {detail}")
        self.detail = detail


def first_line(exc: BaseException) -> str:
    """The first line of an exception's message (drivers add pages of context below it)."""
    lines = str(exc).strip().splitlines()
    return lines[0] if lines else type(exc).__name__


@dataclass
class Engine(ABC):
    """Run SQL on one connection; keep the raw-pass count, per-step timings and the statements.

    Class attributes describe the implementation: ``name`` is what a result reports
    (``solver.engine``), ``title`` what messages say, ``dialect`` the sqlglot dialect its
    statements are written in (picks ``name.<dialect>.sql`` template variants), and
    ``count_scans`` whether ``count(*)`` over a table reads its rows rather than metadata,
    ``ordered_scans`` whether a query without ORDER BY returns the rows in the order the
    source holds them.
    """

    name: ClassVar[str]
    title: ClassVar[str]
    dialect: ClassVar[str]
    count_scans: ClassVar[bool] = True
    ordered_scans: ClassVar[bool] = False

    con: Any
    on_step: Callable[[str], None] | None = None
    raw_passes: int = 0
    least_passes: int | None = None  # the fewest passes the running fit takes, when known (progress only)
    timings: dict[str, float] = field(default_factory=dict)
    statements: list[str] = field(default_factory=list)
    bytes_to_client: int = 0

    @abstractmethod
    def _execute(self, sql: str, params: dict) -> None:
        """Run one DuckDB-dialect statement, discarding any result."""

    @abstractmethod
    def _fetch(self, sql: str, params: dict) -> Any:
        """Run a query; its result as a ``pyarrow.Table``."""

    @abstractmethod
    def _stream(self, sql: str, params: dict) -> Iterator[Any]:
        """Run a query; its result as ``pyarrow.RecordBatch`` es."""

    @abstractmethod
    def _put(self, name: str, table: Any) -> None:
        """Upload an Arrow table as the temporary table ``name``."""

    @abstractmethod
    def close(self) -> None:
        """Release the connection (or this fit's share of it)."""

    @abstractmethod
    def error_types(self) -> tuple[type[BaseException], ...]:
        """The driver's exception types: a statement raising one fails in one line."""

    def interrupted(self, exc: BaseException) -> bool:
        """Whether ``exc`` is the driver's report of a SIGINT (turned into KeyboardInterrupt)."""
        return False

    def describe_error(self, exc: BaseException) -> str:
        """The one-line detail shown for a failed statement."""
        return first_line(exc)

    def render(self, name: str, **slots: Fragment) -> str:
        """Template ``name`` in this engine's variant (``name.<dialect>.sql``) when there is one."""
        return render_variant(name, self.dialect, **slots)

    def __post_init__(self) -> None:
        attach = getattr(self.on_step, "attach", None)
        if attach is not None:  # a progress display that can also show how far a query has got
            attach(self.query_progress)

    def query_progress(self) -> float | None:
        """How far the running query has got, in percent, when the driver can tell (else None).
        Called from another thread while a statement runs."""
        return None

    def _announce(self, label: str, raw: bool) -> None:
        """Tell ``on_step`` what runs now; a pass over the rows is numbered ("pass 2: ..."), and while
        its number is within ``least_passes`` (the fewest passes the fit will take, when the
        estimator states it) also says of how many ("pass 1 of at least 3: ...")."""
        if self.on_step is None:
            return
        if not raw:
            self.on_step(label)
            return
        k = self.raw_passes + 1
        plan = f" of at least {self.least_passes}" if self.least_passes and k <= self.least_passes else ""
        self.on_step(f"pass {k}{plan}: {label}")

    def _run(self, label: str, raw: bool, sql: str, fn: Callable[[], Any], record: bool = True) -> Any:
        if record:
            self.statements.append(sql)
            self._announce(label, raw)
        start = time.perf_counter()
        try:
            out = fn()
        except Exception as exc:  # noqa: BLE001 - sorted below: interrupt, driver error, or a bug re-raised
            if self.interrupted(exc):
                raise KeyboardInterrupt from None
            if isinstance(exc, self.error_types()):
                raise EngineError(label, self.describe_error(exc), self.title) from None
            raise
        if record:
            self.timings[label] = self.timings.get(label, 0.0) + time.perf_counter() - start
        if raw:
            self.raw_passes += 1
        return out

    def execute(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> None:
        """Run a statement whose result is not needed."""
        self._run(label, raw, sql, lambda: self._execute(sql, params or {}))

    def arrow(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> Any:
        """Run a query returning a (small) Arrow table; its size adds to ``bytes_to_client``."""
        table = self._run(label, raw, sql, lambda: self._fetch(sql, params or {}))
        self.bytes_to_client += table.nbytes
        return table

    def stream(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> Iterator[Any]:
        """Run a query whose (large) result is consumed batch by batch; the bytes add to
        ``bytes_to_client``. The query counts as a pass when ``raw``; its time is the time to
        exhaust the iterator, or to the caller's leaving it early."""
        self.statements.append(sql)
        self._announce(label, raw)
        start = time.perf_counter()
        batches = self._run(label, raw, sql, lambda: iter(self._stream(sql, params or {})), record=False)
        try:
            while True:
                batch = self._run(label, False, sql, lambda: next(batches, None), record=False)
                if batch is None:
                    break
                self.bytes_to_client += batch.nbytes
                yield batch
        finally:
            self.timings[label] = self.timings.get(label, 0.0) + time.perf_counter() - start

    def one(self, label: str, sql: str, params: dict | None = None, raw: bool = False) -> dict:
        """Run a query returning one row; return it as a dict."""
        return self.arrow(label, sql, params, raw).slice(0, 1).to_pylist()[0]

    def put_table(self, name: str, table: Any) -> None:
        """Copy a small Arrow table into a temporary table ``name`` (the statement shown is ``store_arrow``)."""
        shown = render("store_arrow", table=ident(name), view=ident(f"{name}_arrow"))
        self._run(f"store {name}", False, shown, lambda: self._put(name, table))
