-- The panel as a view over an in-process frame (Arrow, pandas, polars) registered as
-- bp_frame: DuckDB scans it where it lies.
CREATE OR REPLACE TEMP VIEW bp_source AS
SELECT * FROM bp_frame
