-- The differenced rows over consecutive periods, as the view the moment passes read.
CREATE OR REPLACE TEMP VIEW bp_tilde AS
SELECT * FROM bp_fd WHERE step = 1
