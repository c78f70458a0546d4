"""The console entry point (``bigpanel`` and ``python -m bigpanel``) and its interrupt handler.

The handler is in place before the command's own modules load, so that a SIGINT
during start-up ends like one during a fit: one line, exit code 130, no traceback.
"""

from __future__ import annotations

import os
import signal
import sys


FILES_MODULE = "bigpanel.output.files"  # its PENDING temporaries are removed on an interrupt


def interrupted(signum: int, frame: object) -> None:
    """SIGINT at any moment: remove half-written files, say so, exit 130 (no traceback, no abort).

    Exiting from the handler does not depend on where the signal lands: in the imports,
    inside a DuckDB query (which this DuckDB reports in more than one way), in numpy, or
    between passes.
    """
    # not loaded yet, or still loading when the signal lands: nothing can be pending
    remove = getattr(sys.modules.get(FILES_MODULE), "remove_pending", None)
    if remove is not None:
        remove()
    sys.stderr.write("bigpanel: interrupted; nothing was written\n")
    sys.stderr.flush()
    os._exit(130)


def main() -> None:
    """Install the SIGINT handler, then load and run the command."""
    signal.signal(signal.SIGINT, interrupted)
    from .cli import main as run

    run()
