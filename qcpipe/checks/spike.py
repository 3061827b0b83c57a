"""Spike test: a value far from the mean of its neighbours in time."""

from __future__ import annotations

import numpy as np

from .. import arrays as v
from ..arrays import series
from .windows import blocks, reference_value, running_sums, window_bounds
from .flags import MISSING, NOT_EVALUATED, grade


def spike_flags(
    values,
    times,
    *,
    half_window_s: float,
    suspect: float,
    fail: float,
    min_neighbours: int = 2,
) -> np.ndarray:
    r"""Spike test: flag a value that stands far from the mean of its neighbours.

    Parameters
    ----------
    values : array_like of float, shape (n,)
        Values; NaN marks missing.
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing; sampling may be irregular.
    half_window_s : float
        Half width of the neighbourhood, in seconds (> 0).
    suspect, fail : float
        Deviation thresholds in the unit of `values`; ``0 < suspect <= fail``.
    min_neighbours : int, default 2
        Fewest valid neighbours needed to evaluate a sample (>= 1).

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        4 where ``d_i > fail``, 3 where ``suspect < d_i <= fail``, 1 otherwise;
        2 where the sample has fewer than `min_neighbours` neighbours; 9 where
        the value is NaN or infinite.

    Notes
    -----
    The neighbours of sample i are the samples j != i with
    ``|t_j - t_i| <= half_window_s`` (both window ends included; samples at the
    same time as i count) whose values are finite. With N_i the set of
    neighbours and k_i its size,

    .. math:: d_i = \left| x_i - \frac{1}{k_i} \sum_{j \in N_i} x_j \right|

    and the comparisons with `suspect` and `fail` are strict (a deviation equal
    to a threshold does not reach it).

    Effect of a spike on its neighbours: the spike is itself a neighbour of the
    samples around it. In a flat series a single spike of height S gives
    ``d = S`` at the spike and ``d = S / k_j`` at each neighbour j (k_j = that
    neighbour's number of neighbours), so the neighbours stay unflagged only
    while ``S / k_j <= suspect``. A tall spike in a narrow window therefore also
    flags its neighbours; a wider window (more neighbours) dilutes that.

    Definition: common practice, no source. Cost O(n) whatever the window
    (cumulative sums; see ``qcpipe.checks._windows``).
    """
    func = "spike_flags"
    x, t, ok = series(values, times, func=func)
    half_ns = v.duration_ns(half_window_s, func=func, name="half_window_s")
    suspect = v.positive(suspect, func=func, name="suspect")
    fail = v.positive(fail, func=func, name="fail")
    v.ordered(suspect, fail, func=func, names=("suspect", "fail"), strict=False)
    min_neighbours = v.count(min_neighbours, func=func, name="min_neighbours", minimum=1)

    if x.size == 0:
        return np.full(x.shape, MISSING, dtype=np.int8)
    xz, c, s1 = running_sums(x, ok, ref=reference_value(x, ok))
    start, stop = window_bounds(t, half_ns, half_ns, include_before=True, include_after=True)
    flags = np.empty(x.shape, dtype=np.int8)
    for b in blocks(x.size):
        lo, hi, here = start[b], stop[b], ok[b]
        k = c[hi]
        k -= c[lo]
        k -= here  # the sample itself is not its own neighbour
        d = s1[hi]
        d -= s1[lo]
        d -= xz[b]  # sum over the neighbours
        with np.errstate(invalid="ignore", divide="ignore"):
            d /= k
            np.subtract(xz[b], d, out=d)
        np.abs(d, out=d)
        f = grade(d, suspect, fail)
        f[k < min_neighbours] = NOT_EVALUATED
        np.copyto(f, MISSING, where=~here)
        flags[b] = f
    return flags
