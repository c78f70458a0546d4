-- Heteroskedasticity-robust meat: sum over rows of u^2 x~ x~', with
-- u = (y~ - x~'b) times the row's weight (if any) and b from the one-row table bp_coef.
SELECT {{sums}}
FROM (SELECT {{resid}} AS u, {{carry}}
      FROM bp_tilde CROSS JOIN bp_coef AS b) AS r
