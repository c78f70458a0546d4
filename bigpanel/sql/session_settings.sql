-- DuckDB tracks each query's progress (bigpanel's own status line shows it, on a terminal
-- only) but never prints its own bar, which would write to stdout.
-- No extension is fetched from the network or loaded behind the caller's back (an https:// path
-- would otherwise install httpfs), and no later statement can change a setting.
SET enable_progress_bar = true;
SET enable_progress_bar_print = false;
SET autoinstall_known_extensions = false;
SET autoload_known_extensions = false;
SET lock_configuration = true
