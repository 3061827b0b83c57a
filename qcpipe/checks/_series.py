"""Common input handling of the time-series checks (internal)."""

from __future__ import annotations

import numpy as np

from . import _validate as v
from ._windows import as_ns, check_non_decreasing


def series(values, times, *, func: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(x float64, t int64 ns, ok = finite x) for a 1-D series sorted by time."""
    x = v.as_1d(v.as_values(values, func=func), func=func, name="values")
    t = as_ns(times, func=func)
    v.same_shape(x, t, func=func, names=("values", "times"))
    check_non_decreasing(t, func=func)
    return x, t, np.isfinite(x)
