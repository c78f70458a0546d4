-- Tables and views in the attached database.
SELECT table_name FROM information_schema.tables WHERE table_catalog = 'bp_db'
