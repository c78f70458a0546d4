-- The demeaned columns: each value minus its shift and the solved effects of
-- every dimension, joined back row by row (e0 is the outcome, ej regressor j).
CREATE OR REPLACE TEMP VIEW bp_tilde AS
SELECT {{columns}}
FROM bp_sample CROSS JOIN bp_shift AS s
{{joins}}
