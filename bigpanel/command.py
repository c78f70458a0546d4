"""The console entry point (``bigpanel`` and ``python -m bigpanel``).

It puts an interrupt handler in place before the command's own modules load, so that
a SIGINT during start-up ends like one during a fit: one line, exit code 130, no
traceback (the command then installs its fuller handler, see ``cli.main``).
"""

from __future__ import annotations

import os
import signal
import sys


def _interrupted_early(signum: int, frame: object) -> None:
    sys.stderr.write("bigpanel: interrupted; nothing was written\n")
    sys.stderr.flush()
    os._exit(130)


def main() -> None:
    """Install the early SIGINT handler, then run the command."""
    signal.signal(signal.SIGINT, _interrupted_early)
    from .cli import main as run

    run()
