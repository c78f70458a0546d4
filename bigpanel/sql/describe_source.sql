-- Column names and types of the source.
DESCRIBE bp_source
