-- One grouping set of the IRLS step's cells, in code order, for numpy.
SELECT {{columns}}
FROM bp_irls_cells
WHERE gid = $gid
ORDER BY {{order}}
