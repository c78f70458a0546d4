"""Stock-Yogo critical values for weak-instrument tests (Stock and Yogo 2005, "Testing for weak
instruments in linear IV regression", Tables 5.1, 5.2 and 5.4), at the 5% level.

The numbers are written FROM MEMORY of the published tables, for one and two endogenous
regressors and the numbers of excluded instruments listed; a pair (endogenous, instruments)
not listed gets no critical value. They are tabulated for the Cragg-Donald statistic
under independent, identically distributed errors; beside a Kleibergen-Paap statistic
(robust or clustered errors) they are only a rough guide (common practice).

* ``2SLS bias``: the largest relative bias of 2SLS against OLS tolerated (5, 10, 20,
  30%); defined with at least two more instruments than endogenous regressors.
* ``2SLS size``, ``LIML size``: the largest actual size of a nominal 5% Wald test tolerated
  (10, 15, 20, 25%).
"""

from __future__ import annotations

BIAS_LEVELS = ("5%", "10%", "20%", "30%")
SIZE_LEVELS = ("10%", "15%", "20%", "25%")

# (endogenous regressors, excluded instruments) -> critical values at the levels above
TSLS_BIAS = {
    (1, 3): (13.91, 9.08, 6.46, 5.39), (1, 4): (16.85, 10.27, 6.71, 5.34), (1, 5): (18.37, 10.83, 6.77, 5.25),
    (1, 6): (19.28, 11.12, 6.76, 5.15), (1, 7): (19.86, 11.29, 6.73, 5.07), (1, 8): (20.25, 11.39, 6.69, 4.99),
    (1, 9): (20.53, 11.46, 6.65, 4.92), (1, 10): (20.74, 11.49, 6.61, 4.86),
    (2, 4): (11.04, 7.56, 5.57, 4.73), (2, 5): (13.97, 8.78, 5.91, 4.79), (2, 6): (15.72, 9.48, 6.08, 4.78),
    (2, 7): (16.88, 9.92, 6.16, 4.76), (2, 8): (17.70, 10.22, 6.20, 4.73),
}
TSLS_SIZE = {
    (1, 1): (16.38, 8.96, 6.66, 5.53), (1, 2): (19.93, 11.59, 8.75, 7.25), (1, 3): (22.30, 12.83, 9.54, 7.80),
    (1, 4): (24.58, 13.96, 10.26, 8.31), (1, 5): (26.87, 15.09, 10.98, 8.84), (1, 6): (29.18, 16.23, 11.72, 9.38),
    (1, 7): (31.50, 17.38, 12.48, 9.93), (1, 8): (33.84, 18.54, 13.24, 10.50), (1, 9): (36.19, 19.71, 14.01, 11.07),
    (1, 10): (38.54, 20.88, 14.78, 11.65),
    (2, 2): (7.03, 4.58, 3.95, 3.63), (2, 3): (13.43, 8.18, 6.40, 5.45), (2, 4): (16.87, 9.93, 7.54, 6.28),
    (2, 5): (19.45, 11.22, 8.38, 6.89),
}
LIML_SIZE = {
    (1, 1): (16.38, 8.96, 6.66, 5.53), (1, 2): (8.68, 5.33, 4.42, 3.92), (1, 3): (6.46, 4.36, 3.69, 3.32),
    (1, 4): (5.44, 3.87, 3.30, 2.98), (1, 5): (4.84, 3.56, 3.05, 2.77),
    (2, 2): (7.03, 4.58, 3.95, 3.63), (2, 3): (5.44, 3.81, 3.32, 3.09), (2, 4): (4.72, 3.39, 2.99, 2.79),
    (2, 5): (4.32, 3.13, 2.78, 2.60),
}


def critical_values(endogenous: int, instruments: int, liml: bool) -> dict[str, float]:
    """The tabulated critical values for the estimator (``2SLS bias 10%``: 10.27, ...); empty
    when the table has no row for these counts."""
    key = (endogenous, instruments)
    tables = [("LIML size", LIML_SIZE, SIZE_LEVELS)] if liml else [
        ("2SLS bias", TSLS_BIAS, BIAS_LEVELS), ("2SLS size", TSLS_SIZE, SIZE_LEVELS)]
    return {f"{name} {level}": value for name, table, levels in tables if key in table
            for level, value in zip(levels, table[key])}
