"""``python -m bigpanel``: the same command as ``bigpanel``."""

from .cli import main

main()
