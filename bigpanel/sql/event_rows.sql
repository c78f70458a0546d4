-- The event study's usable rows with the untreated fit's effects joined back: the
-- demeaned outcome and controls e_j (value minus shift minus the effects) and the
-- fitted effects z_i of each extra column. A treated row whose levels were not all
-- estimated from untreated rows (or not linked by them, or without a usable weight)
-- drops out.
CREATE OR REPLACE TEMP VIEW bp_event_rows AS
SELECT r.cl1, r.ft, r.k, r.treated, r.wt,
       {{columns}}
FROM bp_event_all AS r CROSS JOIN bp_shift AS s
{{joins}}
WHERE {{usable}}
