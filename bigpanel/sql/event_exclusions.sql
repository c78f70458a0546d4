-- The treated rows that cannot be imputed, by reason.
SELECT why, sum(n) AS n
FROM bp_event_rhs
WHERE gid = $gid AND why > 0
GROUP BY why
ORDER BY why
