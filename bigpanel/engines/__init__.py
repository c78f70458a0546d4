"""The SQL engines (DuckDB, PostgreSQL, Spark), their dialects and the source openers."""
