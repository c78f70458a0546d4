-- Between and random effects: per unit, the row count and the mean of every
-- shifted value column, and the cluster columns' range (one grouped pass).
CREATE OR REPLACE TEMP TABLE bp_units AS
SELECT {{keys}},
       count(*) AS n,
       {{means}}
FROM bp_sample CROSS JOIN bp_shift AS s
GROUP BY {{keys}}
