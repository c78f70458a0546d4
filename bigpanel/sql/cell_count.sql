-- How many cells the reduction produced (all grouping sets).
SELECT count(*) AS n FROM bp_cells
