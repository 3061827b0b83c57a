"""Immersion state from a wet/dry probe: threshold, hysteresis, transitions, exposure.

States are int8: 1 immersed (wet), 0 emersed (dry), 2 unknown (missing reading,
or no probe sample close enough). Times are numpy datetime64 (any unit) or int64
nanoseconds since 1970-01-01, UTC; durations are in seconds unless named ``_h``.

Typical readings of a small capacitive probe (common practice, no source): about
0.06 nF in air and about 0.17 nF in water. Water's relative permittivity is
about 80 at 20 degC [CRC]_ (from memory), but a probe's electrodes are coated, and
the coating's capacitance in series with the water keeps the wet reading far
below 80 times the dry one.

References
----------
.. [Otsu1979] See ``docs/references.md``, key Otsu1979.
.. [CRC] See ``docs/references.md``, key CRC.
.. [CODATA2018] See ``docs/references.md``, key CODATA2018.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
import scipy.constants

from .. import arrays as v
from ..arrays import as_ns, check_non_decreasing, series

EMERSED, IMMERSED, UNKNOWN = np.int8(0), np.int8(1), np.int8(2)

#: Typical dry and wet readings of a small capacitive probe, nF (common practice, no source).
AIR_READING_NF = 0.06
WATER_READING_NF = 0.17
#: Relative permittivity of water at about 20 degC [CRC]_ (from memory).
WATER_RELATIVE_PERMITTIVITY = 80.0
#: Below this :func:`bimodality_score` a probe is "not clearly bimodal".
BIMODALITY_CUTOFF = 0.9

_NS = 1_000_000_000
_DAY_NS = 86400 * _NS


def capacitance_from_geometry(area_m2, separation_m, *, relative_permittivity=1.0):
    r"""Capacitance of an ideal parallel-plate capacitor, in farads.

    .. math:: C = \varepsilon_0 \varepsilon_r A / d

    with :math:`\varepsilon_0` the vacuum permittivity (CODATA value from
    :data:`scipy.constants.epsilon_0`, [CODATA2018]_), `area_m2` A in m²,
    `separation_m` d in m, `relative_permittivity` :math:`\varepsilon_r`
    (about 1 for air, about 80 for water [CRC]_). Fringe fields and electrode
    coatings are ignored.
    """
    area = np.asarray(area_m2, dtype=np.float64)
    d = np.asarray(separation_m, dtype=np.float64)
    if np.any(area <= 0) or np.any(d <= 0):
        raise ValueError(
            f"capacitance_from_geometry: area_m2 = {area_m2!r} and separation_m = "
            f"{separation_m!r}; both must be > 0"
        )
    return scipy.constants.epsilon_0 * np.asarray(relative_permittivity, dtype=np.float64) * area / d


def _finite(readings, func: str) -> np.ndarray:
    x = v.as_values(readings, func=func, name="readings").ravel()
    return x[np.isfinite(x)]


def otsu_threshold(readings, nbins: int = 256) -> float:
    r"""Threshold that maximises the between-class variance of a histogram [Otsu1979]_.

    Parameters
    ----------
    readings : array_like of float
        Probe readings (any shape, any unit); NaN and infinite values ignored.
    nbins : int, default 256
        Number of equal-width histogram bins between the smallest and largest
        finite reading.

    Returns
    -------
    float
        The bin edge :math:`e_{k^*+1}` between the two classes, in the unit of
        `readings`: readings below it form the lower class. NaN when there are
        fewer than two distinct finite readings.

    Notes
    -----
    With :math:`p_i` the fraction of readings in bin i (centre :math:`c_i`),
    :math:`\omega(k) = \sum_{i \le k} p_i`, :math:`\mu(k) = \sum_{i \le k} p_i
    c_i` and :math:`\mu_T = \mu(K-1)`, the between-class variance of the split
    after bin k is ([Otsu1979]_, from memory)

    .. math:: \sigma_B^2(k) = \frac{(\mu_T \omega(k) - \mu(k))^2}{\omega(k)(1 - \omega(k))}

    and :math:`k^*` is its maximiser. Between two well-separated groups the
    bins in between are empty and :math:`\sigma_B^2` is flat over them (equal
    to rounding); the threshold is then the middle of that flat top (the first
    one, within a relative 1e-9 of the maximum) rather than whichever bin
    rounding favours, so that it lies mid-way between dry and wet readings.
    O(n + nbins).
    """
    func = "otsu_threshold"
    nbins = v.count(nbins, func=func, name="nbins", minimum=2)
    x = _finite(readings, func)
    if x.size == 0 or x.min() == x.max():
        return float("nan")
    counts, edges = np.histogram(x, bins=nbins, range=(float(x.min()), float(x.max())))
    p = counts / counts.sum()
    centres = (edges[:-1] + edges[1:]) / 2
    omega = np.cumsum(p)[:-1]
    mu = np.cumsum(p * centres)[:-1]
    mu_t = float(np.sum(p * centres))
    with np.errstate(invalid="ignore", divide="ignore"):
        sb = (mu_t * omega - mu) ** 2 / (omega * (1 - omega))
    sb = np.where((omega > 0) & (omega < 1), sb, -np.inf)
    k0 = int(np.argmax(sb))
    top = sb[k0:] >= sb[k0] * (1 - 1e-9)
    k1 = k0 + (int(np.argmin(top)) if not top.all() else top.size) - 1
    return float((edges[k0 + 1] + edges[k1 + 1]) / 2)


def bimodality_score(readings, threshold: float) -> float:
    r"""Separation of the readings into two groups at `threshold`, 0 to 1.

    Otsu's separability measure [Otsu1979]_ evaluated on the readings
    themselves (not a histogram):

    .. math:: \eta = \sigma_B^2 / \sigma_T^2, \quad
              \sigma_B^2 = \omega_0 \omega_1 (\mu_1 - \mu_0)^2

    with :math:`\omega_0, \mu_0` the fraction and mean of the finite readings
    below `threshold`, :math:`\omega_1, \mu_1` those of the others, and
    :math:`\sigma_T^2` the variance of all finite readings.

    Returns 0.0 when the threshold is NaN, the readings are constant or one
    class is empty.

    Notes
    -----
    Cutoff :data:`BIMODALITY_CUTOFF` = 0.9: below it a probe is "not clearly
    bimodal" (fouled, buried, failed, or never changing state). Reasons
    (derived here, not from a published source): a unimodal normal sample split
    at its mean gives exactly :math:`2/\pi \approx 0.64` (half-normal means
    :math:`\pm\sigma\sqrt{2/\pi}`), a uniform one 0.75; two equal normal groups
    reach 0.9 at a separation of about 6 standard deviations. A working probe
    (0.06 vs 0.17 nF with a few pF of noise) is separated by tens of standard
    deviations and scores about 0.97 when one state holds only 5 % of the time
    (0.94 at 2 %; simulated). A skewed unimodal sample with a heavy atom at its mode can still
    exceed 0.8, which is why the cutoff is not lower.
    """
    func = "bimodality_score"
    threshold = float(threshold)
    x = _finite(readings, func)
    if np.isnan(threshold) or x.size < 2:
        return 0.0
    total = float(np.var(x))
    low = x < threshold
    w0 = float(low.mean())
    if total == 0 or w0 in (0.0, 1.0):
        return 0.0
    sb = w0 * (1 - w0) * (float(x[~low].mean()) - float(x[low].mean())) ** 2
    return float(min(sb / total, 1.0))


def _run_starts(s: np.ndarray) -> np.ndarray:
    return np.concatenate(([0], np.flatnonzero(np.diff(s)) + 1))


def merge_short_runs(t_ns: np.ndarray, s: np.ndarray, min_ns: int) -> np.ndarray:
    """Binary state `s` with the interior runs shorter than `min_ns` merged away.

    The duration of a run is the time from its first sample to the first
    sample of the next run. Runs at either end of the record are never removed
    (their length is unknown). Each vectorised pass flips the short runs that
    are shorter than both neighbouring short runs (ties: the earlier one), so
    that a run flipped joins its two neighbours; passes repeat until no
    interior run is short. Each pass is O(number of runs) and removes at least
    one run; chattering blocks take a few passes.
    """
    if min_ns <= 0 or s.size == 0:
        return s
    starts = _run_starts(s)
    while starts.size >= 3:
        dur = np.diff(t_ns[starts]).astype(np.float64)
        key = np.full(starts.size, np.inf)
        inner = dur[1:]
        key[1:-1] = np.where(inner < min_ns, inner, np.inf)
        left = np.concatenate(([np.inf], key[:-1]))
        right = np.concatenate((key[1:], [np.inf]))
        pick = np.flatnonzero(np.isfinite(key) & (key < left) & (key <= right))
        if pick.size == 0:
            break
        drop = np.zeros(starts.size, dtype=bool)
        drop[pick] = True
        drop[pick + 1] = True
        starts = starts[~drop]
    lengths = np.diff(np.concatenate((starts, [s.size])))
    return np.repeat(s[starts], lengths)


def classify_immersion(
    times,
    readings,
    *,
    threshold: float,
    hysteresis: float,
    min_state_s: float,
    wet_is_high: bool = True,
) -> np.ndarray:
    r"""Immersion state of each probe sample: 1 immersed, 0 emersed, 2 unknown.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing (UTC).
    readings : array_like of float, shape (n,)
        Probe readings (e.g. capacitance, nF); NaN marks missing.
    threshold : float
        Centre of the switching band, in the unit of `readings` (e.g. from
        :func:`otsu_threshold`).
    hysteresis : float
        Half width h of the band (>= 0), in the unit of `readings`.
    min_state_s : float
        Interior state runs shorter than this, in seconds, are merged into
        their neighbours (0: none).
    wet_is_high : bool, default True
        True when wet readings are above dry ones (capacitance); False for a
        probe whose reading falls in water.

    Returns
    -------
    numpy.ndarray of int8, shape (n,)

    Notes
    -----
    Hysteresis (wet_is_high): a reading :math:`r > \theta + h` sets the state
    wet, :math:`r < \theta - h` sets it dry, a reading inside the band
    (both edges included) keeps the state of the last reading outside it. The
    samples before the first reading outside the band take that reading's
    state. NaN readings are 2 and do not reset the state. If no reading lies
    outside the band every sample is 2.

    Then :func:`merge_short_runs` removes interior runs shorter than
    `min_state_s` (duration = time from the run's first sample to the next
    run's first sample), shortest first; runs at the record ends stay.

    Definition: common practice, no source. Cost O(n) for the hysteresis
    (running maximum of indices) plus a few O(runs) passes.
    """
    func = "classify_immersion"
    x, t, ok = series(readings, times, func=func)
    threshold = v.real_number(threshold, func=func, name="threshold")
    hyst = v.positive(hysteresis, func=func, name="hysteresis", allow_zero=True)
    min_s = v.positive(min_state_s, func=func, name="min_state_s", allow_zero=True)
    sign = 1.0 if wet_is_high else -1.0
    y, theta = sign * x, sign * threshold
    state = np.full(x.shape, UNKNOWN, dtype=np.int8)
    with np.errstate(invalid="ignore"):
        wet = ok & (y > theta + hyst)
        dry = ok & (y < theta - hyst)
    outside = wet | dry
    if not outside.any():
        return state
    last = np.maximum.accumulate(np.where(outside, np.arange(x.size), -1))
    last[last < 0] = int(np.argmax(outside))
    raw = wet[last].astype(np.int8)
    vi = np.flatnonzero(ok)
    state[vi] = merge_short_runs(t[vi], raw[vi], int(round(min_s * _NS)))
    return state


def _as_state(state, n: int | None, func: str) -> np.ndarray:
    s = np.asarray(state)
    if s.ndim != 1 or s.dtype.kind not in "iu":
        raise ValueError(f"{func}: state must be a 1-D integer array; found {s.dtype}{s.shape}")
    bad = ~np.isin(s, (0, 1, 2))
    if bad.any():
        i = int(np.argmax(bad))
        raise ValueError(f"{func}: state[{i}] = {s[i]}; expected 0 emersed, 1 immersed or 2 unknown")
    if n is not None and s.size != n:
        raise ValueError(f"{func}: times and state must have the same shape; found ({n},) and {s.shape}")
    return s.astype(np.int8, copy=False)


def _times(times, func: str, name: str = "times") -> np.ndarray:
    t = as_ns(times, func=func, name=name)
    check_non_decreasing(t, func=func, name=name)
    return t


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
    t = _times(times, func)
    s = _as_state(state, t.size, func)
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
    tp = _times(times_probe, func, "times_probe")
    sp = _as_state(state_probe, tp.size, func)
    gap_ns = int(round(v.positive(max_gap_s, func=func, name="max_gap_s", allow_zero=True) * _NS))
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
    tt = t if temperature_times is None else _times(temperature_times, func, "temperature_times")
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
    t = _times(times, func)
    s = _as_state(state, t.size, func)
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
        duration_s=(end - start) / _NS,
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
    d0 = s // _DAY_NS
    d1 = np.maximum(d0, (e - 1) // _DAY_NS)
    count = d1 - d0 + 1
    rep = np.repeat(np.arange(s.size), count)
    k = np.arange(rep.size) - np.repeat(np.cumsum(count) - count, count)
    pday = d0[rep] + k
    ps = np.maximum(s[rep], pday * _DAY_NS)
    pe = np.minimum(e[rep], (pday + 1) * _DAY_NS)
    if days is None:
        day = np.arange(pday.min(), pday.max() + 1) if pday.size else np.zeros(0, np.int64)
    else:
        day = np.asarray(days).astype("datetime64[D]").view(np.int64)
    pos = np.searchsorted(day, pday)
    if day.size:
        inside = (pos < day.size) & (day[np.minimum(pos, day.size - 1)] == pday)
    else:
        inside = np.zeros(pday.size, dtype=bool)
    pos, hours = pos[inside], ((pe - ps) / (3600 * _NS))[inside]
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
