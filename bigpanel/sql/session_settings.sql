-- DuckDB's own progress bar writes to stdout; bigpanel shows its own progress, on a terminal only.
-- No extension is fetched from the network or loaded behind the caller's back (an https:// path
-- would otherwise install httpfs), and no later statement can change a setting.
SET enable_progress_bar = false;
SET autoinstall_known_extensions = false;
SET autoload_known_extensions = false;
SET lock_configuration = true
