"""The clock lag of a logger without transitions of its own, from its steps at the station's wet/dry transitions.

A temperature record at an intertidal station jumps when the water covers or leaves the
logger (water and air differ by degrees).  The times of those jumps, matched to the wet/dry
transitions of the station's immersion probe, give the logger's clock lag against the probe's:
about zero when both loggers share one clock error, the probe's error with the opposite sign
when only the probe is wrong.  Sign convention as in :mod:`qcpipe.tide.crossings`: a lag is
the logger's step time minus the transition time, positive when the logger's times are late
(its clock ahead).

Pure numpy; nothing reads or writes files.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import arrays as v
from ..arrays import NS
from .crossings import median_and_spread, sorted_times


@dataclass(frozen=True)
class StepLag:
    """Result of :func:`step_lag`."""

    lag_s: float  #: median of the per-transition lags (step time - transition time), s; NaN if none
    spread_s: float  #: 1.4826 * MAD of the per-transition lags, s
    n_matched: int  #: transitions with a step found near the common lag
    n_transitions: int  #: transitions inside the logger's record
    contrast: float  #: mean |step| at the common lag over the median of the mean |step| over all lags
    found: bool  #: enough matched transitions and a clear peak (the record follows immersion)


def _steps(t: np.ndarray, x: np.ndarray, max_gap_s: float | None) -> tuple[np.ndarray, np.ndarray, float]:
    """Midpoint times (ns), sizes |x[j+1] - x[j]| of the steps between successive valid samples, and the
    median sampling interval (s); steps across a gap longer than ``max_gap_s`` are dropped."""
    ok = np.isfinite(x)
    t, x = t[ok], x[ok]
    if t.size < 2:
        return np.zeros(0, np.int64), np.zeros(0), math.nan
    dt = np.diff(t)
    h = float(np.median(dt)) / NS
    gap = 3.0 * h if max_gap_s is None else max_gap_s
    keep = dt <= gap * NS
    mid = t[:-1] + dt // 2
    return mid[keep], np.abs(np.diff(x))[keep], h


def step_lag(
    times,
    values,
    transitions,
    *,
    max_lag_s: float = 3 * 3600,
    match_s: float | None = None,
    max_gap_s: float | None = None,
    min_contrast: float = 3.0,
    min_transitions: int = 4,
) -> StepLag:
    """Clock lag of a logger from the times of its largest steps at the station's wet/dry transitions.

    Parameters
    ----------
    times : array_like of datetime64 or int64 ns, shape (n,)
        Sample times of the logger (its own clock, as archived), non-decreasing.
    values : array_like of float, shape (n,)
        Its readings (e.g. temperature, degC); NaN samples are skipped.
    transitions : array_like of datetime64 or int64 ns
        The station's wet/dry transitions (floods and drains together), non-decreasing,
        e.g. the probe's ``transition_time``.
    max_lag_s : float
        Lags from ``-max_lag_s`` to ``+max_lag_s`` are searched, s (default 3 h).
    match_s : float or None
        Half-width of the window around the common lag in which each transition's
        largest step is taken, s (default two sampling intervals).
    max_gap_s : float or None
        Steps across a longer gap between valid samples are not used, s (default three
        sampling intervals).
    min_contrast, min_transitions
        The lag is ``found`` when the peak of the superposed steps is at least
        `min_contrast` times their median level and at least `min_transitions`
        transitions have a step near it.

    Returns
    -------
    StepLag

    Notes
    -----
    A step j lies between successive valid samples, at their midpoint ``s_j`` (as
    :func:`qcpipe.tide.crossings.observed_transitions` times a transition), with size
    ``a_j = |x_{j+1} - x_j|``.  With the sampling interval h (the median) as bin width,

    1. superposed epochs: every pair of a step and a transition with
       ``|s_j - r_k| <= max_lag_s`` adds ``a_j`` to the bin of ``s_j - r_k``; the mean
       size per bin is highest at the common lag ``L0`` (the bin centre), and
       ``contrast`` is that mean over the median of the bins' means;
    2. per transition, the largest step with ``|s_j - r_k - L0| <= match_s`` gives that
       transition's lag ``s_j - r_k``; ``lag_s`` is their median and ``spread_s``
       1.4826 times their median absolute deviation [RC1993]_.

    The size of the jump, not its sign, is used: water may be warmer or colder than air.
    A step's time is within h/2 of the true jump, so a lag is resolved to about h/2
    per transition and better in the median.  Superposed epoch analysis: common
    practice, no source.  Cost O(P log P) for P step-transition pairs, P about
    ``n * (1 + 2 max_lag_s / mean transition spacing)``.
    """
    func = "step_lag"
    t = v.as_ns(times, func=func, name="times")
    x = v.as_1d(v.as_values(values, func=func, name="values"), func=func, name="values")
    v.same_shape(x, t, func=func, names=("values", "times"))
    v.check_non_decreasing(t, func=func, name="times")
    r = sorted_times(transitions, func=func, name="transitions")
    max_lag = v.positive(max_lag_s, func=func, name="max_lag_s")
    v.positive(min_contrast, func=func, name="min_contrast")
    min_n = v.count(min_transitions, func=func, name="min_transitions", minimum=1)
    if max_gap_s is not None:
        v.positive(max_gap_s, func=func, name="max_gap_s")
    s, a, h = _steps(t, x, max_gap_s)
    inside = r[(r >= t[0]) & (r <= t[-1])] if t.size else r[:0]
    none = StepLag(math.nan, math.nan, 0, int(inside.size), math.nan, False)
    if s.size == 0 or r.size == 0 or not h > 0:
        return none
    match = 2.0 * h if match_s is None else v.positive(match_s, func=func, name="match_s")
    # every (step, transition) pair within max_lag of each other
    lo = np.searchsorted(r, s - int(max_lag * NS), side="left")
    hi = np.searchsorted(r, s + int(max_lag * NS), side="right")
    counts = hi - lo
    total = int(counts.sum())
    if total == 0:
        return none
    step = np.repeat(np.arange(s.size), counts)
    first = np.repeat(np.cumsum(counts) - counts, counts)
    k = np.repeat(lo, counts) + (np.arange(total) - first)
    d = (s[step] - r[k]).astype(np.float64) / NS
    size = a[step]
    # 1. superposed epochs on bins of one sampling interval centred on multiples of h
    nbin = int(math.floor(max_lag / h + 0.5))
    b = np.rint(d / h).astype(np.int64) + nbin
    ok = (b >= 0) & (b <= 2 * nbin)
    sums = np.bincount(b[ok], weights=size[ok], minlength=2 * nbin + 1)
    cnt = np.bincount(b[ok], minlength=2 * nbin + 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(cnt > 0, sums / np.maximum(cnt, 1), np.nan)
    if not np.isfinite(mean).any():
        return none
    j = int(np.nanargmax(mean))
    lag0 = (j - nbin) * h
    level = float(np.nanmedian(mean))
    contrast = float(mean[j] / level) if level > 0 else math.inf
    # 2. each transition's largest step near the common lag
    near = np.abs(d - lag0) <= match
    kk, dd, ss = k[near], d[near], size[near]
    order = np.lexsort((-ss, kk))
    kk, dd = kk[order], dd[order]
    head = np.ones(kk.size, bool)
    head[1:] = kk[1:] != kk[:-1]
    lags = dd[head]
    med, spread = median_and_spread(lags)
    found = bool(lags.size >= min_n and contrast >= min_contrast)
    return StepLag(med, spread, int(lags.size), int(inside.size), contrast, found)


def shares_error(lag_s: float, probe_offset_s: float) -> bool:
    """Whether a logger whose lag against the probe's transitions is ``lag_s`` shares the probe's clock error.

    The logger's own clock error is ``lag_s + probe_offset_s``; it is taken to share the
    probe's error when that is nearer the probe's error than zero, ``|lag_s| < |probe_offset_s| / 2``
    (common practice, no source).
    """
    return bool(np.isfinite(lag_s) and np.isfinite(probe_offset_s) and abs(lag_s) < abs(probe_offset_s) / 2)
