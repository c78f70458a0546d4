"""The numerics in numpy: projections, slopes, degrees of freedom, inference, effects."""
