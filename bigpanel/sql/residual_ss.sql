-- The residual sum of squares formed row by row: sum of w r^2 (w = 1 unweighted), with the
-- residual's coefficients r = (1, -b) from the one-row table bp_coef; used when the
-- cross-product formula cancels.
SELECT fsum({{weight}}r * r) AS rss
FROM (SELECT {{resid}} AS r{{carry}}
      FROM bp_tilde CROSS JOIN bp_coef AS b) AS t
