-- Describe pass 1: all rows, and per column the NULLs (and, for floating-point
-- columns, the NaN or infinite values).
SELECT count(*) AS n_rows,
       {{counts}}
FROM bp_panel
