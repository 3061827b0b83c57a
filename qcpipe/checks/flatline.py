"""Flat line test: a value that stays (nearly) the same for too long."""

from __future__ import annotations

import numpy as np

from .. import arrays as v
from ..arrays import series
from .flags import MISSING, grade


def flat_line_flags(
    values,
    times,
    *,
    tolerance: float,
    suspect_after_s: float,
    fail_after_s: float,
) -> np.ndarray:
    """Flat line test: flag samples in a run of near-equal values that lasts too long.

    Parameters
    ----------
    values : array_like of float, shape (n,)
        Values; NaN marks missing.
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing; sampling may be irregular.
    tolerance : float
        Largest change between successive values that still counts as "no
        change", in the unit of `values` (>= 0).
    suspect_after_s, fail_after_s : float
        Run durations in seconds; ``0 < suspect_after_s <= fail_after_s``.

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        4 where the run has lasted ``>= fail_after_s`` at that sample, 3 where it
        has lasted ``>= suspect_after_s`` (and less than `fail_after_s`), else 1;
        9 where the value is NaN or infinite.

    Notes
    -----
    Missing values are skipped: "successive" means successive valid values.
    A run starts at a valid sample whose change from the previous valid value
    exceeds `tolerance` (or at the first valid sample) and continues while each
    change ``|x_j - x_{j-1}| <= tolerance`` (tolerance included). At sample i in
    a run that started at sample r the duration so far is ``t_i - t_r``; both
    thresholds are reached at equality. Flags look back only: early samples of a
    long run keep the flag they had when they arrived.

    Because the rule is on successive differences, a slow drift of at most
    `tolerance` per step also counts as a flat line, however far it drifts in
    total. Values such as 0.1 are not exact in binary, so choose `tolerance`
    with a margin above the sensor's resolution.

    Definition: common practice, no source. Cost O(n).
    """
    func = "flat_line_flags"
    x, t, ok = series(values, times, func=func)
    tolerance = v.positive(tolerance, func=func, name="tolerance", allow_zero=True)
    suspect_ns = v.duration_ns(suspect_after_s, func=func, name="suspect_after_s")
    fail_ns = v.duration_ns(fail_after_s, func=func, name="fail_after_s")
    v.ordered(float(suspect_after_s), float(fail_after_s), func=func,
              names=("suspect_after_s", "fail_after_s"), strict=False)

    flags = np.full(x.shape, MISSING, dtype=np.int8)
    xf, tf = x[ok], t[ok]
    if xf.size == 0:
        return flags
    starts = np.ones(xf.size, dtype=bool)
    d = np.diff(xf)
    np.abs(d, out=d)
    np.greater(d, tolerance, out=starts[1:])
    # Time each run began: a running maximum of the times where a run starts
    # (times are sorted, so the latest start has the largest time).
    lasted = np.where(starts, tf, tf[0])
    np.maximum.accumulate(lasted, out=lasted)
    np.subtract(tf, lasted, out=lasted)
    flags[ok] = grade(lasted, suspect_ns, fail_ns, at_threshold=True)
    return flags
