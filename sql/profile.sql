-- Pass 1: rows after the filter, rows complete in every used column, the
-- incomplete count per column, and each value column's mean and spread on the
-- complete rows (the means become the shifts that keep later sums small).
SELECT count(*) AS n_filtered,
       count(*) FILTER (WHERE {{complete}}) AS n_complete,
       {{aggregates}}
FROM bp_filtered
