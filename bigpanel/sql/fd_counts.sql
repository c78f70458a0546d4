-- How the first differences came out: usable (consecutive periods), across a
-- gap, repeated unit-period keys (step 0), and first rows of a unit (no lag).
SELECT count(*) FILTER (WHERE step = 1) AS usable,
       count(*) FILTER (WHERE step > 1) AS gaps,
       count(*) FILTER (WHERE step = 0) AS repeated,
       count(*) FILTER (WHERE step IS NULL) AS first_rows
FROM bp_fd
