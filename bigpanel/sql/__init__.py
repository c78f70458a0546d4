"""SQL templates (NAME.sql, NAME.<dialect>.sql) and the helpers that fill them."""
