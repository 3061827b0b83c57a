"""Immersion states over time: transitions, states at other instruments' times, emersion
periods and daily exposure.

States are int8 (:data:`qcpipe.arrays.EMERSED` 0, ``IMMERSED`` 1, ``UNKNOWN`` 2). Times are
numpy datetime64 (any unit) or int64 nanoseconds since 1970-01-01, UTC; durations are in
seconds unless named ``_h``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .. import arrays as v
from ..arrays import DAY_NS, EMERSED, IMMERSED, NS, UNKNOWN, as_ns


class Transitions(NamedTuple):
    """Times of the state changes (datetime64[ns])."""

    flooding: np.ndarray
    draining: np.ndarray


def transitions(times, state) -> Transitions:
    """Flooding (dry to wet) and draining (wet to dry) times.

    A change is timed at the first known sample in the new state; unknown
    samples (2) between the two states are skipped. O(n).
    """
    func = "transitions"
    t = v.sorted_ns(times, func=func)
    s = v.as_states(state, func=func, n=t.size)
    k = np.flatnonzero(s != UNKNOWN)
    sk = s[k]
    ch = np.flatnonzero(np.diff(sk) != 0) + 1
    at = t[k[ch]].astype("datetime64[ns]")
    return Transitions(flooding=at[sk[ch] == IMMERSED], draining=at[sk[ch] == EMERSED])


def immersion_at(times_target, times_probe, state_probe, *, max_gap_s: float) -> np.ndarray:
    """State of the probe at other instruments' sample times.

    Each target time takes the state of the latest probe sample at or before
    it, if that sample is at most `max_gap_s` seconds earlier; otherwise 2.
    `times_target` need not be sorted; `times_probe` must be non-decreasing.
    O((m + n) log n) by :func:`numpy.searchsorted`.

    Returns
    -------
    numpy.ndarray of int8, shape of `times_target`
    """
    func = "immersion_at"
    tt = as_ns(times_target, func=func, name="times_target")
    tp = v.sorted_ns(times_probe, func=func, name="times_probe")
    sp = v.as_states(state_probe, func=func, n=tp.size)
    gap_ns = int(round(v.positive(max_gap_s, func=func, name="max_gap_s", allow_zero=True) * NS))
    j = np.searchsorted(tp, tt, side="right") - 1
    found = j >= 0
    jj = np.maximum(j, 0)
    if tp.size == 0:
        return np.full(tt.shape, UNKNOWN, dtype=np.int8)
    found &= (tt - tp[jj]) <= gap_ns
    return np.where(found, sp[jj], UNKNOWN).astype(np.int8)


@dataclass(frozen=True)
class ExposurePeriods:
    """Emersion periods in time order.

    Attributes
    ----------
    start, end : numpy.ndarray of datetime64[ns]
        First emersed sample; first immersed sample after the period (or, if
        the period ends at an unknown sample or the record end, its last
        emersed sample).
    duration_s : numpy.ndarray of float64
        ``end - start`` in seconds.
    max_temperature, mean_temperature : numpy.ndarray of float64
        Of the temperature samples in the period (NaN if none or not given).
    start_observed, end_observed : numpy.ndarray of bool
        The sample before the period is immersed / the sample after it is
        immersed (False at the record ends and next to unknown samples).
    """

    start: np.ndarray
    end: np.ndarray
    duration_s: np.ndarray
    max_temperature: np.ndarray
    mean_temperature: np.ndarray
    start_observed: np.ndarray
    end_observed: np.ndarray

    def __len__(self) -> int:
        return int(self.start.size)

    @property
    def complete(self) -> np.ndarray:
        """Both the draining and the flooding that bound the period were seen."""
        return self.start_observed & self.end_observed


def interval_stats(tt, temp, lo_ns, hi_ns, closed_end):
    """Max and mean of finite `temp` with ``lo <= tt < hi`` (``<= hi`` where closed).

    Intervals sorted and not overlapping. O(n + p) by cumulative sums and
    :func:`numpy.maximum.reduceat`. NaN for an interval without a finite value.
    """
    lo = np.searchsorted(tt, lo_ns, side="left")
    hi = np.where(closed_end, np.searchsorted(tt, hi_ns, side="right"),
                  np.searchsorted(tt, hi_ns, side="left"))
    hi = np.maximum(hi, lo)
    fin = np.isfinite(temp)
    ref = float(temp[fin][0]) if fin.any() else 0.0
    c = np.concatenate(([0], np.cumsum(fin)))
    s1 = np.concatenate(([0.0], np.cumsum(np.where(fin, temp - ref, 0.0))))
    n = c[hi] - c[lo]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n > 0, ref + (s1[hi] - s1[lo]) / n, np.nan)
    if lo.size == 0:
        return np.zeros(0), mean
    padded = np.concatenate((np.where(fin, temp, -np.inf), [-np.inf]))
    mx = np.maximum.reduceat(padded, np.column_stack((lo, hi)).ravel())[::2]
    mx = np.where((n > 0) & (hi > lo), mx, np.nan)
    return mx, mean


def _temperature(temperature_times, temperature, t, func):
    if temperature is None:
        return None, None
    temp = v.as_1d(v.as_values(temperature, func=func, name="temperature"), func=func, name="temperature")
    tt = t if temperature_times is None else v.sorted_ns(temperature_times, func=func, name="temperature_times")
    v.same_shape(temp, tt, func=func, names=("temperature", "temperature_times"))
    return tt, temp


def exposure_periods(times, state, temperature_times=None, temperature=None) -> ExposurePeriods:
    """Emersion periods: maximal runs of consecutive emersed (0) samples.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Probe sample times, non-decreasing (UTC).
    state : array_like of int, shape (n,)
        0 emersed, 1 immersed, 2 unknown (e.g. from :func:`classify_immersion`).
    temperature_times : array_like of datetime64 or int64 ns, optional
        Times of `temperature`, non-decreasing; default `times`.
    temperature : array_like of float, optional
        Temperature (degC) of a logger at the station; NaN marks missing.

    Returns
    -------
    ExposurePeriods

    Notes
    -----
    An unknown sample ends a period. The period runs from its first emersed
    sample to the next sample when that one is immersed (the same convention
    as :func:`transitions`, so durations are not biased by the sampling);
    otherwise to its last emersed sample. Temperatures are those sampled in
    ``[start, end)`` (``[start, end]`` when the period does not end at an
    immersed sample). Definition: common practice, no source. O(n).
    """
    func = "exposure_periods"
    t = v.sorted_ns(times, func=func)
    s = v.as_states(state, func=func, n=t.size)
    tt, temp = _temperature(temperature_times, temperature, t, func)
    n = s.size
    d = np.diff(np.concatenate(([0], (s == EMERSED).astype(np.int8), [0])))
    first, after = np.flatnonzero(d == 1), np.flatnonzero(d == -1)
    end_obs = (after < n) & (s[np.minimum(after, n - 1)] == IMMERSED) if n else after > 0
    start_obs = (first > 0) & (s[np.maximum(first - 1, 0)] == IMMERSED) if n else first > 0
    start = t[first] if n else np.zeros(0, np.int64)
    end = t[np.where(end_obs, after, after - 1)] if n else np.zeros(0, np.int64)
    if temp is None:
        mx = mean = np.full(first.size, np.nan)
    else:
        mx, mean = interval_stats(tt, temp, start, end, ~end_obs)
    return ExposurePeriods(
        start=start.astype("datetime64[ns]"),
        end=end.astype("datetime64[ns]"),
        duration_s=(end - start) / NS,
        max_temperature=mx,
        mean_temperature=mean,
        start_observed=start_obs,
        end_observed=end_obs,
    )


@dataclass(frozen=True)
class DailyExposure:
    """Emersion per UTC day.

    Attributes
    ----------
    day : numpy.ndarray of datetime64[D]
    emersed_h : numpy.ndarray of float64
        Hours emersed within the day.
    n_emersions : numpy.ndarray of int64
        Emersion periods with a part in the day (one crossing midnight counts
        on both days).
    longest_emersion_h : numpy.ndarray of float64
        Longest part of an emersion period within the day, hours (0 if none).
    max_temperature : numpy.ndarray of float64
        Highest temperature sampled while emersed within the day (NaN if none).
    """

    day: np.ndarray
    emersed_h: np.ndarray
    n_emersions: np.ndarray
    longest_emersion_h: np.ndarray
    max_temperature: np.ndarray


def daily_exposure(periods: ExposurePeriods, *, temperature_times=None, temperature=None,
                   days=None) -> DailyExposure:
    """Hours emersed, emersions, longest emersion and aerial maximum per UTC day.

    Parameters
    ----------
    periods : ExposurePeriods
        From :func:`exposure_periods`.
    temperature_times, temperature : array_like, optional
        Temperature series (times non-decreasing; degC) for the daily maximum
        while emersed. Both are needed (the period maxima cannot be split at
        midnight); without them `max_temperature` is NaN.
    days : array_like of datetime64[D], optional
        Days to report; default every day from the first period's start to the
        last period's end. Days without emersion report 0 h.

    Returns
    -------
    DailyExposure

    Notes
    -----
    Each period ``[start, end)`` is cut at UTC midnights into pieces; a piece
    belongs to the day it lies in. A day's values come from its pieces.
    Definition: common practice, no source. O(number of pieces + samples).
    """
    func = "daily_exposure"
    if not isinstance(periods, ExposurePeriods):
        raise TypeError(f"{func}: periods must be ExposurePeriods; found {type(periods).__name__}")
    if (temperature is None) != (temperature_times is None):
        raise ValueError(f"{func}: give both temperature_times and temperature, or neither")
    s = periods.start.view(np.int64)
    e = periods.end.view(np.int64)
    d0 = s // DAY_NS
    d1 = np.maximum(d0, (e - 1) // DAY_NS)
    count = d1 - d0 + 1
    rep = np.repeat(np.arange(s.size), count)
    k = np.arange(rep.size) - np.repeat(np.cumsum(count) - count, count)
    pday = d0[rep] + k
    ps = np.maximum(s[rep], pday * DAY_NS)
    pe = np.minimum(e[rep], (pday + 1) * DAY_NS)
    if days is None:
        day = np.arange(pday.min(), pday.max() + 1) if pday.size else np.zeros(0, np.int64)
    else:
        day = np.asarray(days).astype("datetime64[D]").view(np.int64)
    pos = np.searchsorted(day, pday)
    if day.size:
        inside = (pos < day.size) & (day[np.minimum(pos, day.size - 1)] == pday)
    else:
        inside = np.zeros(pday.size, dtype=bool)
    pos, hours = pos[inside], ((pe - ps) / (3600 * NS))[inside]
    emersed = np.bincount(pos, weights=hours, minlength=day.size)
    n_em = np.bincount(pos, minlength=day.size).astype(np.int64)
    longest = np.zeros(day.size)
    np.maximum.at(longest, pos, hours)
    tmax = np.full(day.size, np.nan)
    if temperature is not None:
        tt, temp = _temperature(temperature_times, temperature, None, func)
        last_piece = k == count[rep] - 1
        closed = last_piece & ~periods.end_observed[rep]
        mx, _ = interval_stats(tt, temp, ps, pe, closed)
        np.fmax.at(tmax, pos, mx[inside])
    return DailyExposure(
        day=day.astype("datetime64[D]"),
        emersed_h=emersed,
        n_emersions=n_em,
        longest_emersion_h=longest,
        max_temperature=tmax,
    )
