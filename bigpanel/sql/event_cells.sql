-- Event study, sums by cell: one pass over the usable treated rows and the untreated
-- rows at the leads. Treated rows by cohort and event time (tau, the imputed effect, is
-- e0 - x~'b); untreated rows by lead.
SELECT treated, fc, kk,
       count(*) AS n,
       {{sums}}
FROM (SELECT r.*,
             CASE WHEN r.treated THEN r.ft END AS fc,
             r.k AS kk,
             {{tau}} AS tau
      FROM bp_event_rows AS r CROSS JOIN bp_event_coef AS b
      WHERE r.treated OR r.k >= $lo) AS c
GROUP BY treated, fc, kk
