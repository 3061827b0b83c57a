"""Crossings of a level by the tide, observed wet/dry transitions, their offsets and lag.

The clock verdict built on them is in :mod:`qcpipe.tide.clock`, the effective
elevation of the sensing point in :mod:`qcpipe.tide.elevation`.

Everything here is analysis of arrays held in memory; nothing reads or writes
files. Times are numpy datetime64 (any unit) or int64 nanoseconds since
1970-01-01 (UTC); durations are float seconds. Immersion states are int8
1 immersed, 0 emersed, 2 unknown.

Sign convention (used throughout)
---------------------------------
An *offset* is ``observed - predicted`` in seconds. If the logger clock runs
ahead of true time by ``d`` seconds (its timestamps are ``true time + d``), each
transition is stamped ``d`` late and the offset is ``+d``. So a positive offset
means the observed transitions come late relative to the prediction, i.e. the
logger timestamps are ahead of the time base of the prediction (UTC); correct
the record by subtracting the offset from its times. A logger left on local
time UTC+1 and read as UTC gives +3600 s.

References
----------
.. [RC1993] See ``docs/references.md``, key RC1993.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .. import arrays as v
from ..arrays import NS, as_ns, check_non_decreasing

#: Scale factor making the median absolute deviation a consistent estimate of
#: the standard deviation for normal data [RC1993]_.
MAD_SCALE = 1.4826


class Crossings(NamedTuple):
    """Times at which the sensing point floods (goes wet) and drains (goes dry).

    Same fields as :class:`qcpipe.tide.exposure.Transitions`, so either can be
    passed on.
    """

    flooding: np.ndarray  #: datetime64[ns], sorted
    draining: np.ndarray  #: datetime64[ns], sorted


@dataclass(frozen=True)
class TransitionOffsets:
    """Observed transitions matched to predicted ones (see :func:`transition_offsets`)."""

    flood_offsets_s: np.ndarray  #: per observed flood, s; NaN if unmatched
    drain_offsets_s: np.ndarray  #: per observed drain, s; NaN if unmatched
    median_s: float  #: median of all matched offsets, s
    flood_median_s: float  #: median of matched flood offsets, s
    drain_median_s: float  #: median of matched drain offsets, s
    common_s: float  #: mean of the two kind medians: the part shared by both kinds, s
    spread_s: float  #: 1.4826 * MAD of offsets about the median of their kind, s
    n_matched: int
    n_unmatched: int


@dataclass(frozen=True)
class LagEstimate:
    """Result of :func:`wet_dry_lag`."""

    lag_s: float  #: shift of the observed series behind the prediction, s
    peak: float  #: correlation at the best lag on the grid, in [-1, 1]
    at_limit: bool  #: True if the peak reaches +-max_lag_s (lag_s not refined)


def reference_series(times, level, *, func: str, names=("times", "level")):
    t = as_ns(times, func=func, name=names[0])
    x = v.as_1d(v.as_values(level, func=func, name=names[1]), func=func, name=names[1])
    v.same_shape(x, t, func=func, names=(names[1], names[0]))
    check_non_decreasing(t, func=func, name=names[0])
    return t, x


def sorted_times(times, *, func: str, name: str) -> np.ndarray:
    arr = np.asarray(times)
    if arr.ndim == 1 and arr.size == 0:
        return np.zeros(0, dtype=np.int64)
    t = as_ns(arr, func=func, name=name)
    check_non_decreasing(t, func=func, name=name)
    return t


def median_and_spread(x: np.ndarray) -> tuple[float, float]:
    """(median, 1.4826 * MAD) of the finite values; NaN, NaN if there are none."""
    x = x[np.isfinite(x)]
    if x.size == 0:
        return math.nan, math.nan
    m = float(np.median(x))
    return m, MAD_SCALE * float(np.median(np.abs(x - m)))


def _as_dt(ns: np.ndarray) -> np.ndarray:
    return ns.astype(np.int64).view("datetime64[ns]")


def predicted_crossings(times, level, *, elevation_m: float) -> Crossings:
    """Times at which a reference level series crosses the elevation of a sensing point.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Times of the reference series, non-decreasing.
    level : array_like of float, shape (n,)
        Reference water level (predicted or observed), m above the datum; NaN
        samples are skipped.
    elevation_m : float
        Elevation of the sensing point, m above the same datum.

    Returns
    -------
    Crossings
        ``flooding``: upward crossings (the point goes under water), ``draining``:
        downward crossings, each datetime64[ns], sorted.

    Notes
    -----
    "Wet" means ``level > elevation_m`` (a level exactly at the elevation is
    dry). Between successive valid samples j, k with levels ``L_j, L_k`` a
    flood lies where ``L_j <= z < L_k`` and a drain where ``L_j > z >= L_k``;
    its time is found by linear interpolation,

    .. math:: t_c = t_j + \\frac{z - L_j}{L_k - L_j} (t_k - t_j),

    rounded to the nanosecond. Linear interpolation of a smooth tide sampled
    every h seconds errs by about ``h**2 / 8 * |L''| / |L'|`` in time. Crossings
    are interpolated across NaN gaps too. Cost O(n).
    """
    func = "predicted_crossings"
    t, x = reference_series(times, level, func=func)
    z = v.real_number(elevation_m, func=func, name="elevation_m")
    ok = ~np.isnan(x)
    t, x = t[ok], x[ok]
    wet = x > z
    step = np.flatnonzero(wet[1:] != wet[:-1])  # crossing between step and step + 1
    lj, lk = x[step], x[step + 1]
    frac = (z - lj) / (lk - lj)
    tc = t[step] + np.rint(frac * (t[step + 1] - t[step]).astype(np.float64)).astype(np.int64)
    up = wet[step + 1]
    return Crossings(flooding=_as_dt(tc[up]), draining=_as_dt(tc[~up]))


def observed_transitions(times, state) -> Crossings:
    """Times at which an observed immersion series changes state.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing.
    state : array_like of int, shape (n,)
        Immersion state: 1 immersed, 0 emersed, 2 unknown.

    Returns
    -------
    Crossings
        ``flooding``: emersed to immersed, ``draining``: immersed to emersed, each
        datetime64[ns], sorted.

    Notes
    -----
    Unknown samples are skipped. A transition between successive known
    samples j and k is placed at the midpoint ``(t_j + t_k) / 2``: the change
    happened somewhere in between, and for a change equally likely anywhere
    in the interval the midpoint is unbiased, with an error of at most half
    the interval. (:func:`qcpipe.tide.exposure.transitions` times a change
    at the first sample in the new state instead, which is late by half a
    sample interval on average: 2.5 min at 5-min sampling, a bias in every
    clock offset.) Definition: common practice, no source. Cost O(n).
    """
    t, s = v.times_and_state(times, state, func="observed_transitions")
    known = s != 2
    t, s = t[known], s[known]
    step = np.flatnonzero(s[1:] != s[:-1])
    mid = t[step] + (t[step + 1] - t[step]) // 2
    up = s[step + 1] == 1
    return Crossings(flooding=_as_dt(mid[up]), draining=_as_dt(mid[~up]))


def _nearest_offsets(obs: np.ndarray, pred: np.ndarray, max_ns: float) -> np.ndarray:
    """Offset (s) of each observed time to the nearest predicted time; NaN if
    none lies within `max_ns`. `pred` sorted. O((n + m) log m)."""
    if pred.size == 0:
        return np.full(obs.shape, np.nan)
    i = np.searchsorted(pred, obs)
    before = pred[np.clip(i - 1, 0, pred.size - 1)]
    after = pred[np.clip(i, 0, pred.size - 1)]
    d_before = (obs - before).astype(np.float64)
    d_after = (obs - after).astype(np.float64)
    d = np.where(np.abs(d_before) <= np.abs(d_after), d_before, d_after)
    return np.where(np.abs(d) <= max_ns, d / NS, np.nan)


def transition_offsets(
    observed_flood,
    observed_drain,
    predicted_flood,
    predicted_drain,
    *,
    max_offset_s: float = 3 * 3600,
) -> TransitionOffsets:
    """Offsets of observed transitions from the nearest predicted ones of the same kind.

    Parameters
    ----------
    observed_flood, observed_drain : array_like of datetime64 or int64 ns
        Observed flood and drain times (e.g. from :func:`observed_transitions`).
    predicted_flood, predicted_drain : array_like of datetime64 or int64 ns
        Predicted flood and drain times (e.g. from :func:`predicted_crossings`),
        each non-decreasing.
    max_offset_s : float
        Largest ``|offset|`` accepted as a match, in seconds (> 0; default
        3 h, well under the quarter of a semidiurnal period that separates a
        flood from the next drain at mid-tide).

    Returns
    -------
    TransitionOffsets
        Per-transition offsets ``observed - predicted`` in seconds (NaN when no
        predicted transition of the same kind lies within `max_offset_s`; the
        limit itself matches), their pooled median, the median of each kind,
        ``common_s = (flood_median_s + drain_median_s) / 2`` (the median of the
        one kind present if only one is), the spread, and the counts.

    Notes
    -----
    Positive offset: the observed transition is late relative to the
    prediction (logger clock ahead; see the module notes).

    A clock error shifts floods and drains alike; an error in the elevation of
    the sensing point shifts them in opposite directions (a point higher than
    assumed floods later and drains earlier). ``common_s`` keeps the first and
    cancels most of the second; ``(flood_median_s - drain_median_s) / 2`` is
    the part due to elevation. For the same reason the spread is taken about
    the median of each kind:

    .. math:: s = 1.4826 \\, \\mathrm{median}_i \\left| o_i - \\mathrm{median}_{k(i)} \\right|

    where ``k(i)`` is the kind of transition i; the factor 1.4826 makes the
    median absolute deviation a consistent estimate of the standard deviation
    for normal errors [RC1993]_. NaN where nothing matched. Cost
    O((n + m) log m) for n observed and m predicted transitions.
    """
    func = "transition_offsets"
    of = sorted_times(observed_flood, func=func, name="observed_flood")
    od = sorted_times(observed_drain, func=func, name="observed_drain")
    pf = sorted_times(predicted_flood, func=func, name="predicted_flood")
    pd = sorted_times(predicted_drain, func=func, name="predicted_drain")
    max_ns = v.duration_ns(max_offset_s, func=func, name="max_offset_s")

    flood = _nearest_offsets(of, pf, max_ns)
    drain = _nearest_offsets(od, pd, max_ns)
    both = np.concatenate((flood, drain))
    matched = np.isfinite(both)
    fm, _ = median_and_spread(flood)
    dm, _ = median_and_spread(drain)
    median, _ = median_and_spread(both)
    common = float(np.nanmean([fm, dm])) if np.isfinite([fm, dm]).any() else math.nan
    resid = np.concatenate((flood - fm, drain - dm))
    resid = resid[np.isfinite(resid)]
    spread = MAD_SCALE * float(np.median(np.abs(resid))) if resid.size else math.nan
    return TransitionOffsets(
        flood_offsets_s=flood,
        drain_offsets_s=drain,
        median_s=median,
        flood_median_s=fm,
        drain_median_s=dm,
        common_s=common,
        spread_s=spread,
        n_matched=int(matched.sum()),
        n_unmatched=int((~matched).sum()),
    )


def _predicted_sign(ref_t: np.ndarray, ref_x: np.ndarray, at: np.ndarray, z: float) -> np.ndarray:
    """+1 where the interpolated reference level at `at` is above z, -1 at or
    below, 0 outside the reference or where it is NaN."""
    lv = np.interp(at, ref_t, ref_x, left=np.nan, right=np.nan)
    with np.errstate(invalid="ignore"):
        return np.where(np.isnan(lv), 0.0, np.where(lv > z, 1.0, -1.0))


def wet_dry_lag(
    times,
    state,
    ref_times,
    ref_level,
    *,
    elevation_m: float,
    max_lag_s: float = 3 * 3600,
    step_s: float = 60,
) -> LagEstimate:
    """Constant time shift of an observed immersion series by cross-correlation.

    Parameters
    ----------
    times : array_like of datetime64 or int64 ns, shape (n,)
        Sample times of the immersion series (logger clock), non-decreasing.
    state : array_like of int, shape (n,)
        Immersion state: 1 immersed, 0 emersed, 2 unknown.
    ref_times : array_like of datetime64 or int64 ns, shape (m,)
        Times of the reference level series (UTC), non-decreasing.
    ref_level : array_like of float, shape (m,)
        Reference water level, m above the datum of `elevation_m`.
    elevation_m : float
        Elevation of the sensing point, m above the same datum.
    max_lag_s : float
        Lags from ``-max_lag_s`` to ``+max_lag_s`` are tried, in seconds (> 0).
    step_s : float
        Lag step in seconds (> 0, at most `max_lag_s`).

    Returns
    -------
    LagEstimate
        ``lag_s``: the centre of the peak of the correlation (see Notes);
        ``peak``: the highest correlation on the lag grid; ``at_limit``: True
        when the peak reaches an end of the lag range (``lag_s`` is then the
        best grid lag, unrefined, and the true shift may lie beyond).

    Notes
    -----
    With ``o_i = +1`` immersed, ``-1`` emersed, ``0`` unknown, and ``p(t) = +1``
    where the interpolated reference level at t is above `elevation_m`, ``-1``
    otherwise (0 outside the reference),

    .. math:: C(L) = \\frac{\\sum_i o_i \\, p(t_i - L)}{\\#\\{i : o_i p(t_i - L) \\ne 0\\}}

    A positive L means the observed series is the predicted one delayed by L:
    the same sign as the transition offsets (logger clock ahead).

    Refinement: for two wet/dry series C is piecewise linear near its peak,
    falling by about ``2 N / T`` per second of lag (N observed transitions
    over a span T). When the sensing point sits higher or lower than assumed,
    its wet spells are shorter or longer than the predicted ones and C has a
    flat top as wide as the difference, on which the highest grid value is
    arbitrary. So the lag is taken as the centre of the interval around the
    highest grid value where C stays within ``delta = 2 N / T * 2 step_s`` of
    it, its two ends interpolated linearly between grid lags. For a sharp
    symmetric peak this is the apex; for a flat top, its middle. The
    reference level is interpolated
    at the shifted times directly, so no resampling is needed. Cost
    O(n * K + K log m) for K = 2 * max_lag_s / step_s + 1 lags, in blocks of
    lags to bound memory (well under a second for six weeks at 5 min and
    K = 361).
    Definition: common practice, no source.
    """
    func = "wet_dry_lag"
    t, s = v.times_and_state(times, state, func=func)
    rt, rx = reference_series(ref_times, ref_level, func=func, names=("ref_times", "ref_level"))
    z = v.real_number(elevation_m, func=func, name="elevation_m")
    max_lag = v.positive(max_lag_s, func=func, name="max_lag_s")
    step = v.positive(step_s, func=func, name="step_s")
    v.ordered(step, max_lag, func=func, names=("step_s", "max_lag_s"), strict=False)

    o = np.where(s == 1, 1.0, np.where(s == 0, -1.0, 0.0))
    keep = o != 0
    o, tf = o[keep], t[keep].astype(np.float64)
    rtf = rt.astype(np.float64)
    k = int(math.floor(max_lag / step + 1e-9))
    lags = np.arange(-k, k + 1) * step
    corr = np.full(lags.size, np.nan)
    block = max(1, 2_000_000 // max(o.size, 1))
    for b in range(0, lags.size, block):
        lag_ns = lags[b:b + block, None] * NS
        p = _predicted_sign(rtf, rx, tf[None, :] - lag_ns, z)
        prod = o[None, :] * p
        n = np.count_nonzero(prod, axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            corr[b:b + block] = np.where(n > 0, prod.sum(axis=1) / n, np.nan)
    if not np.isfinite(corr).any():
        return LagEstimate(lag_s=math.nan, peak=math.nan, at_limit=False)
    n_trans = np.count_nonzero(o[1:] != o[:-1])
    span_s = (tf[-1] - tf[0]) / NS if tf.size > 1 else 0.0
    slope = 2.0 * n_trans / span_s if span_s > 0 else 0.0  # dC/dL per second of lag
    return _peak_centre(lags, corr, delta=max(slope * 2 * step, 1e-9))


def _peak_centre(lags: np.ndarray, corr: np.ndarray, *, delta: float) -> LagEstimate:
    """Centre of the interval around the highest grid value where the correlation
    stays within `delta` of it, the two ends found by linear interpolation."""
    c = np.where(np.isfinite(corr), corr, -np.inf)
    j = int(np.argmax(c))
    level = c[j] - delta
    below = np.flatnonzero(c < level)
    left, right = below[below < j], below[below > j]
    if left.size == 0 or right.size == 0:
        return LagEstimate(lag_s=float(lags[j]), peak=float(c[j]), at_limit=True)
    a, b = left[-1], right[0]  # c[a] < level <= c[a + 1]; c[b - 1] >= level > c[b]
    step = lags[1] - lags[0]
    lo = lags[a] + step * (level - c[a]) / (c[a + 1] - c[a])
    hi = lags[b - 1] + step * (c[b - 1] - level) / (c[b - 1] - c[b])
    return LagEstimate(lag_s=float(0.5 * (lo + hi)), peak=float(c[j]), at_limit=False)
