"""What leaves the tool: model tables, plots and files written whole."""
