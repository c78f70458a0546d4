-- Event study, the right-hand sides of the extra normal equations: one pass over the
-- untreated rows at the leads and the treated rows, joined to the level tables of the
-- untreated fit. Grouped by each effect's level, the event time kk (a lead; 0..HI;
-- HI + 1 for every treated row beyond) and why a treated row cannot be imputed (why > 0;
-- 0 when it can): the rows and the sum of the target weights (1 on an untreated row).
CREATE OR REPLACE TEMP TABLE bp_event_rhs AS
SELECT {{keys}},
       GROUPING({{keys}}) AS gid,
       count(*) AS n,
       sum(wt) AS sw
FROM (SELECT {{columns}},
             CASE WHEN r.treated THEN least(r.k, $beyond) ELSE r.k END AS kk,
             CASE WHEN r.treated THEN {{why}} ELSE 0 END AS why,
             CASE WHEN r.treated THEN r.wt ELSE CAST(1 AS DOUBLE) END AS wt
      FROM bp_event_all AS r
      {{joins}}
      WHERE r.treated OR r.k >= $lo) AS x
GROUP BY GROUPING SETS ({{sets}})
