-- Every grouping set of the IRLS step's cells, each in code order, for numpy.
SELECT *
FROM bp_irls_cells
ORDER BY gid, {{codes}}
