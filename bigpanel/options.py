"""The choices of the API and the command line, in a module that imports nothing heavy
(the CLI lists them in ``--help`` without loading numpy, scipy or duckdb)."""

ESTIMATORS = ("within", "between", "first-difference", "random-effects")
# the user's names of the variance estimators and the internal codes the SQL steps test for
VARIANCE_TYPES = {"classical": "iid", "hc1": "hc1", "cr1": "cluster"}
SINGLETONS = ("drop", "keep")
