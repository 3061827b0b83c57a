"""Probe clock errors from transition timing: the verdict (offset, whole-hour mistakes).

Sign convention: see :mod:`qcpipe.tide.crossings` (an offset is observed minus predicted;
a logger clock ahead of UTC gives a positive offset).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import arrays as v

from .crossings import (LagEstimate, TransitionOffsets, observed_transitions, predicted_crossings,
                        transition_offsets, wet_dry_lag)


@dataclass(frozen=True)
class ClockVerdict:
    """Verdict on a constant clock error of an immersion record (:func:`clock_verdict`)."""

    offset_s: float  #: common transition offset, observed - predicted, s (+: logger ahead)
    spread_s: float  #: 1.4826 * MAD of the transition offsets about their kind medians, s
    n_transitions: int  #: transitions matched to the prediction
    lag_xcorr_s: float  #: cross-correlation lag, s, same sign convention
    suspected: bool
    whole_hours: int | None  #: nearest non-zero whole hours when suspected and close, else None
    min_transitions: int  #: fewest matched transitions for a verdict (fewer: not assessed)

    @property
    def assessed(self) -> bool:
        """Enough matched transitions and a finite offset to judge the clock."""
        return self.n_transitions >= self.min_transitions and bool(np.isfinite(self.offset_s))


def clock_verdict(
    offsets: TransitionOffsets,
    lag: LagEstimate,
    *,
    threshold_s: float = 1200,
    agree_s: float = 600,
    whole_hour_tol_s: float = 300,
    min_transitions: int = 4,
) -> ClockVerdict:
    """Decide whether an immersion record has a constant clock error.

    Parameters
    ----------
    offsets : TransitionOffsets
        From :func:`transition_offsets`.
    lag : LagEstimate
        From :func:`wet_dry_lag`.
    threshold_s : float
        Smallest ``|offset|`` reported as a clock error, s (default 20 min).
    agree_s : float
        Largest difference between the transition offset and the
        cross-correlation lag for the two to agree, s (default 10 min).
    whole_hour_tol_s : float
        An offset within this many seconds of a non-zero whole number of hours
        is named as a likely UTC-offset or daylight-saving mistake (default
        5 min).
    min_transitions : int
        Fewest matched transitions for any verdict (default 4).

    Returns
    -------
    ClockVerdict
        ``offset_s = offsets.common_s`` and ``spread_s = offsets.spread_s``;
        ``suspected`` when there are at least `min_transitions` matched
        transitions, ``|offset_s| > threshold_s``, ``spread_s < |offset_s| / 2``,
        the lag is not at the end of its range and
        ``|offset_s - lag_xcorr_s| <= agree_s``; ``whole_hours`` the nearest
        whole number of hours when suspected and within `whole_hour_tol_s` of
        it, else None (the sentence a person reads: ``qcpipe.report.words.clock_verdict_text``).

    Notes
    -----
    Positive offset: transitions late, logger timestamps ahead of the
    prediction's time base (UTC); subtract the offset to correct. The
    thresholds are common practice, no source.
    """
    func = "clock_verdict"
    threshold = v.positive(threshold_s, func=func, name="threshold_s")
    agree = v.positive(agree_s, func=func, name="agree_s")
    hour_tol = v.positive(whole_hour_tol_s, func=func, name="whole_hour_tol_s")
    min_n = v.count(min_transitions, func=func, name="min_transitions", minimum=1)

    off, spread, n, lag_s = offsets.common_s, offsets.spread_s, offsets.n_matched, lag.lag_s
    if n < min_n or not np.isfinite(off):
        return ClockVerdict(off, spread, n, lag_s, False, None, min_n)
    suspected = bool(
        abs(off) > threshold
        and spread < abs(off) / 2
        and not lag.at_limit
        and np.isfinite(lag_s)
        and abs(off - lag_s) <= agree
    )
    if not suspected:
        return ClockVerdict(off, spread, n, lag_s, False, None, min_n)
    return ClockVerdict(off, spread, n, lag_s, True, whole_hours_of(off, tolerance_s=hour_tol), min_n)


def whole_hours_of(offset_s: float, *, tolerance_s: float = 300) -> int | None:
    """The non-zero whole number of hours within ``tolerance_s`` of ``offset_s`` (s), else None.

    ``round(offset_s / 3600)`` when it is not 0 and ``|offset_s - 3600 h| <= tolerance_s``:
    an offset that close to whole hours is most likely a UTC-offset or daylight-saving
    setting of the logger (common practice, no source).
    """
    if not np.isfinite(offset_s):
        return None
    hours = int(round(offset_s / 3600))
    return hours if hours != 0 and abs(offset_s - 3600 * hours) <= tolerance_s else None


def clock_error_estimate(
    times,
    state,
    ref_times,
    ref_level,
    *,
    elevation_m: float,
    max_lag_s: float = 3 * 3600,
    step_s: float = 60,
    threshold_s: float = 1200,
    agree_s: float = 600,
    whole_hour_tol_s: float = 300,
    min_transitions: int = 4,
) -> ClockVerdict:
    """Estimate a constant clock error of an immersion record against a reference tide.

    Parameters
    ----------
    times, state
        The immersion series (logger clock): times and states 1/0/2.
    ref_times, ref_level
        Reference water level series (UTC), m above the datum of `elevation_m`.
    elevation_m : float
        Surveyed elevation of the sensing point, m above the same datum.
    max_lag_s, step_s
        Lag range and step of the cross-correlation, s; also the largest
        transition offset matched is `max_lag_s`.
    threshold_s, agree_s, whole_hour_tol_s, min_transitions
        Decision parameters, see :func:`clock_verdict`.

    Returns
    -------
    ClockVerdict

    Notes
    -----
    Two estimates are combined: the transition offsets
    (:func:`observed_transitions` matched to :func:`predicted_crossings` by
    :func:`transition_offsets`) and the cross-correlation lag
    (:func:`wet_dry_lag`); see :func:`clock_verdict` for the decision. Both
    estimates are positive when the logger timestamps are ahead of the
    prediction's time base. Cost O(n * K) for K lags.
    """
    pred = predicted_crossings(ref_times, ref_level, elevation_m=elevation_m)
    obs = observed_transitions(times, state)
    offs = transition_offsets(obs.flooding, obs.draining, pred.flooding, pred.draining,
                              max_offset_s=max_lag_s)
    lag = wet_dry_lag(times, state, ref_times, ref_level, elevation_m=elevation_m,
                      max_lag_s=max_lag_s, step_s=step_s)
    return clock_verdict(offs, lag, threshold_s=threshold_s, agree_s=agree_s,
                         whole_hour_tol_s=whole_hour_tol_s, min_transitions=min_transitions)
