-- The floor a fit is measured against: one aggregate pass over the used columns.
SELECT count(*) AS n,
       {{aggregates}}
FROM bp_source
WHERE {{where}}
