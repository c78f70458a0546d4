-- Between: the unit means (uploaded with the constant's column) as the view the moment passes read.
CREATE OR REPLACE TEMP VIEW bp_tilde AS
SELECT * FROM bp_between
