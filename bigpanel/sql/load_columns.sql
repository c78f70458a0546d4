-- The in-memory path: every used column after the filter, fetched once.
SELECT * FROM bp_filtered
