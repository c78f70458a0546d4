-- Event study, the pre-trend fit's products of each lead's fitted effects z_a with the
-- demeaned outcome and controls, summed over every untreated row.
SELECT {{sums}}
FROM bp_event_rows
WHERE NOT treated
