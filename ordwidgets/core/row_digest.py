"""A digest that identifies the rows of a fit when the rows themselves are not kept."""
import hashlib

import numpy as np
import pandas as pd


def rows_digest(index, y, weights):
    """A digest of the rows of a fit: index labels, response codes and weights.

    Two fits on the same rows (same labels, same responses, same weights, same order) have
    the same digest; it stands in for the training rows a ``keep_data=False`` fit does not keep.
    """
    h = hashlib.sha1(usedforsecurity=False)  # the fastest hash here (hardware SHA); not a security use
    index = pd.Index(index)
    if index.dtype.kind in "iu":  # the labels' own bytes (a range and its values agree)
        h.update(memoryview(np.ascontiguousarray(index.to_numpy(), dtype=np.int64)))
    else:
        h.update(memoryview(pd.util.hash_pandas_object(index, index=False).to_numpy()))
    h.update(memoryview(np.ascontiguousarray(y, dtype=np.int64)))
    if weights is not None:
        h.update(b"weights")
        h.update(memoryview(np.ascontiguousarray(weights, dtype=float)))
    return h.hexdigest()
