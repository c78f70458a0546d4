-- One IRLS step's pass over the rows: per level of every effect (one grouping set each; the
-- pairs of effects too on the pair-table path) and over the whole sample, the working weight,
-- the weighted sums of the working columns and what the fit statistics need (deviance,
-- moments of y and mu at the current fit), all from the view bp_irls.
CREATE OR REPLACE TEMP TABLE bp_irls_cells AS
SELECT {{codes}},
       GROUPING({{codes}}) AS gid,
       count(*) AS n,
       {{sums}}
FROM bp_irls
GROUP BY GROUPING SETS ({{sets}})
