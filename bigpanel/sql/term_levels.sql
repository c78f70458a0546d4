-- The levels of a categorical regressor under the filter, in text order (at most $limit).
SELECT DISTINCT CAST({{column}} AS VARCHAR) AS level
FROM bp_source
WHERE {{where}} AND {{column}} IS NOT NULL
ORDER BY level
LIMIT $limit
