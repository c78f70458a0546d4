-- The per-unit table in key order, for numpy.
SELECT {{columns}} FROM bp_units ORDER BY {{keys}}
