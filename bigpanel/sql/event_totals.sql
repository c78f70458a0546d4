-- The event study's complete rows and treated rows.
SELECT n, n_treated
FROM bp_event_panel
WHERE gid = $gid
