-- The event study's complete rows, treated and untreated, with the event time k
-- (periods since the first treated period; negative before it, NULL for units never
-- treated), whether the row is treated, and its target weight (NULL when missing,
-- zero or negative).
CREATE OR REPLACE TEMP VIEW bp_event_all AS
SELECT r.*,
       {{event_time}} AS k,
       (r.ft IS NOT NULL AND r.f2_1 >= r.ft) AS treated,
       {{weight}} AS wt
FROM bp_complete AS r{{joins}}
