-- One projection of the in-engine path: the effects of one dimension set to the
-- (weighted) level means of what the other dimensions' current effects leave.
CREATE OR REPLACE TEMP TABLE {{target}} AS
SELECT {{keys}}, {{means}}
FROM bp_sample CROSS JOIN bp_shift AS s
{{joins}}
GROUP BY {{keys}}
