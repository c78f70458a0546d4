"""The package's version (read by the build and reported in every saved fit)."""

__version__ = "0.1.0"
