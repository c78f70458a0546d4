-- Random effects (GLS): each shifted value minus theta_i times its unit mean,
-- and the intercept's column 1 - theta_i, as the view the moment passes read.
CREATE OR REPLACE TEMP VIEW bp_tilde AS
SELECT {{columns}}
FROM bp_sample CROSS JOIN bp_shift AS s
JOIN bp_theta AS u USING ({{keys}})
