-- Event study, the right-hand sides of the extra normal equations and the sums by cell: one
-- pass over the untreated rows at the leads and the treated rows, joined to the untreated
-- fit's levels (code and effects, bp_event_fit_d). Grouped by each effect's level, the event
-- time kk (a lead; 0..HI; HI + 1 for every treated row beyond) and why a treated row cannot
-- be imputed (why > 0; 0 when it can): the rows and the sum of the target weights wt (1 on
-- an untreated row). Grouped also by why, the cohort fc and the event time k: the sums of
-- wt, wt tau, wt^2 tau, wt^2 and wt e_j, where e_j are the demeaned outcome (j = 0) and
-- controls and tau = e0 - x~'b is a treated row's imputed effect (the untreated rows' own
-- residual; bp_event_coef holds the slopes b).
CREATE OR REPLACE TEMP TABLE bp_event_rhs AS
SELECT {{keys}},
       GROUPING({{keys}}) AS gid,
       count(*) AS n,
       sum(wt) AS sw,
       {{sums}}
FROM (SELECT d.*,
             d.e0 - ({{fit}}) AS tau
      FROM (SELECT {{columns}},
                   CASE WHEN r.treated THEN least(r.k, $beyond) ELSE r.k END AS kk,
                   r.ft AS fc,
                   r.k AS k,
                   CASE WHEN r.treated THEN {{why}} ELSE 0 END AS why,
                   CASE WHEN r.treated THEN r.wt ELSE CAST(1 AS DOUBLE) END AS wt
            FROM bp_event_all AS r CROSS JOIN bp_shift AS s
            {{joins}}
            WHERE r.treated OR r.k >= $lo) AS d
      CROSS JOIN bp_event_coef AS b) AS x
GROUP BY GROUPING SETS ({{sets}})
