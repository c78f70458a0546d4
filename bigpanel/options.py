"""The choices of the API and the command line, in a module that imports nothing heavy
(the CLI lists them in ``--help`` without loading numpy, scipy or duckdb)."""

import re
from collections.abc import Sequence

ESTIMATORS = ("within", "between", "first-difference", "random-effects", "instrumental-variables")
MODELS = ("linear", "poisson")  # the mean of y: linear in x and the effects, or exp of that (Poisson)
VARIANCE_TYPES = ("classical", "hc1", "cr1")
SINGLETONS = ("drop", "keep")
BOOTSTRAP_WEIGHTS = ("rademacher", "webb")


def as_list(value: str | Sequence[str] | None) -> list[str]:
    """A column name or names as a list (None: empty)."""
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    return list(value)

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
