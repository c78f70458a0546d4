-- The per-unit table in key order, for numpy.
SELECT * FROM bp_units ORDER BY {{keys}}
