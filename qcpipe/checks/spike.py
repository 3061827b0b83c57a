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
    one_sided_edges: bool = False,
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
    one_sided_edges : bool, default False
        Also evaluate a sample whose neighbours are all on one side of it (the
        ends of the record, beside a gap longer than `half_window_s`). By
        default such a sample is not evaluated (2): the published test needs a
        neighbour on each side [QARTOD-TS2020]_.

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        4 where ``d_i > fail``, 3 where ``suspect < d_i <= fail``, 1 otherwise;
        2 where the sample has fewer than `min_neighbours` neighbours, or (unless
        `one_sided_edges`) no neighbour before it or none after it; 9 where the
        value is NaN or infinite.

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

    "Before" and "after" are by position in the series: a neighbour at the same
    time as i is before it when it comes earlier in the arrays. A sample with
    neighbours on one side only (the first and last samples, the samples beside
    a gap) is compared with a one-sided mean, which follows the local slope
    badly (a rising tide makes the first sample look like a spike); so by
    default it is not evaluated, as the published test, which takes the
    neighbour before and the one after each sample, leaves the first and last
    samples unevaluated [QARTOD-TS2020]_ (from memory).

    Definition: mean of the neighbours in a time window, common practice, no
    source; the need for neighbours on both sides from [QARTOD-TS2020]_. Cost
    O(n) whatever the window (cumulative sums; see ``qcpipe.checks.windows``).
    """
    func = "spike_flags"
    x, t, ok = series(values, times, func=func)
    half_ns = v.duration_ns(half_window_s, func=func, name="half_window_s")
    suspect = v.positive(suspect, func=func, name="suspect")
    fail = v.positive(fail, func=func, name="fail")
    v.ordered(suspect, fail, func=func, names=("suspect", "fail"), strict=False)
    min_neighbours = v.count(min_neighbours, func=func, name="min_neighbours", minimum=1)
    one_sided_edges = v.flag(one_sided_edges, func=func, name="one_sided_edges")

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
        if not one_sided_edges:
            one_side = c[b] == c[lo]                          # no valid sample in [start, i)
            one_side |= c[hi] == c[b.start + 1:b.stop + 1]     # none in (i, stop)
            f[one_side] = NOT_EVALUATED
        np.copyto(f, MISSING, where=~here)
        flags[b] = f
    return flags
