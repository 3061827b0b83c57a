"""High and low waters of a water-level record, and their tidal-day classes.

Times are numpy datetime64 (any unit) or int64 nanoseconds since 1970-01-01, UTC,
non-decreasing; heights are in metres (any vertical datum). Event times come back
as datetime64[ns].

References
----------
.. [SG1964] See ``docs/references.md``, key SG1964.
.. [Schureman1958] See ``docs/references.md``, key Schureman1958.
.. [NOAA2000] See ``docs/references.md``, key NOAA2000.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import arrays as v
from ..arrays import NS, as_ns, series

#: Mean lunar (tidal) day in hours, 24.8412 h [Schureman1958]_ (value from memory).
TIDAL_DAY_H = 24.8412



@dataclass(frozen=True)
class TideEvents:
    """High and low waters in time order.

    Attributes
    ----------
    time : numpy.ndarray of datetime64[ns]
        Time of each event (UTC).
    height : numpy.ndarray of float64
        Height of each event, in the unit and datum of the input heights (m).
    kind : numpy.ndarray of str
        ``"high"`` or ``"low"``; within an unbroken stretch of record the kinds
        alternate.
    """

    time: np.ndarray
    height: np.ndarray
    kind: np.ndarray

    def __len__(self) -> int:
        return int(self.time.size)

    @property
    def is_high(self) -> np.ndarray:
        """Boolean mask of the high waters."""
        return self.kind == "high"


def _empty_events() -> TideEvents:
    return TideEvents(np.zeros(0, "datetime64[ns]"), np.zeros(0), np.zeros(0, "<U4"))


def segment_bounds(ts: np.ndarray, max_gap: float) -> tuple[np.ndarray, np.ndarray]:
    """Start and stop indices of the stretches of `ts` without a step > `max_gap`."""
    breaks = np.flatnonzero(np.diff(ts) > max_gap) + 1
    return np.concatenate(([0], breaks)), np.concatenate((breaks, [ts.size]))


def centred_mean(ts, h, width, lo_bound, hi_bound) -> np.ndarray:
    """Mean of `h` over ``|ts_j - ts_i| <= width / 2`` within each sample's segment.

    O(n): window edges by :func:`numpy.searchsorted`, sums by cumulative sums of
    the heights shifted by their median (to keep cancellation small).
    """
    lo = np.maximum(np.searchsorted(ts, ts - width / 2, side="left"), lo_bound)
    hi = np.minimum(np.searchsorted(ts, ts + width / 2, side="right"), hi_bound)
    ref = float(np.median(h))
    c = np.concatenate(([0.0], np.cumsum(h - ref)))
    return ref + (c[hi] - c[lo]) / (hi - lo)


def _candidates(s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Interior local extrema of `s` (middle of a plateau): indices and is-high."""
    d = np.diff(s)
    nz = np.flatnonzero(d != 0)
    sd = np.sign(d[nz])
    ch = np.flatnonzero(sd[:-1] != sd[1:])
    return (nz[ch] + 1 + nz[ch + 1]) // 2, sd[ch] > 0


def _prune(times, values, min_sep, min_range, first_value, last_value) -> np.ndarray:
    """Indices of the alternating extrema that survive removal of weak pairs.

    The sequence is bracketed by the smoothed values at the two ends of the
    stretch (`first_value`, `last_value`), which are never removed. An edge
    between two neighbouring extrema is weak when their height difference is
    below `min_range` or they are less than `min_sep` apart; an edge to an end
    value is weak when its height difference is below `min_range`. Each pass
    takes the weak edges that are local minima of the height difference
    (ties: the earlier edge) and removes their extrema: both for an edge
    between extrema (the alternation is kept, and the more extreme high and
    low of the neighbouring edges survive), the one extremum for an edge to an
    end value. Each pass removes at least one extremum, so the loop ends; in
    practice it takes a few passes of O(number of candidates).
    """
    keep = np.arange(values.size)
    while keep.size:
        ext = np.concatenate(([first_value], values[keep], [last_value]))
        dv = np.abs(np.diff(ext))
        weak = dv < min_range
        weak[1:-1] |= np.diff(times[keep]) < min_sep
        if not weak.any():
            break
        key = np.where(weak, dv, np.inf)
        left = np.concatenate(([np.inf], key[:-1]))
        right = np.concatenate((key[1:], [np.inf]))
        pick = np.flatnonzero(weak & (key < left) & (key <= right))
        # Edge j joins ext[j] and ext[j + 1], i.e. candidates j - 1 and j.
        drop = np.zeros(keep.size + 2, dtype=bool)
        drop[pick] = True
        drop[pick + 1] = True
        keep = keep[~drop[1:-1]]
    return keep


def _refine(ts, h, t_c, is_high, half, lo_bound, hi_bound, *, n_iter: int = 4):
    """Extremum of a least-squares quartic through the samples around each event, re-centred.

    For event e the samples within ``half[e]`` of the current estimate ``t_c[e]``
    (at least the nearest sample and two on each side; never outside
    ``lo_bound[e] <= j < hi_bound[e]``) are fitted with
    ``h = c0 + c1 x + ... + c4 x^4``, x = (t - t_c) / scale (fewer terms where
    the window holds fewer than six samples); the estimate moves to the
    stationary point of the polynomial found by Newton's method from x = 0,
    and the window is centred there again (`n_iter` times). Centred on the
    extremum, the odd terms absorb the crest's asymmetry and the even ones its
    flattening, so the bias left is of fifth order in the window for the time
    and sixth for the height. Where the fit is singular, curves the wrong way
    or the stationary point leaves the window, the estimate stays where it is
    and ``ok`` is False. Returns times (s), heights (m) and ``ok``.
    Cost: n_iter x the total window length.
    """
    n_ev = t_c.size
    t_c = t_c.astype(np.float64).copy()
    ok = np.ones(n_ev, dtype=bool)
    height = np.zeros(n_ev)
    sign = np.where(is_high, -1.0, 1.0)
    rows = np.arange(n_ev)
    for _ in range(n_iter):
        near = np.clip(np.searchsorted(ts, t_c), lo_bound, hi_bound - 1)
        prev = np.maximum(near - 1, lo_bound)
        near = np.where(np.abs(ts[prev] - t_c) < np.abs(ts[near] - t_c), prev, near)
        lo = np.minimum(np.searchsorted(ts, t_c - half, side="left"), near - 2)
        hi = np.maximum(np.searchsorted(ts, t_c + half, side="right"), near + 3)
        lo, hi = np.maximum(lo, lo_bound), np.minimum(hi, hi_bound)
        length = hi - lo
        first = np.cumsum(length) - length
        rep = np.repeat(rows, length)
        gi = np.repeat(lo, length) + (np.arange(rep.size) - np.repeat(first, length))
        tau_raw = ts[gi] - t_c[rep]
        scale = np.maximum(np.maximum.reduceat(np.abs(tau_raw), first), 1e-9)
        x = tau_raw / scale[rep]
        y = h[gi] - h[near][rep]
        deg = np.clip(length - 2, 2, 4)              # quartic from six samples on
        m = [np.bincount(rep, weights=x**p, minlength=n_ev) for p in range(9)]
        b = np.stack([np.bincount(rep, weights=y * x**p, minlength=n_ev) for p in range(5)], axis=1)
        a = np.stack([np.stack(m[i:i + 5], axis=1) for i in range(5)], axis=1)
        unused = np.arange(5)[None, :] > deg[:, None]
        a[unused] = 0.0
        a.transpose(0, 2, 1)[unused] = 0.0
        a[:, range(5), range(5)] += unused
        b[unused] = 0.0
        good = (length >= 3) & (np.abs(np.linalg.det(a)) > 1e-14 * np.maximum(m[0], 1.0) ** 5)
        a[~good] = np.eye(5)
        c = np.linalg.solve(a, b[..., None])[..., 0]
        xr = np.zeros(n_ev)
        for _ in range(8):                           # Newton on p'(x) = 0 from x = 0
            d1 = c[:, 1] + 2 * c[:, 2] * xr + 3 * c[:, 3] * xr**2 + 4 * c[:, 4] * xr**3
            d2 = 2 * c[:, 2] + 6 * c[:, 3] * xr + 12 * c[:, 4] * xr**2
            with np.errstate(divide="ignore", invalid="ignore"):
                xr = np.clip(xr - d1 / d2, -1.5, 1.5)
        d2 = 2 * c[:, 2] + 6 * c[:, 3] * xr + 12 * c[:, 4] * xr**2
        step_ok = good & np.isfinite(xr) & (sign * d2 > 0) & (np.abs(xr) <= 1.0)
        xr = np.where(step_ok, xr, 0.0)
        ok &= step_ok
        height = h[near] + ((((c[:, 4] * xr + c[:, 3]) * xr + c[:, 2]) * xr + c[:, 1]) * xr + c[:, 0])
        t_c = np.where(step_ok, t_c + xr * scale, t_c)
    return t_c, height, ok


def high_low_waters(
    times,
    heights,
    *,
    min_separation_s: float | None = None,
    smoothing_s: float | None = None,
    min_range_m: float = 0.05,
    max_gap_s: float = 3600.0,
) -> TideEvents:
    r"""High and low waters of a water-level series, at any kind of tide.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing (UTC); sampling may be irregular.
    heights : array_like of float, shape (n,)
        Water level, m; NaN marks missing.
    min_separation_s : float or None, default None
        Optional: shortest time, in seconds, between a high water and the
        adjacent low water; a closer pair is removed as a wiggle. None (the
        default): no time rule, pairs are told apart by `min_range_m` alone.
        A time rule deletes real pairs at mixed tides, whose small high/low
        pair can be 2 h apart or less; use it only on records with
        short-period disturbances larger than `min_range_m`.
    smoothing_s : float or None, default None
        Full width, in seconds, of the centred moving mean used to find the
        candidate extrema; also the half-width of the window of the cubic fit
        that refines them. None: 3600 (1 h). 0: no smoothing, and the cubic
        goes through the nearest sample and two on each side.
    min_range_m : float, default 0.05
        Smallest height difference, in metres, between a high and the adjacent
        low (common practice, no source).
    max_gap_s : float, default 3600
        A step between valid samples longer than this, in seconds, is a gap:
        the record is split there and no event is sought across it.

    Returns
    -------
    TideEvents
        Times (datetime64[ns]), heights (m) and kinds of the events, in time
        order; alternating high/low within each unbroken stretch of record.

    Notes
    -----
    1. NaN samples are dropped; the valid samples are split into stretches at
       gaps longer than `max_gap_s`. Everything below is per stretch.
    2. Smoothing: :math:`s_i` is the mean of the heights with
       :math:`|t_j - t_i| \le w/2` (w = `smoothing_s`), computed in O(n) by
       cumulative sums on the possibly irregular times.
    3. Candidates are the interior local extrema of s (sign changes of its
       first difference; the middle of a plateau). They alternate high/low.
       A candidate whose smoothing window is cut by the end of its stretch is
       dropped (its extremum may lie outside the data).
    4. Weak pairs are removed, weakest first, by vectorised passes (see
       ``_prune``), twice: first on the smoothed values with half of
       `min_range_m` (the moving mean lowers a small crest by a few per cent;
       this pass only clears noise), then on the refined heights (step 5) with
       `min_range_m` itself (and `min_separation_s` if given), so that the rule
       applies to the heights reported. The smoothed values at the two ends
       of the stretch take part as fixed neighbours, so that an extremum less
       than `min_range_m` above (below) the end of its stretch is not kept.
    5. Refinement: the raw samples within :math:`\pm w` of each extremum (at
       most half-way to its neighbouring candidates; at least five samples)
       are fitted by least squares with a cubic, a local polynomial fit in the
       manner of [SG1964]_; the event moves to the cubic's extremum and the
       window is centred there again, four times. A broad diurnal crest is
       asymmetric, and a parabola's vertex is biased by the cubic term (by
       :math:`0.3 (c_3/c_2) w^2` over :math:`\pm w`); the cubic absorbs that
       term, leaving a bias of fifth order: for a cosine of amplitude A and
       angular speed :math:`\omega` a slope error of
       :math:`0.24 A \omega^5 w^4 / 120` (Legendre projection of
       :math:`x^5` on x and :math:`x^3`), under a second of time for M2 and
       w = 1 h (derived for a uniform sample distribution).

    Cost O(n) for the smoothing and the fit, plus one Python iteration per
    stretch of record and a few vectorised pruning passes.
    """
    func = "high_low_waters"
    h, t, ok = series(heights, times, func=func)
    sep = 0.0 if min_separation_s is None else v.positive(
        min_separation_s, func=func, name="min_separation_s")
    width = 3600.0 if smoothing_s is None else v.positive(
        smoothing_s, func=func, name="smoothing_s", allow_zero=True)
    min_range = v.positive(min_range_m, func=func, name="min_range_m", allow_zero=True)
    gap = v.positive(max_gap_s, func=func, name="max_gap_s")
    t, h = t[ok], h[ok]
    if t.size < 3:
        return _empty_events()
    ts = (t - t[0]) / NS
    starts, stops = segment_bounds(ts, gap)
    sid = np.repeat(np.arange(starts.size), stops - starts)
    s = centred_mean(ts, h, width, starts[sid], stops[sid])

    idx_parts, high_parts, seg_parts = [], [], []
    for k, (a, b) in enumerate(zip(starts, stops)):
        if b - a < 5:
            continue
        idx, high = _candidates(s[a:b])
        idx = idx + a
        # A candidate whose window is cut by the end of the stretch can only be
        # among the first or last ones, so dropping it keeps the alternation.
        inside = (ts[idx] - width / 2 >= ts[a]) & (ts[idx] + width / 2 <= ts[b - 1])
        idx, high = idx[inside], high[inside]
        keep = _prune(ts[idx], s[idx], 0.0, min_range / 2, s[a], s[b - 1])
        idx_parts.append(idx[keep])
        high_parts.append(high[keep])
        seg_parts.append(np.full(keep.size, k))
    if not idx_parts or sum(p.size for p in idx_parts) == 0:
        return _empty_events()
    idx = np.concatenate(idx_parts)
    is_high = np.concatenate(high_parts)
    seg = np.concatenate(seg_parts)

    # Refinement window: +-width, at most half-way to the neighbouring candidates.
    tc = ts[idx]
    same = seg[1:] == seg[:-1]
    step = np.diff(tc)
    to_prev = np.concatenate(([np.inf], np.where(same, step, np.inf)))
    to_next = np.concatenate((np.where(same, step, np.inf), [np.inf]))
    half = np.minimum(2.0 * width, 0.4 * np.minimum(to_prev, to_next))
    t_ev, h_ev, good = _refine(ts, h, tc, is_high, half, starts[seg], stops[seg])
    t_ev = np.where(good, t_ev, tc)
    h_ev = np.where(good, h_ev, s[idx])

    final = []
    for k in np.unique(seg):
        ii = np.flatnonzero(seg == k)
        a, b = starts[k], stops[k]
        final.append(ii[_prune(t_ev[ii], h_ev[ii], sep, min_range, s[a], s[b - 1])])
    sel = np.concatenate(final)
    t_ns = t[0] + np.round(t_ev[sel] * NS).astype(np.int64)
    return TideEvents(
        time=t_ns.astype("datetime64[ns]"),
        height=h_ev[sel].astype(np.float64),
        kind=np.where(is_high[sel], "high", "low").astype("<U4"),
    )


def tidal_day_index(times_ns: np.ndarray, origin_ns: int) -> np.ndarray:
    """Number of whole tidal days (24.8412 h) from `origin_ns` to each time."""
    return np.floor((times_ns - origin_ns) / (TIDAL_DAY_H * 3600 * NS)).astype(np.int64)


def default_tidal_day_origin(events: TideEvents) -> int:
    """Start of the first tidal day, int64 ns: 1/8 of a tidal day (3.1 h) before the first event.

    For a semidiurnal tide the day boundaries then fall between events. 0 for no events.
    """
    if len(events) == 0:
        return 0
    first = int(events.time.astype("datetime64[ns]").view(np.int64)[0])
    return first - int(TIDAL_DAY_H * 3600 * NS / 8)


def tidal_day_classes(events: TideEvents, *, origin=None) -> np.ndarray:
    """Label each event HHW, LHW, HLW or LLW within its tidal day.

    Parameters
    ----------
    events : TideEvents
        High and low waters, e.g. from :func:`high_low_waters`.
    origin : datetime64 or int64 nanoseconds, optional
        Start of the first tidal day. Default: :func:`default_tidal_day_origin`,
        1/8 of a tidal day (3.1 h) before the first event, so that for a
        semidiurnal tide the day boundaries fall between events.

    Returns
    -------
    numpy.ndarray of str, shape (len(events),)
        ``"HHW"`` for the highest high water of each tidal day, ``"LHW"`` for
        its other high waters, ``"LLW"`` for its lowest low water, ``"HLW"``
        for its other low waters.

    Notes
    -----
    Tidal days are consecutive intervals of 24.8412 h (the mean lunar day,
    [Schureman1958]_, value from memory) from `origin`. A tidal day with a
    single high water gives it the label HHW (as for the higher high water of
    each tidal day in the definition of MHHW, [NOAA2000]_); likewise LLW.
    Equal heights: the earlier event takes the higher/lower class. Tidal days
    that the record or a gap cuts short are labelled from the events present.
    """
    func = "tidal_day_classes"
    if not isinstance(events, TideEvents):
        raise TypeError(f"{func}: events must be TideEvents; found {type(events).__name__}")
    labels = np.where(events.is_high, "LHW", "HLW").astype("<U3")
    if len(events) == 0:
        return labels
    t = events.time.astype("datetime64[ns]").view(np.int64)
    if origin is None:
        origin_ns = default_tidal_day_origin(events)
    else:
        origin_ns = int(as_ns(np.atleast_1d(origin), func=func, name="origin")[0])
    day = tidal_day_index(t, origin_ns)
    for mask, sign, top in ((events.is_high, -1.0, "HHW"), (~events.is_high, 1.0, "LLW")):
        ii = np.flatnonzero(mask)
        if ii.size == 0:
            continue
        o = ii[np.lexsort((sign * events.height[ii], day[ii]))]
        first = np.concatenate(([True], day[o][1:] != day[o][:-1]))
        labels[o[first]] = top
    return labels
