-- One grouping set of the event study's right-hand sides, the imputable rows only,
-- one column per lead or estimand ({{group}}: by level code in code order, or none).
SELECT {{columns}}
FROM bp_event_rhs
WHERE gid = $gid AND why = 0{{filter}}
{{group}}
