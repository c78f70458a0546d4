"""A confidence interval for one slope by inverting the restricted wild cluster bootstrap test.

The interval holds every value b0 that the bootstrap test of H0: b_k = b0 does not reject at
5%: p(b0) >= 0.05, where p(b0) is the share of draws with |t*(b0)| >= |t(b0)|,
t(b0) = (b_k - b0) / s.e._k with the fit's CR1 standard error, and t*(b0) the bootstrap t
with b0 imposed on the restricted fit (:mod:`bigpanel.numerics.bootstrap`). Every b0 uses
the same weight vectors, so p is a step function of b0 (common practice; MacKinnon 2023,
"Fast cluster bootstrap methods for linear regression models", Econometrics and
Statistics, inverts the test in this way).

Each bound starts from the fit's CR1 bound and steps outward, doubling the distance from
b_k, until p < 0.05 (at most 2^12 standard errors, else the bound is infinite: the test
rejects no value on that side); then bisection between that point and b_k (where
t = 0 and p = 1) stops when the bracket is narrower than ``TOLERANCE`` standard errors.
Cost: about 25 bootstrap evaluations per bound, each as costly as one p-value.
"""

from __future__ import annotations

import numpy as np

from .bootstrap import BLOCK_CELLS, TIE, ClusterSums, Draws, WildScores, block_size, restricted

LEVEL = 0.05
TOLERANCE = 1e-6  # width of the final bracket, in standard errors
LONGEST = 2**12  # farthest a bound is looked for, in standard errors


class PValues:
    """p(b0) for one slope, with the weight vectors made once and reused for every b0."""

    def __init__(self, sums: ClusterSums, keep: list[int], bread: np.ndarray, k: int, draws: Draws) -> None:
        self.sums, self.keep, self.bread, self.k = sums, keep, bread, k
        self.total, self.draws, self.size = sums.q.sum(axis=0), draws, block_size(sums, keep)
        held = draws.count * draws.clusters <= 4 * BLOCK_CELLS  # small enough to keep: made once
        self.held = list(draws.blocks(self.size)) if held else None

    def __call__(self, value: float, t_fit: float) -> float:
        scores = WildScores(self.sums, self.keep, self.bread, restricted(self.total, self.keep, self.k, value))
        blocks = self.held if self.held is not None else self.draws.blocks(self.size)
        extreme = sum(int(np.sum(np.abs(scores.t(v)) >= abs(t_fit) * (1.0 - TIE))) for v in blocks)
        return extreme / self.draws.count


def _bound(p: PValues, beta: float, se: float, start: float, side: float) -> float:
    """The bound on ``side`` (-1 lower, +1 upper): where p crosses the level (module docstring)."""
    distance = start
    while p(beta + side * distance * se, -side * distance) >= LEVEL:
        distance *= 2.0
        if distance > LONGEST:
            return side * np.inf
    inside, outside = 0.0, distance
    while outside - inside > TOLERANCE:
        middle = (inside + outside) / 2.0
        if p(beta + side * middle * se, -side * middle) >= LEVEL:
            inside = middle
        else:
            outside = middle
    return beta + side * (inside + outside) / 2.0 * se


def inverted_interval(sums: ClusterSums, keep: list[int], bread: np.ndarray, k: int, beta: float, se: float,
                      crit: float, draws: Draws) -> tuple[float, float]:
    """The 95% interval of slope ``k`` (estimate ``beta``, CR1 s.e. ``se``, the fit's critical value
    ``crit``) by inverting the bootstrap test."""
    p = PValues(sums, keep, bread, k, draws)
    return _bound(p, beta, se, crit, -1.0), _bound(p, beta, se, crit, 1.0)
