"""The in-memory comparison of the benchmarks: a plain numpy fit of the same model.

Load the used columns with pyarrow, code each effect's levels (dictionary
encoding), demean every column by alternating projections with ``np.bincount``
(each effect in turn set to the level mean of what the others leave) until the
largest change of a demeaned column is below 1e-10 of its norm, then least
squares on the demeaned columns. Rows with a missing value are dropped;
singletons are not removed (the benchmark panels have none) and no standard
errors are formed: it is the floor of what
an in-memory fit costs, and the slopes are the check.
"""

from __future__ import annotations

import numpy as np
import pyarrow.compute as pc
import pyarrow.dataset as ds

TOL = 1e-10
MAX_SWEEPS = 2_000


def fit(model: dict) -> dict:
    """Slopes of ``model`` (keys ``source``, ``formula``, ``fe``) and the sweeps it took."""
    y, rhs = (part.strip() for part in model["formula"].split("~"))
    xs = [t.strip() for t in rhs.split("+")]
    fe = list(model["fe"])
    table = ds.dataset(model["source"], format="parquet").to_table(columns=[y, *xs, *fe])
    codes = []
    for name in fe:
        enc = pc.dictionary_encode(table.column(name)).combine_chunks()
        codes.append(enc.indices.to_numpy().astype(np.int64))
    values = np.column_stack([table.column(c).to_numpy(zero_copy_only=False).astype(float) for c in [y, *xs]])
    complete = np.isfinite(values).all(axis=1)  # listwise deletion, as the fit does (NULL -> NaN)
    if not complete.all():
        values, codes = values[complete], [c[complete] for c in codes]
    del table
    counts = [np.bincount(c) for c in codes]
    sweeps = 0
    norm = np.sqrt((values**2).sum(axis=0))
    while sweeps < MAX_SWEEPS:
        sweeps += 1
        change = np.zeros(values.shape[1])
        for c, n in zip(codes, counts):
            for j in range(values.shape[1]):
                means = np.bincount(c, weights=values[:, j], minlength=len(n)) / n
                step = means[c]
                values[:, j] -= step
                change[j] += float(step @ step)
        if np.all(np.sqrt(change) <= TOL * np.maximum(norm, 1e-300)):
            break
    beta = np.linalg.lstsq(values[:, 1:], values[:, 0], rcond=None)[0]
    return {"nobs": len(values), "coefficients": {x: {"estimate": float(b)} for x, b in zip(xs, beta)},
            "solver": {"iterations": sweeps, "raw_passes": 1}}
