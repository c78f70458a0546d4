-- Event study, the sums by cell of the imputable rows (their grouping set of bp_event_rhs):
-- treated rows by cohort fc and event time k >= 0, untreated rows by their cohort and lead.
SELECT fc, k, n, sw, {{sums}}
FROM bp_event_rhs
WHERE gid = $gid AND why = 0
