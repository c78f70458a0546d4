"""Passes over the rows inside the engine: the sample, the group-level reduction, the moments."""
