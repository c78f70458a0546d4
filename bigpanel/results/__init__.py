"""The result of a fit, its JSON and its display."""
