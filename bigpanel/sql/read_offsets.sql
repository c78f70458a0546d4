-- The integer offsets already subtracted from the wide integer value columns in bp_filtered.
SELECT * FROM bp_offset
