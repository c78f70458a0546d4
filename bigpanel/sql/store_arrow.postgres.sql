-- PostgreSQL: the temporary table for an uploaded Arrow table (level effects);
-- its rows follow by COPY.
CREATE OR REPLACE TEMP TABLE {{table}} ({{columns}})
