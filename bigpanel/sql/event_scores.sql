-- Event study, the parts of the scores per cluster: one pass over its usable rows.
-- a is a treated row's target weight times its imputed effect less its cell's average
-- (tbar; an untreated row, at an event time below 0 or none, matches no cell), bu an
-- untreated row's residual u, u2 its residual in the pre-trend fit (both 0 on treated
-- rows), kt a treated row's event time (-1 on untreated rows). The event_meat query
-- puts the scores together from these sums per cluster.
CREATE OR REPLACE TEMP TABLE bp_event_scores AS
SELECT x.cl1,
       sum(1 - CAST(x.treated AS INTEGER)) AS n_untreated,
       {{sums}}
FROM (SELECT r.*,
             CASE WHEN r.treated THEN r.wt * ({{resid}} - t.tbar) ELSE 0 END AS a,
             CASE WHEN r.treated THEN 0 ELSE {{resid}} END AS bu,
             CASE WHEN r.treated THEN 0 ELSE {{pretrend}} END AS u2,
             CASE WHEN r.treated THEN r.k ELSE -1 END AS kt
      FROM bp_event_rows AS r CROSS JOIN bp_event_coef AS b
      LEFT JOIN bp_event_tbar AS t ON t.fc = r.ft AND t.kk = r.k) AS x
GROUP BY x.cl1
