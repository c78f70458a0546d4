"""The estimators: each runs the passes and numerics and builds a result."""
