"""Solve the K x K within normal equations, dropping what the effects absorb.

A regressor is *absorbed* (constant within every level, such as a time-invariant
unit trait under unit effects) when its demeaned sum of squares is below 1e-18
of its total sum of squares around the mean: far above rounding noise (about
1e-32 for one effect, below 1e-24 after the projections' stopping rule) and far
below any within variation worth estimating. A regressor is *collinear* when,
in the order given, it is explained by the regressors already kept up to a
residual share below 1e-12 of its demeaned sum of squares. The slopes solve
(X~'X~) b = X~'y~ on the kept columns, scaled to unit diagonal, by an SVD-based
least-squares solver; the condition number reported is that of the scaled X~.
Sums that overflowed (values beyond about 1e150) are refused in one line.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable

import numpy as np
from scipy import linalg

from ..errors import BigPanelError

ABSORBED_SHARE = 1e-18
COLLINEAR_SHARE = 1e-12
RSS_CANCELLED = 1e-6  # RSS / y~'y~ below this: the cross-product formula kept < ~10 of its 16 digits
ILL_CONDITIONED = 1e5  # cond(X~) above this: cond(X~'X~) > 1e10, the normal equations keep < 6 digits


@dataclass(frozen=True)
class Slopes:
    """Kept regressors (indices 1..K into the value columns), slopes and bread."""

    keep: list[int]
    dropped: list[tuple[int, str]]
    beta: np.ndarray
    bread: np.ndarray  # (X~'X~)^-1 over the kept columns
    rss: float
    condition: float


def total_variation(q: np.ndarray, n: float, st: np.ndarray, tt: np.ndarray) -> np.ndarray:
    """Each column's weighted sum of squares around its mean (``st`` its sums, ``tt`` its squares),
    after refusing sums that overflowed and an outcome (column 0) that does not vary within the levels."""
    if not all(np.all(np.isfinite(a)) for a in (q, st, tt)):
        bad = "the outcome" if not np.all(np.isfinite(q[0])) else "a regressor"
        raise BigPanelError(
            f"the sums of squares of {bad} overflowed a double (values beyond about 1e150 in magnitude): "
            "rescale it and fit again"
        )
    total = np.maximum(tt - st**2 / n, 0.0)
    if total[0] <= 0 or q[0, 0] <= ABSORBED_SHARE * total[0]:
        raise BigPanelError(
            "the outcome does not vary " + ("at all" if total[0] <= 0 else "within the fixed-effect levels")
            + ": every slope would be 0 with no information; check the outcome column or the effects"
        )
    return total


def screen(q: np.ndarray, total: np.ndarray, columns: list[int], kept: list[int] | None = None,
           ) -> tuple[list[int], list[tuple[int, str]]]:
    """Of ``columns`` in order, those neither absorbed nor collinear with ``kept`` and the columns
    kept before them (see the module docstring), and the dropped ones with the reason."""
    base = list(kept or [])
    keep: list[int] = []
    dropped: list[tuple[int, str]] = []
    for j in columns:
        within = q[j, j]
        if total[j] <= 0 or within <= ABSORBED_SHARE * total[j]:
            dropped.append((j, "absorbed: no variation within the fixed-effect levels"))
            continue
        before = base + keep
        if before:
            s = np.sqrt(np.diag(q)[before])
            qss = q[np.ix_(before, before)] / np.outer(s, s)
            qsj = q[before, j] / (s * np.sqrt(within))
            coef = linalg.lstsq(qss, qsj, cond=None)[0]
            if 1.0 - qsj @ coef < COLLINEAR_SHARE:
                dropped.append((j, "collinear with the other regressors"))
                continue
        keep.append(j)
    return keep, dropped


def condition_number(scaled: np.ndarray) -> float:
    """sqrt of the ratio of the extreme eigenvalues of a unit-diagonal cross-product matrix."""
    eig = np.linalg.eigvalsh(scaled)
    return float(np.sqrt(eig[-1] / eig[0])) if eig[0] > 0 else float("inf")


def solve_slopes(q: np.ndarray, n: int, st: np.ndarray, tt: np.ndarray) -> Slopes:
    """Slopes of column 0 of ``q`` on the others; see the module docstring for the rules."""
    total = total_variation(q, n, st, tt)
    keep, dropped = screen(q, total, list(range(1, q.shape[0])))
    if not keep:
        return Slopes(keep, dropped, np.zeros(0), np.zeros((0, 0)), float(q[0, 0]), float("nan"))
    s = np.sqrt(np.diag(q)[keep])
    scaled = q[np.ix_(keep, keep)] / np.outer(s, s)
    beta = linalg.lstsq(scaled, q[keep, 0] / s, cond=None)[0] / s
    bread = linalg.pinvh(scaled) / np.outer(s, s)
    qk = q[np.ix_(keep, keep)]
    rss = float(q[0, 0] - 2.0 * beta @ q[keep, 0] + beta @ qk @ beta)
    return Slopes(keep, dropped, beta, bread, max(rss, 0.0), condition_number(scaled))


def exact_rss(slopes: Slopes, yy: float, residual: Callable[[list[int], np.ndarray], float]) -> tuple[Slopes, str]:
    """The RSS, from the cross-products or, when they cancel, from a residual pass ``residual(keep, beta)``.

    RSS = y~'y~ - 2 b'X~'y~ + b'X~'X~b carries a rounding error of a few units of
    1e-16 times y~'y~, so when RSS / y~'y~ (one minus the within R-squared) is
    below ``RSS_CANCELLED`` at most about ten digits are left (none when a
    1e8-scale fit leaves a residual of scale 1). The residual pass forms each
    residual before squaring it, whose error is about 1e-16 times |y~_i| per
    row instead. Returns the slopes with the RSS used and where it came from.
    """
    if not slopes.keep or yy <= 0 or slopes.rss > RSS_CANCELLED * yy:
        return slopes, "cross-products"
    return replace(slopes, rss=max(float(residual(slopes.keep, slopes.beta)), 0.0)), "residual pass"
