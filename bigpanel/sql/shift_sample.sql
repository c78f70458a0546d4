-- The shifts: means of the first complete rows (at most 1,000; file order).
SELECT {{avgs}}
FROM (SELECT {{columns}} FROM bp_sample LIMIT 1000) AS head
