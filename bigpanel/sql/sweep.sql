-- One projection of the in-engine path: per level of one effect, the weighted sum
-- over its rows of the other effects' current values (bp_sweep_d); the new values
-- are the level's right-hand side less this sum, over its weight (numerics/sweeps.py).
CREATE OR REPLACE TEMP TABLE {{target}} AS
SELECT {{keys}}, {{means}}
FROM bp_sample
{{joins}}
GROUP BY {{keys}}
