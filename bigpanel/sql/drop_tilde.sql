-- Drop the view the moment passes read before it is defined again with other
-- columns (PostgreSQL's CREATE OR REPLACE VIEW cannot rename or drop columns).
DROP VIEW IF EXISTS bp_tilde
