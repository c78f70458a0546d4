"""The numpy side of one IRLS step of the Poisson fit: projections, moments and the stopping rule.

A step is a weighted within fit of the working outcome z on the regressors with weights
w = p mu (:mod:`bigpanel.passes.irls`). Its columns arrive already cleared of the effects
solved at the step before, r = t - D a, so the projections solve D'WD delta = D'W r for the
change delta only (a warm start), by the within fit's own solvers: exactly per level with
one effect, on the weighted pair tables, or on the row codes with this step's row weights.

The cross-products of the demeaned columns e = r - D delta come from the level sums alone:

    E'WE = R'WR - delta' D'W R,

exact when D'WD delta = D'W R (and, for conjugate-gradient iterates started at zero, whose
residual is orthogonal to delta, exact up to rounding); with one effect, delta = D'W R / n
per level, so E'WE = R'WR - sum_l s_l s_l' / n_l. The warm start keeps R'WR close to E'WE, so little
cancels. The last step's cross-products come from a compensated pass over the rows instead.

Stopping rule (common practice for IRLS): the step stops when the deviance changes by less
than ``tol`` relative, |D_t - D_t-1| / (|D_t| + 0.1) < tol, and no coefficient moves by
more than ``tol`` relative to max(1, |b|).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse

from ..passes.irls import StepSums
from ..passes.reduce import ONE_WAY, PAIR_TABLES, ROW_CODES, Reduction
from .project import Projection, solve_effects
from .rowcodes import Links, solve_codes


def step_reduction(sums: StepSums, nested: list[list[bool]], strategy: str) -> Reduction:
    """The within fit's :class:`Reduction` of one IRLS step: working weights per level, the sums of
    the working columns, the weighted pair tables (pair-table path) and each column's W-norm."""
    levels = sums.levels
    sizes = [len(lv.weight) for lv in levels]
    cross = {(d, e): sparse.csr_matrix((w, (a, b)), shape=(sizes[d], sizes[e]))
             for (d, e), (a, b, w) in sums.pairs.items()} if strategy == PAIR_TABLES else None
    n = int(levels[0].rows.sum())
    return Reduction([lv.weight for lv in levels], [lv.rows for lv in levels], [lv.sums for lv in levels], cross,
                     nested, np.diag(sums.products).copy(), n, n, 1, strategy)


def project_step(red: Reduction, links: Links | None, tol: float, max_iter: int) -> Projection:
    """The change of the effects of every working column (see the module docstring)."""
    if red.strategy == ONE_WAY:
        return Projection([red.rhs[0] / red.counts[0][:, None]], 0, 0.0, True)
    if red.strategy == ROW_CODES:  # warm-started: two or three iterations, less than forming S densely each step
        return solve_codes(links, red, tol, max_iter, dense=False)
    return solve_effects(red, tol=tol, max_iter=max_iter)


def level_moments(sums: StepSums, delta: list[np.ndarray]) -> np.ndarray:
    """E'WE of the demeaned working columns from the level sums (see the module docstring)."""
    if len(sums.levels) == 1:
        lv = sums.levels[0]
        q = sums.products - np.einsum("li,lj->ij", lv.sums, lv.sums / lv.weight[:, None])
    else:
        q = sums.products - sum(dl.T @ lv.sums for dl, lv in zip(delta, sums.levels))
    return (q + q.T) / 2.0


CLEAR_SHARE = 1e-6  # level-sum cross-products decide which regressors stay only when no share is below this


def clear_cut(q: np.ndarray, total: np.ndarray) -> bool:
    """Whether the cross-products ``q`` formed from cancelling level sums settle which regressors
    the within rules keep (all of them): every regressor keeps more than ``CLEAR_SHARE`` of its
    variation ``total`` within the levels, and the scaled regressors' smallest eigenvalue (their
    distance from collinearity) exceeds it too. Rounding moves these shares by about 1e-16 times
    the cancelled sums, far below the margin; anything closer goes to a compensated pass."""
    diag = np.diag(q)[1:]
    if np.any(diag <= CLEAR_SHARE * np.maximum(total[1:], 0.0)) or np.any(diag <= 0):
        return False
    scale = np.sqrt(diag)
    return bool(np.linalg.eigvalsh(q[1:, 1:] / np.outer(scale, scale))[0] > CLEAR_SHARE)


@dataclass(frozen=True)
class Change:
    """How far one IRLS step moved: the relative deviance change and the largest relative
    coefficient change (both against the step before)."""

    deviance: float
    coefficients: float

    def below(self, tol: float) -> bool:
        return self.deviance < tol and self.coefficients < tol


def change(dev: float, dev_before: float, beta: np.ndarray, beta_before: np.ndarray) -> Change:
    """The stopping rule's two measures (see the module docstring)."""
    moved = np.abs(beta - beta_before) / np.maximum(1.0, np.abs(beta)) if len(beta) else np.zeros(1)
    return Change(abs(dev - dev_before) / (abs(dev) + 0.1), float(np.max(moved)))


def deviance(constants: dict[str, float], level_py: list[np.ndarray], f: list[np.ndarray], beta: np.ndarray,
             keep: list[int], weight: float) -> float:
    """The deviance D = 2 sum p (y log(y / mu) - (y - mu)) of the fit eta = sum_j b_j t_j + sum_d
    f_d[level], from sums that do not change between steps and the step's weight sum w = p mu:

        D = 2 (sum p y log y - sum_j b_j sum p y t_j - sum_d sum_l f_d[l] (sum p y)_l - sum p y + sum w).

    ``constants`` holds the sums of p y log y (``pyl``), p y (``py``) and p y t_j (``pyr{j}``),
    ``level_py`` each effect's per-level sums of p y. The first two terms cancel to the size of
    D; at the double's 1e-16 that leaves D far more digits than the stopping rule reads."""
    fitted = sum(float(fd @ py) for fd, py in zip(f, level_py))
    fitted += sum(float(b) * constants[f"pyr{j}"] for j, b in zip(keep, beta))
    return 2.0 * (constants["pyl"] - fitted - constants["py"] + weight)


def fit_summary(deviance: float, constants: dict[str, float], stats: dict[str, float]) -> dict[str, float]:
    """Two summaries of the fit, prior-weighted (p): the deviance R-squared 1 - D / D_0, with D_0
    the deviance of the constant-only model, 2 (sum p y log y - log(ybar) sum p y), ybar = sum p y /
    sum p; and the squared correlation of y and the fitted mean mu. ``constants`` holds the sums
    of p, p y, p y^2 and p y log y; ``stats`` those of p mu, p y mu and p mu^2 at the fit."""
    p, py = constants["p"], constants["py"]
    ybar, mbar = py / p, stats["pm"] / p
    null = 2.0 * (constants["pyl"] - np.log(ybar) * py)
    cov = stats["pym"] / p - ybar * mbar
    var_y, var_m = constants["pyy"] / p - ybar**2, stats["pmm"] / p - mbar**2
    return {"null_deviance": float(null), "deviance_r2": float(1.0 - deviance / null) if null > 0 else float("nan"),
            "squared_correlation": float(cov**2 / (var_y * var_m)) if var_y > 0 and var_m > 0 else float("nan")}
