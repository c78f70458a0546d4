"""``python -m bigpanel``: the same command as ``bigpanel``."""

from .command import main

main()
