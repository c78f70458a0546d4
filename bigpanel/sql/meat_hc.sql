-- Heteroskedasticity-robust meat: sums over rows of u_a u_b e_j e_l, where each
-- residual u_a = sum_j r_a_j e_j (times the row's weight, if any) takes its
-- coefficients from the one-row table bp_coef.
SELECT {{sums}}
FROM (SELECT {{resid}}, {{carry}}
      FROM bp_tilde CROSS JOIN bp_coef AS b) AS r
