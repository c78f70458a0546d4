"""The design of an event study: who is treated from when, the event times to report, the
weights, checked against the source's columns.

Event time. With integer periods, the event time of a row is k = t - E (its period
minus its unit's first treated period). With date or timestamp periods it is the
difference of ranks, k = r(t) - r(E), where r(x) counts the distinct periods observed
before x among the complete rows under the filter: k = 0 at the first observed period on
or after E, -1 at the last one before it, and missing periods do not count. A row is
treated when E is given and t >= E (k >= 0); a unit whose first-treated value is missing
is never treated.

The horizon LO:HI (LO <= 0 <= HI) names the event times reported: leads LO..-1 come
from the pre-trend fit on the untreated rows, event times 0..HI from imputation.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, replace

from ..engines.source import Source
from ..errors import BigPanelError
from ..sql.text import ident
from .spec import Spec, check_column

INTEGER = re.compile(r"^(TINYINT|SMALLINT|INTEGER|BIGINT|HUGEINT|UTINYINT|USMALLINT|UINTEGER|UBIGINT|INT\d*)$")
DATELIKE = re.compile(r"^(DATE|TIMESTAMP.*)$")
NUMERIC_WEIGHT = re.compile(r"^(TINYINT|SMALLINT|INTEGER|BIGINT|HUGEINT|UTINYINT|USMALLINT|UINTEGER|UBIGINT"
                            r"|FLOAT|DOUBLE|REAL|DECIMAL.*)$")
DEFAULT_HORIZON = "-5:10"
UNTREATED = "ft IS NULL OR f2_1 < ft"  # over internal names: f2_1 the period, ft the first treated period


@dataclass(frozen=True)
class Design:
    """The event study's columns (source names), the horizon and the kind of period.

    ``cluster`` is the cluster column (the unit unless given); ``weights`` the column of
    target weights (None: every treated row counts equally); ``dates`` whether periods
    are dates or timestamps (event time by rank) rather than integers.
    """

    unit: str
    time: str
    first_treated: str
    cluster: str
    weights: str | None
    lo: int
    hi: int
    dates: bool

    @property
    def leads(self) -> list[int]:
        """The event times before treatment that the pre-trend fit estimates (LO..-1)."""
        return list(range(self.lo, 0))

    @property
    def post(self) -> list[int]:
        """The event times from treatment on that are averaged by imputation (0..HI)."""
        return list(range(0, self.hi + 1))


def parse_horizon(value: str | tuple[int, int] | list[int]) -> tuple[int, int]:
    """``"LO:HI"`` (or a pair) as two integers with LO <= 0 <= HI; one-line error otherwise."""
    if isinstance(value, str):
        parts = value.split(":")
        try:
            lo, hi = (int(p.strip()) for p in parts) if len(parts) == 2 else (None, None)
        except ValueError:
            lo = hi = None
    else:
        lo, hi = (tuple(value) + (None, None))[:2] if len(value) == 2 else (None, None)
    if not isinstance(lo, int) or not isinstance(hi, int):
        raise BigPanelError(f"--horizon {value!r} is not LO:HI with two whole numbers, e.g. -5:10")
    if lo > 0 or hi < 0:
        raise BigPanelError(f"--horizon {lo}:{hi}: LO must be 0 or less (the leads) and HI 0 or more")
    return lo, hi


def event_design(source: Source, unit: str, time: str, first_treated: str, cluster: str | None,
                 weights: str | None, horizon: str | tuple[int, int]) -> Design:
    """Check the event study's columns against the source and return the design.

    The unit is one column; the period an integer, date or timestamp column; the
    first-treated column of the same kind (integers with integers, dates or timestamps
    with either); the weights a number column.
    """
    for name, role in ((unit, "unit"), (time, "time"), (first_treated, "first-treated")):
        if not name:
            raise BigPanelError(f"the event study needs a {role} column (--{role})")
        check_column(name, source, role)
    if len({unit, time, first_treated}) < 3:
        raise BigPanelError("--unit, --time and --first-treated must be three different columns")
    kind = source.columns[time]
    if not (INTEGER.match(kind) or DATELIKE.match(kind)):
        raise BigPanelError(f"time column {time!r} has type {kind}: periods must be integers, dates or timestamps")
    dates = bool(DATELIKE.match(kind))
    first = source.columns[first_treated]
    if not (DATELIKE.match(first) if dates else INTEGER.match(first)):
        wanted = "a date or timestamp" if dates else "an integer"
        raise BigPanelError(f"first-treated column {first_treated!r} has type {first}: with {time!r} of type {kind} "
                            f"it must be {wanted} (the first treated period; missing for units never treated)")
    if weights is not None:
        check_column(weights, source, "weights")
        if not NUMERIC_WEIGHT.match(source.columns[weights]):
            raise BigPanelError(f"weights column {weights!r} has type {source.columns[weights]}, not a number")
    lo, hi = parse_horizon(horizon)
    return Design(unit, time, first_treated, cluster or unit, weights, lo, hi, dates)


def event_spec(spec: Spec, design: Design) -> Spec:
    """The untreated fit's spec: the first-treated column (``ft``) and the target weights
    (``uw``) carried under internal names, the sample restricted to the untreated rows, and no
    cluster pass in the fit itself (the event study sums its own scores per cluster)."""
    carry = [("ft", ident(design.first_treated))]
    if design.weights:
        carry.append(("uw", f"CAST({ident(design.weights)} AS DOUBLE)"))
    return replace(spec, carry=tuple(carry), sample_where=UNTREATED, variance="classical")
