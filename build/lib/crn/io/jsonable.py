"""Plain JSON values from results: numpy values unwrapped, NaN and infinities as null."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["to_jsonable"]


def to_jsonable(value):
    """Return ``value`` with numpy scalars and arrays turned into plain Python values.

    Dictionaries get string keys, tuples become lists, and non-finite floats
    become None (JSON has no NaN).

    Parameters
    ----------
    value : object
        Nested dicts, lists, tuples, numpy arrays and scalars, and plain values.

    Returns
    -------
    object
        Something :func:`json.dumps` accepts without a custom encoder.
    """
    if isinstance(value, dict):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [to_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return to_jsonable(value.tolist())
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        value = float(value)
        return value if math.isfinite(value) else None
    return value
