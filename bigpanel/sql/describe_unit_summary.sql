-- Panel shape from the per-unit table: units, periods, span, the spread of
-- periods per unit, gaps, duplicated keys, and for every numeric column
-- whether it is constant within every unit (inv_j; NULL when it has no values).
SELECT count(*) AS n_units,
       coalesce(sum(n_rows), 0) AS rows_keyed,
       coalesce(max(last_rank), 0) AS n_periods,
       min(first_t) AS first_period,
       max(last_t) AS last_period,
       min(n_periods) AS periods_min,
       quantile_cont(n_periods, 0.25) AS periods_q25,
       quantile_cont(n_periods, 0.5) AS periods_q50,
       quantile_cont(n_periods, 0.75) AS periods_q75,
       max(n_periods) AS periods_max,
       count(*) FILTER (WHERE last_rank - first_rank + 1 > n_periods) AS units_with_gaps,
       count(*) FILTER (WHERE n_periods = 1) AS units_single_period,
       coalesce(sum(dup_keys), 0) AS dup_keys,
       coalesce(sum(dup_rows), 0) AS dup_rows{{invariant}}
FROM bp_units
