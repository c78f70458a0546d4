"""The choices of the API and the command line, in a module that imports nothing heavy
(the CLI lists them in ``--help`` without loading numpy, scipy or duckdb)."""

import re

ESTIMATORS = ("within", "between", "first-difference", "random-effects")
# the user's names of the variance estimators and the internal codes the SQL steps test for
VARIANCE_TYPES = {"classical": "iid", "hc1": "hc1", "cr1": "cluster"}
SINGLETONS = ("drop", "keep")

_SIZE = re.compile(r"^\s*([0-9.]+)\s*([KMGT]?)(I?B)?\s*$", re.IGNORECASE)


def size_in_bytes(text: str) -> float | None:
    """A size such as ``4GB`` (powers of 1000), ``4GiB`` (powers of 1024) or ``512MB`` in bytes;
    None when ``text`` is not one."""
    m = _SIZE.match(text)
    if not m:
        return None
    unit = m.group(2).upper()
    base = 1024 if (m.group(3) or "").upper() == "IB" else 1000
    return float(m.group(1)) * base ** ("KMGT".find(unit) + 1) if unit else float(m.group(1))
