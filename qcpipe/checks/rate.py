"""Rate of change test: a step between successive values that is unusually large."""

from __future__ import annotations

import numpy as np

from .. import arrays as v
from ..arrays import series
from .windows import (
    blocks,
    constant_windows,
    distinct_times,
    last_change_before_stop,
    reference_value,
    running_sums,
    window_bounds,
    window_starts,
)
from .flags import MISSING, NOT_EVALUATED, PASS, SUSPECT


def rate_of_change_flags(
    values,
    times,
    *,
    window_s: float,
    n_sigma: float,
    min_samples: int = 3,
) -> np.ndarray:
    r"""Rate of change test: flag a step larger than n_sigma recent standard deviations.

    Parameters
    ----------
    values : array_like of float, shape (n,)
        Values; NaN marks missing.
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing; sampling may be irregular.
    window_s : float
        Length of the trailing window, in seconds (> 0).
    n_sigma : float
        Allowed step, in standard deviations of the window (> 0, dimensionless).
    min_samples : int, default 3
        Fewest valid values the window must hold to evaluate a sample (>= 2).

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        3 where ``step_i > n_sigma * s_i``, else 1; 2 for the first valid sample
        (no step) and where the window holds fewer than `min_samples` valid
        values; 9 where the value is NaN or infinite.

    Notes
    -----
    ``step_i = |x_i - x_p|`` with p the previous sample whose value is valid
    (however long ago). The step is not divided by the time between the samples.
    ``s_i`` is the sample standard deviation (divisor k - 1) of the k valid
    values x_j whose times lie in the open interval
    ``t_i - window_s < t_j < t_i`` (both ends excluded, so sample i and any
    sample at the same time as i are not in its window):

    .. math:: s_i^2 = \frac{1}{k-1}\left(\sum x_j^2 - \frac{1}{k}\Big(\sum x_j\Big)^2\right)

    The comparison is strict, so where the window is constant (s_i = 0) any
    nonzero step is suspect and a zero step passes. A constant window is
    detected exactly; otherwise s_i^2 comes from cumulative sums of shifted
    values [CGL1983]_ and is clipped at 0.

    Definition: common practice, no source. Cost O(n) whatever the window.
    """
    func = "rate_of_change_flags"
    x, t, ok = series(values, times, func=func)
    window_ns = v.duration_ns(window_s, func=func, name="window_s")
    n_sigma = v.positive(n_sigma, func=func, name="n_sigma")
    min_samples = v.count(min_samples, func=func, name="min_samples", minimum=2)

    if not ok.any():
        return np.full(x.shape, MISSING, dtype=np.int8)
    _, c, s1, s2 = running_sums(x, ok, ref=reference_value(x, ok), squares=True)
    if distinct_times(t):
        start = window_starts(t, window_ns, include_before=False)
        stop = None  # the window ends just before the sample itself: stop_i = i
    else:
        start, stop = window_bounds(t, window_ns, 0, include_before=False, include_after=False)

    # the previous valid value of sample i is the c[i]-th valid value
    has_prev = c[:-1] > 0
    step = x[ok][c[:-1] - 1]  # c = 0 picks the last one; those samples are not evaluated below
    np.subtract(x, step, out=step)
    np.abs(step, out=step)
    with np.errstate(invalid="ignore"):
        change = step > 0  # NaN (missing sample) is no change
    change &= has_prev
    last_change = last_change_before_stop(change, c, stop)

    flags = np.empty(x.shape, dtype=np.int8)
    for b in blocks(x.size):
        lo = start[b]
        hi = b if stop is None else stop[b]
        c_lo = c[lo]
        k = c[hi] - c_lo
        a = np.subtract(s1[hi], s1[lo])  # hi may be a slice: never subtract into a view
        var = np.subtract(s2[hi], s2[lo])
        with np.errstate(invalid="ignore", divide="ignore"):
            a *= a
            a /= k
            var -= a
            var /= k - 1
        np.maximum(var, 0.0, out=var)
        var[constant_windows(last_change[b], k, c_lo)] = 0.0  # exactly constant: s = 0
        np.sqrt(var, out=var)
        var *= n_sigma
        with np.errstate(invalid="ignore"):
            f = np.greater(step[b], var).view(np.int8)
        f *= SUSPECT - PASS
        f += PASS
        f[(k < min_samples) | ~has_prev[b]] = NOT_EVALUATED
        np.copyto(f, MISSING, where=~ok[b])
        flags[b] = f
    return flags
