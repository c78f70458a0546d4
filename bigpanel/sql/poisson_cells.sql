-- One IRLS step's pass over the rows: per level of every effect (one grouping set each; the
-- pairs of effects too on the pair-table path), the working weight, the weighted sums of
-- the working columns, their products and the deviance at the current fit, over the
-- working rows (template poisson_rows).
CREATE OR REPLACE TEMP TABLE bp_irls_cells AS
SELECT {{codes}},
       GROUPING({{codes}}) AS gid,
       count(*) AS n,
       {{sums}}
FROM ({{rows}}) AS r
GROUP BY GROUPING SETS ({{sets}})
