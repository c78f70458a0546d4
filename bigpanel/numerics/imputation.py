"""The imputation estimator's algebra (Borusyak, Jaravel and Spiess 2024, Review of Economic
Studies), from sums the engine returns.

Model for the untreated outcome: Y_it(0) = a_i + b_t (+ further effects) + x_it'g + e_it,
fitted by OLS on the untreated rows Omega_0 (never treated, and not yet treated: t < E_i).
For a treated row (t >= E_i) the imputed effect is tau_it = Y_it - (x_it'g + a_i + b_t + ...);
an estimand with target weights w_it on the treated rows (summing to one) is
tau_w = sum_it w_it tau_it. Here the estimands are the average at each event time k = 0..HI
(w_it proportional to the row's weight among the rows at k) and over every imputed row.

Implied weights. tau_w = sum over all rows of v_it Y_it, with v_it = w_it on treated rows and
v_0 = -Z_0 (Z_0'Z_0)^+ Z_1'w on untreated rows (Z the effects' dummies and the controls). With
Z = [D, X] and the untreated fit's level coefficients A of the controls:
v_0 = -(D_0 d + X~_0 c), where D_0'D_0 d = D_1'w (the effects' normal equations with the
target weights summed per level as right-hand side, solved with the same projections) and
c = (X~_0'X~_0)^-1 sum_treated w_it x~_it, x~ the controls less their effects fitted on
untreated rows.

Variance (the paper's conservative estimator, its Theorem 3 construction), clustered:
V = sum over clusters c of (sum_{it in c} v_it u_it)^2, with u_it the untreated fit's residual
on an untreated row and tau_it - tbar_g on a treated row, where tbar_g is the average of tau
over the row's cell g (cohort x event time) weighted by v_it^2 (by the squared target weight).
The covariances of two estimands use the products of their cluster sums. No small-sample
factor; intervals use the normal distribution, as in the paper.

Pre-trend test (the paper's Section on testing): OLS on the untreated rows of Y on the
effects, the controls and one indicator per lead (event times LO..-1), CR1 errors on the
cluster column, and the Wald statistic that the leads' coefficients are zero, chi-squared with
as many degrees of freedom as leads.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from .given_rhs import virtual_totals

Z95 = 1.959963984540054  # the normal distribution's 97.5% point


@dataclass(frozen=True)
class Columns:
    """The extra columns solved: the leads with untreated rows (event times), then one per
    estimand: the event times 0..HI with imputable treated rows, and every treated row
    (``None``). ``source`` gives each column's index among the right-hand-side pass's."""

    leads: list[int]
    estimands: list[int | None]
    source: list[int]

    @property
    def first_weight_column(self) -> int:
        return len(self.leads)


def choose_columns(leads: list[int], post: list[int], total: np.ndarray) -> Columns:
    """Keep the leads with untreated rows and the estimands with imputable treated rows."""
    kept_leads = [a for i, a in enumerate(leads) if total[i] > 0]
    kept_post = [k for h, k in enumerate(post) if total[len(leads) + h] > 0]
    source = [i for i, _ in enumerate(leads) if total[i] > 0]
    source += [len(leads) + h for h, _ in enumerate(post) if total[len(leads) + h] > 0]
    estimands: list[int | None] = list(kept_post)
    if total[-1] > 0:
        estimands.append(None)
        source.append(len(total) - 1)
    return Columns(kept_leads, estimands, source)


def given_rhs(rhs: list[np.ndarray], total: np.ndarray, cols: Columns,
              counts: list[np.ndarray]) -> tuple[list[np.ndarray], np.ndarray]:
    """The chosen right-hand sides, the weight columns divided by their totals (target weights
    that sum to one), and each column's squared norm for the stopping rule: a lead's row count,
    or the bound of :func:`~bigpanel.numerics.given_rhs.virtual_totals` for a weight column."""
    scale = np.array([1.0 if j < cols.first_weight_column else 1.0 / total[s] for j, s in enumerate(cols.source)])
    chosen = [r[:, cols.source] * scale for r in rhs]
    totals = np.array([total[s] for s in cols.source[:cols.first_weight_column]])
    weights = virtual_totals([r[:, cols.first_weight_column:] for r in chosen], counts)
    return chosen, np.concatenate([totals, weights])


@dataclass(frozen=True)
class Cells:
    """The sums by cell, split: treated cells (cohort ``fc``, event time ``kk``) and the
    untreated rows by lead (``kk``); ``keys`` holds the treated cells' cohort and event time in
    their own types."""

    treated: dict[str, np.ndarray]
    untreated: dict[str, np.ndarray]
    keys: pa.Table

    @classmethod
    def grouped(cls, tab: pa.Table, beta: np.ndarray, controls: list[str], leads: list[int],
                lead_z: np.ndarray) -> Cells:
        """From the sums by cohort ``fc`` and event time ``k`` of the imputable rows (n, sw,
        swt = sum w tau, sw2t, sw2 and sw<e> for each control e; w = 1 on an untreated row):
        the treated cells (k >= 0) as they are, and the untreated rows added up per lead, with
        sum e0 = sum tau + b' sum x~ (tau = e0 - x~'b) and sum z_a over the lead's rows from
        ``lead_z`` (leads x extra columns)."""
        k = _floats(tab.column("k"))
        flag = k >= 0
        numbers = [n for n in tab.column_names if n not in ("fc", "k")]
        sums = {n: _floats(tab.column(n)) for n in numbers}
        treated = {n: v[flag] for n, v in sums.items()}
        treated["kk"] = k[flag]
        at = [k == a for a in leads]
        untreated = {"kk": np.array(leads, dtype=float), "n": np.array([sums["n"][g].sum() for g in at])}
        for e in controls:
            untreated[f"s{e}"] = np.array([sums[f"sw{e}"][g].sum() for g in at])
        own = np.array([sums["swt"][g].sum() for g in at])
        untreated["se0"] = own + sum((untreated[f"s{e}"] * b for e, b in zip(controls, beta)), np.zeros(len(leads)))
        for a in range(lead_z.shape[1]):
            untreated[f"sz{a}"] = lead_z[:, a]
        keys = tab.select(["fc", "k"]).filter(pa.array(flag)).rename_columns(["fc", "kk"])
        return cls(treated, untreated, keys)


def _floats(col: pa.ChunkedArray) -> np.ndarray:
    return np.asarray(col.to_numpy(zero_copy_only=False), dtype=float)


def lead_sums(rhs: list[np.ndarray], source: list[int], alpha: list[np.ndarray], leads: int) -> np.ndarray:
    """sum z_a over the untreated rows at each lead i, from the rows per level at that lead
    (``rhs[d][:, source[i]]``) and z_a's effects per level (``alpha[d][:, a]``): z is constant
    within a level, so the sum is exact. Leads x leads."""
    out = np.zeros((leads, leads))
    for r, a in zip(rhs, alpha):
        out += r[:, source[:leads]].T @ a[:, :leads]
    return out


def _in(cells: dict[str, np.ndarray], k: int | None) -> np.ndarray:
    kk = cells["kk"]
    return np.ones(len(kk), dtype=bool) if k is None else kk == k


@dataclass(frozen=True)
class Imputed:
    """Estimates by estimand: the weight totals, rows, estimates, and the weighted means of the
    demeaned controls over its treated rows (sum w x~ / sum w)."""

    totals: np.ndarray
    rows: np.ndarray
    estimate: np.ndarray
    control_means: np.ndarray


def imputed(cells: Cells, estimands: list[int | None], controls: list[str]) -> Imputed:
    """tau_h = sum_h w tau / sum_h w from the treated cells, for each estimand h."""
    t = cells.treated
    totals, rows, est, means = [], [], [], []
    for k in estimands:
        mask = _in(t, k)
        sw = float(t["sw"][mask].sum())
        totals.append(sw)
        rows.append(int(t["n"][mask].sum()))
        est.append(float(t["swt"][mask].sum()) / sw)
        means.append([float(t[f"sw{e}"][mask].sum()) / sw for e in controls])
    return Imputed(np.array(totals), np.array(rows), np.array(est),
                   np.array(means).reshape(len(estimands), len(controls)))


def cell_averages(cells: Cells) -> pa.Table:
    """tbar per treated cell: the average imputed effect weighted by the squared target weight."""
    t = cells.treated
    return cells.keys.append_column("tbar", pa.array(t["sw2t"] / t["sw2"]))


def pretrend_moments(cells: Cells, q: np.ndarray, controls: list[str], leads: list[int]) -> np.ndarray:
    """The pre-trend fit's cross-products over [y~, x~ (kept controls), leads~] on the untreated
    rows, from the untreated fit's q (rows and columns [y, kept controls]) and the sums by lead.

    With L~_a = L_a - z_a (z_a = D g_a, the lead's fitted effects, D'D g_a = D'L_a), and since
    the demeaned columns c = y~, x~ satisfy the untreated fit's normal equations D'c = 0,
    L~_a'c = sum_{k=a} c - g_a'D'c = sum_{k=a} c; and since z_a'z_b = g_a'D'D g_b = z_a'L_b,
    L~_a'L~_b = n_a [a = b] - sum_{k=a} z_b (symmetric; the two mirror sums are averaged). Both
    hold exactly at the solution; with the projections stopped at ``tol`` they are off by about
    ``tol`` relative to these sums (3e-9 at 1e-8 on the 10M-row benchmark panel), where forming
    sum z_a c row by row would cost one more pass over the rows."""
    u = cells.untreated
    m = 1 + len(controls)
    out = np.zeros((m + len(leads), m + len(leads)))
    out[:m, :m] = q
    es = ["e0", *controls]
    group = [u["kk"] == a for a in leads]
    for i, gi in enumerate(group):
        for c, e in enumerate(es):
            out[m + i, c] = out[c, m + i] = u[f"s{e}"][gi].sum()
        for j in range(i, len(leads)):
            cross = 0.5 * (u[f"sz{j}"][gi].sum() + u[f"sz{i}"][group[j]].sum())
            out[m + i, m + j] = out[m + j, m + i] = (u["n"][gi].sum() if i == j else 0.0) - cross
    return out


def lead_rows(cells: Cells, leads: list[int]) -> list[int]:
    """The untreated rows at each lead."""
    u = cells.untreated
    return [int(u["n"][u["kk"] == a].sum()) for a in leads]


def interval(estimate: np.ndarray, se: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The 95% interval estimate -+ 1.96 se (normal)."""
    return estimate - Z95 * se, estimate + Z95 * se
