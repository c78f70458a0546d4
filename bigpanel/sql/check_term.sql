-- Bind one regressor's SQL expression against the source's columns without reading a row.
SELECT {{expression}} AS t FROM (SELECT * FROM bp_source LIMIT 0) AS s
