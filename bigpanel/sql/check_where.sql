-- Bind the user's filter against the source's columns without reading a row.
SELECT count(*) AS n FROM (SELECT * FROM bp_source LIMIT 0) AS s WHERE {{where}}
