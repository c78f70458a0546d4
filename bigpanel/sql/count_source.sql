-- Rows in the source before any filter.
SELECT count(*) AS n FROM bp_source
