"""Flat line test: a value that stays (nearly) the same for too long."""

from __future__ import annotations

import numpy as np

from .. import arrays as v
from ..arrays import series
from .flags import FAIL, MISSING, PASS, SUSPECT, grade
from .windows import running_max_in_blocks

#: what each value is compared with: ``"current"`` (the earlier values with the present
#: one, [QARTOD-TS2020]_) or ``"previous"`` (each value with the one before it)
REFERENCES = ("current", "previous")
#: ``"delayed"`` (the whole record at hand) or ``"real_time"`` (look back only)
MODES = ("delayed", "real_time")


def flat_line_flags(
    values,
    times,
    *,
    tolerance: float,
    suspect_after_s: float,
    fail_after_s: float,
    reference: str = "current",
    mode: str = "delayed",
) -> np.ndarray:
    r"""Flat line test: flag samples of a stretch of near-equal values that lasts too long.

    Parameters
    ----------
    values : array_like of float, shape (n,)
        Values; NaN marks missing.
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing; sampling may be irregular.
    tolerance : float
        Largest difference that still counts as "no change", in the unit of
        `values` (>= 0; a difference equal to it is no change).
    suspect_after_s, fail_after_s : float
        Durations in seconds; ``0 < suspect_after_s <= fail_after_s``.
    reference : {"current", "previous"}, default "current"
        ``"current"``: earlier values are compared with the present value
        [QARTOD-TS2020]_. ``"previous"``: each value is compared with the
        previous valid value (successive differences), so a drift of at most
        `tolerance` per step counts as flat however far it goes.
    mode : {"delayed", "real_time"}, default "delayed"
        ``"real_time"``: a sample is flagged from what came before it only.
        ``"delayed"``: the whole record is at hand, and a stuck stretch is
        flagged from its first sample.

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        4 where the stretch reaches `fail_after_s`, 3 where it reaches
        `suspect_after_s` only, else 1; 9 where the value is NaN or infinite.

    Notes
    -----
    Missing values are skipped: "earlier", "previous" and "next" mean valid
    values, so a stretch goes on across missing values and gaps in time (the
    gap check reports those). Both durations are reached at equality.

    ``reference="current"``, real time: the look-back of sample i reaches
    duration D when some valid sample at or before ``t_i - D`` exists and every
    valid value from the last such sample a_i to x_i is within the tolerance of
    x_i:

    .. math:: |x_j - x_i| \le \mathrm{tolerance} \quad \text{for } a_i \le j \le i

    that is, the values near x_i have lasted at least D. With all of them
    equal this is the count form of the published test (the present value and
    the earlier ones within a tolerance [QARTOD-TS2020]_, stated in numbers of
    observations there; from memory) with the count replaced by a duration.
    Delayed: the look-ahead of sample j reaches D when every valid value from
    x_j to b_j (the first valid sample at or after ``t_j + D``) is within the
    tolerance of x_j; a sample is flagged when it lies in a look-back or
    look-ahead that reaches D (the samples compared with a flagged value are
    flagged with it). A stuck run of equal values lasting D or more is then
    flagged from its first sample to its last.

    ``reference="previous"``: a run starts at a valid sample whose difference
    from the previous valid value exceeds the tolerance (or at the first valid
    sample) and goes on while ``|x_j - x_{j-1}| <= tolerance``. Real time: at
    sample i of a run that started at r the duration is ``t_i - t_r``. Delayed:
    every sample of a run gets the run's whole duration ``t_e - t_r`` (e its
    last sample).

    Values such as 0.1 are not exact in binary, so choose `tolerance` with a
    margin above the sensor's resolution. Definition of the default from
    [QARTOD-TS2020]_; the ``"previous"`` comparison and the durations are common
    practice, no source. Cost O(n) whatever the durations: window maxima and
    minima by running maxima in blocks as long as the duration (see
    :func:`qcpipe.checks.windows.running_max_in_blocks`).
    """
    func = "flat_line_flags"
    x, t, ok = series(values, times, func=func)
    tolerance = v.positive(tolerance, func=func, name="tolerance", allow_zero=True)
    suspect_ns = v.duration_ns(suspect_after_s, func=func, name="suspect_after_s")
    fail_ns = v.duration_ns(fail_after_s, func=func, name="fail_after_s")
    v.ordered(float(suspect_after_s), float(fail_after_s), func=func,
              names=("suspect_after_s", "fail_after_s"), strict=False)
    reference = v.one_of(reference, func=func, name="reference", allowed=REFERENCES)
    mode = v.one_of(mode, func=func, name="mode", allowed=MODES)

    flags = np.full(x.shape, MISSING, dtype=np.int8)
    xf, tf = x[ok], t[ok]
    if xf.size == 0:
        return flags
    if reference == "previous":
        flags[ok] = grade(_run_durations(xf, tf, tolerance, delayed=mode == "delayed"),
                          suspect_ns, fail_ns, at_threshold=True)
        return flags
    flags[ok] = _stretch_flags(xf, tf, tolerance, suspect_ns, fail_ns, delayed=mode == "delayed")
    return flags


def _run_durations(x: np.ndarray, t: np.ndarray, tolerance: float, *, delayed: bool) -> np.ndarray:
    """Duration (ns) of each valid sample's run of successive values within `tolerance`: so far, or whole."""
    starts = np.ones(x.size, dtype=bool)
    d = np.diff(x)
    np.abs(d, out=d)
    np.greater(d, tolerance, out=starts[1:])
    first = np.flatnonzero(starts)
    run = np.cumsum(starts) - 1
    began = t[first][run]
    if not delayed:
        return t - began
    last = np.append(first[1:] - 1, x.size - 1)
    return t[last][run] - began


def _stretch_flags(x: np.ndarray, t: np.ndarray, tolerance: float, suspect_ns: int, fail_ns: int, *,
                   delayed: bool) -> np.ndarray:
    """Flags of valid samples for ``reference="current"`` (see flat_line_flags).

    Only samples of long runs can be flagged: values within `tolerance` of one
    value differ from one another by at most twice it, so each look-back and
    look-ahead that reaches a duration lies in a run of successive differences
    of at most ``2 tolerance`` (plus rounding) lasting that long. The windows are
    taken within those runs only (usually a small part of the series), and only
    in the runs whose values are not all within the tolerance of one another.
    """
    n = x.size
    # a margin above 2 tolerance for the rounding of the differences (the filter may only keep more)
    wide = 2 * tolerance * (1 + 1e-9) + 8 * np.finfo(np.float64).eps * float(np.max(np.abs(x)))
    starts = np.ones(n, dtype=bool)
    step = np.diff(x)
    np.abs(step, out=step)
    np.greater(step, wide, out=starts[1:])
    began = np.where(starts, t, t[0])
    np.maximum.accumulate(began, out=began)
    lasted = np.subtract(t, began, out=began)     # time since the start of the sample's run
    run = np.cumsum(starts)
    flags = np.full(n, PASS, dtype=np.int8)
    for code, d_ns in ((SUSPECT, suspect_ns), (FAIL, fail_ns)):
        flags[_stretch_reaches(x, t, run, lasted, tolerance, d_ns, delayed=delayed)] = code
    return flags


def _stretch_reaches(x: np.ndarray, t: np.ndarray, run: np.ndarray, lasted: np.ndarray, tolerance: float,
                     d_ns: int, *, delayed: bool) -> np.ndarray:
    """True where a valid sample's values within `tolerance` last `d_ns`; `run`, `lasted`: the runs of
    :func:`_stretch_flags` (ids non-decreasing, time since the run's start)."""
    n = x.size
    reached = np.zeros(n, dtype=bool)
    tail = np.flatnonzero(lasted >= d_ns)
    if tail.size == 0:
        return reached
    ids = run[tail]
    ids = ids[np.flatnonzero(np.diff(ids, prepend=-1))]          # the long runs
    first = np.searchsorted(run, ids, side="left")
    size = np.searchsorted(run, ids, side="right") - first
    # their samples, run after run
    offset = np.cumsum(size) - size
    where = np.arange(int(size.sum())) + np.repeat(first - offset, size)
    # A long run whose values all lie within the tolerance of one another (a
    # stuck sensor): every window inside it reaches, so in real time a sample
    # reaches once the run has lasted d_ns, and in delayed mode the whole run is
    # covered (the look-ahead from its first sample, the look-back from its last,
    # and for the others either one of their own or the last sample's). The
    # rounded max - min is >= every rounded difference (rounding is monotone).
    bounds = np.empty(2 * ids.size, dtype=np.intp)
    bounds[0::2], bounds[1::2] = first, first + size
    bounds = bounds[:-1] if bounds[-1] == n else bounds
    spread = np.maximum.reduceat(x, bounds)[0::2]
    spread -= np.minimum.reduceat(x, bounds)[0::2]
    flat = np.repeat(spread <= tolerance, size)
    in_flat = where[flat]
    reached[in_flat] = True if delayed else lasted[in_flat] >= d_ns
    rough = where[~flat]
    if rough.size:
        labels = np.repeat(np.arange(ids.size), size)[~flat]
        reached[rough] = _reaches_in_runs(x[rough], t[rough], labels, tolerance, d_ns, delayed=delayed)
    return reached


def _reaches_in_runs(x: np.ndarray, t: np.ndarray, run: np.ndarray, tolerance: float, d_ns: int, *,
                     delayed: bool) -> np.ndarray:
    """:func:`_stretch_reaches` on the samples of whole runs (`run`: non-decreasing run ids).

    Look-back of sample i: a_i = last sample at or before ``t_i - d_ns``; the
    samples after it have ``t_j > t_i - d_ns``, a half-open window of length
    d_ns, which holds exactly one point of a lattice of step d_ns. Look-ahead
    of sample j: b_j = first sample at or after ``t_j + d_ns``; the samples
    before it, a half-open window ``[t_j, t_j + d_ns)``, hold one lattice point
    too. With blocks ``[L_m, L_m + d_ns)`` of the lattice ``L_m = t_r + m d_ns``
    (t_r the time of the run's first sample) each window is the end of one block
    and the start of the next, so its maximum (and minimum) is one of two
    running maxima within blocks [vHe1992]_ [GW1993]_. A window reaching out of
    the run does not reach: the run's neighbours differ by more than twice the
    tolerance, so cannot both be within it of the same value.
    """
    n = x.size
    lattice = (t - t[np.searchsorted(run, run, side="left")]) // d_ns
    new_block = np.ones(n, dtype=bool)
    new_block[1:] = (run[1:] != run[:-1]) | (lattice[1:] != lattice[:-1])
    block = np.cumsum(new_block) - 1
    high_start, high_end = running_max_in_blocks(x, block)
    low_start, low_end = running_max_in_blocks(-x, block)   # maxima of -x: minus the minima

    i = np.arange(n)
    a = np.searchsorted(t, t - d_ns, side="right") - 1
    back = a >= 0
    back[back] = run[a[back]] == run[back]
    i_b, a_b = i[back], a[back]
    s = a_b + 1                               # first sample after a_i: <= i
    back[back] = _all_within(x, tolerance, i_b, a_b, (high_start, low_start), (high_end, low_end),
                             block[s] != block[i_b], s)
    if not delayed:
        return back
    b = np.searchsorted(t, t + d_ns, side="left")
    ahead = b < n
    ahead[ahead] = run[b[ahead]] == run[ahead]
    j_a, b_a = i[ahead], b[ahead]
    e = b_a - 1                               # last sample before b_j: >= j
    ahead[ahead] = _all_within(x, tolerance, j_a, b_a, (high_end, low_end), (high_start, low_start),
                               block[e] != block[j_a], e)
    # the samples a_i..i of each look-back that reaches and j..b_j of each
    # look-ahead: +1 where an interval opens, -1 after it closes; covered where
    # the running sum is > 0
    opens = np.concatenate((a[back], np.flatnonzero(ahead)))
    closes = np.concatenate((np.flatnonzero(back), b[ahead])) + 1
    edges = np.bincount(opens, minlength=n + 1)
    edges -= np.bincount(closes, minlength=n + 1)
    return np.cumsum(edges[:n]) > 0


def _all_within(x: np.ndarray, tolerance: float, at: np.ndarray, extra: np.ndarray, own, other,
                split: np.ndarray, other_at: np.ndarray) -> np.ndarray:
    """True where x[extra], the samples of the running maxima ``own[at]`` and, where `split`, of
    ``other[other_at]`` are all within `tolerance` of x[at]. `own`, `other`: (maxima of x, maxima of -x)."""
    ok = np.ones(at.size, dtype=bool)
    for sign, mine, theirs in ((1.0, own[0], other[0]), (-1.0, own[1], other[1])):
        m = np.maximum(mine[at], sign * x[extra])
        m[split] = np.maximum(m[split], theirs[other_at[split]])
        # max_j (x_j - x_i), then max_j (x_i - x_j), each rounded once: rounding is
        # monotone, so it equals the largest rounded difference of any single j
        m -= sign * x[at]
        ok &= m <= tolerance
    return ok
