-- Rows lost to listwise deletion, counted per used column.
SELECT {{aggregates}}
FROM bp_filtered
