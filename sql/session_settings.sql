-- DuckDB's own progress bar writes to stdout; bigpanel shows its own progress, on a terminal only.
SET enable_progress_bar = false
