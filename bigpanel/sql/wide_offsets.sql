-- Integer offsets for the wide integer value columns: the smallest value among the first rows
-- (at most 1,000; any value inside the data's range keeps the shifted values exact as doubles).
SELECT {{columns}}
FROM (SELECT * FROM bp_source LIMIT 1000) AS head
