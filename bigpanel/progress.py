"""The status line a command shows on a terminal while it runs.

It names the current step (a pass over the rows is numbered, with the fewest passes
the fit takes when the estimator states it: "pass 1 of at least 3: per-level
statistics"), how far the engine says the running query has got when it can tell
(DuckDB estimates a percentage), and the time since the command started. It is
refreshed a few times a second from a thread of its own, so a long pass shows its
progress as it goes.
"""

from __future__ import annotations

import threading
import time
from typing import Any, Callable

REFRESH = 0.25  # seconds between refreshes of the line


class PassProgress:
    """An ``on_step`` callback for :func:`bigpanel.fit` that draws the status line.

    ``show`` receives the line's text; the engine calls :meth:`attach` with its
    progress probe (percent or None) when it opens.
    """

    def __init__(self, show: Callable[[str], Any], clock: Callable[[], float] = time.monotonic) -> None:
        self.show = show
        self.clock = clock
        self.started = clock()
        self.label = "starting"
        self.probe: Callable[[], float | None] | None = None
        self.stopped = threading.Event()

    def __call__(self, label: str) -> None:
        self.label = label
        self.refresh()

    def attach(self, probe: Callable[[], float | None]) -> None:
        self.probe = probe

    def text(self) -> str:
        """The line: step, percent of the running query (when known) and elapsed seconds."""
        done = self.probe() if self.probe is not None else None
        share = f" - {done:.0f}%" if done is not None else ""
        return f"{self.label}{share} - {self.clock() - self.started:.1f} s"

    def refresh(self) -> None:
        self.show(self.text())

    def run(self) -> None:
        """Refresh until :meth:`stop` (the body of the refreshing thread)."""
        while not self.stopped.wait(REFRESH):
            self.refresh()

    def stop(self) -> None:
        self.stopped.set()
