"""Spike test: a value far from the mean of its neighbours in time."""

from __future__ import annotations

import numpy as np

from . import _validate as v
from ._series import series
from ._windows import reference_value, running_sums, window_bounds
from .flags import FAIL, MISSING, NOT_EVALUATED, PASS, SUSPECT


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

    flags = np.full(x.shape, MISSING, dtype=np.int8)
    if x.size == 0:
        return flags
    xz, c, s1 = running_sums(x, ok, ref=reference_value(x, ok))
    start, stop = window_bounds(t, half_ns, half_ns, include_before=True, include_after=True)
    k = c[stop] - c[start] - ok  # the sample itself is not its own neighbour
    total = s1[stop] - s1[start] - xz
    with np.errstate(invalid="ignore", divide="ignore"):
        d = np.abs(xz - total / k)
    verdict = np.where(d > fail, FAIL, np.where(d > suspect, SUSPECT, PASS)).astype(np.int8)
    verdict[k < min_neighbours] = NOT_EVALUATED
    flags[ok] = verdict[ok]
    return flags
