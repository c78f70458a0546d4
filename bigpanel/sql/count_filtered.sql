-- Rows after the user's filter (before listwise deletion).
SELECT count(*) AS n FROM bp_filtered
