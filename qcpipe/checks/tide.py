"""Tide-aware checks: immersion state against a reference level, gating of
companion sensors by immersion, and water-level residuals.

Immersion state convention (as produced by
:func:`qcpipe.convert.immersion_from_wetness`): int8 1 immersed, 0 emersed,
2 unknown.
"""

from __future__ import annotations

import numpy as np

from .. import arrays as v
from ..arrays import EMERSED, IMMERSED, UNKNOWN
from .windows import blocks, previous_valid_index
from .flags import FAIL, MISSING, NOT_EVALUATED, PASS, SUSPECT


def immersion_consistency_flags(
    times,
    state,
    level,
    *,
    elevation_m: float,
    margin_m: float,
    fail_after_s: float,
    reading=None,
) -> np.ndarray:
    """Immersion consistency test: observed wet/dry state against a reference level.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing; sampling may be irregular.
    state : array_like of int, shape (n,)
        Observed immersion state: 1 immersed, 0 emersed, 2 unknown.
    level : array_like of float, shape (n,)
        Reference water level at `times` (predicted or observed elsewhere), in m
        above the datum of `elevation_m`; NaN where not available.
    elevation_m : float
        Surveyed elevation of the sensing point, m above the same datum.
    margin_m : float
        Half-width of the band around `elevation_m` where no state is expected,
        in m (>= 0). It should cover the error of the reference level and the
        wave run-up at the station.
    fail_after_s : float
        Duration in seconds (> 0) after which a sustained disagreement fails.
    reading : array_like of float, shape (n,), optional
        The raw probe reading the state came from. Where given and NaN (or
        infinite), the sample is flagged 9 (missing) instead of 2.

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        Per sample:

        * 9 where `reading` is given and missing;
        * 2 where the state is unknown, the level is NaN, or the level is inside
          the band ``elevation_m - margin_m <= level <= elevation_m + margin_m``;
        * 1 where the state agrees with the expected one;
        * 3 where it disagrees;
        * 4 where it disagrees and the run of consecutive disagreeing samples it
          belongs to has lasted ``> fail_after_s`` at that sample.

    Notes
    -----
    Expected state: immersed where ``level > elevation_m + margin_m``, emersed
    where ``level < elevation_m - margin_m`` (strict inequalities; a level
    exactly on a band edge is inside the band).

    A run of disagreement is a sequence of consecutive samples that all
    disagree; any other sample (agreement, band, unknown state, NaN level or
    missing reading) ends it. At sample i of a run that started at sample r,
    the duration so far is ``t_i - t_r`` and the sample fails when
    ``t_i - t_r > fail_after_s`` (strict: equality stays 3). Flags look back
    only, as in the flat line test: the early samples of a long run stay 3.
    A time gap inside a run counts towards its duration.

    Definition: common practice, no source. Cost O(n).
    """
    func = "immersion_consistency_flags"
    t, s = v.times_and_state(times, state, func=func)
    lv = v.as_1d(v.as_values(level, func=func, name="level"), func=func, name="level")
    v.same_shape(lv, t, func=func, names=("level", "times"))
    z = v.real_number(elevation_m, func=func, name="elevation_m")
    margin = v.positive(margin_m, func=func, name="margin_m", allow_zero=True)
    fail_ns = v.duration_ns(fail_after_s, func=func, name="fail_after_s")
    missing = np.zeros(t.shape, dtype=bool)
    if reading is not None:
        r = v.as_1d(v.as_values(reading, func=func, name="reading"), func=func, name="reading")
        v.same_shape(r, t, func=func, names=("reading", "times"))
        missing = ~np.isfinite(r)

    flags = np.empty(t.shape, dtype=np.int8)
    run_began = np.iinfo(np.int64).min  # time the current run of disagreement began
    was_disagreeing = False
    with np.errstate(invalid="ignore"):
        for b in blocks(t.size):
            sb, lb, tb = s[b], lv[b], t[b]
            want_wet = lb > z + margin
            want_dry = lb < z - margin
            evaluated = want_wet | want_dry
            evaluated &= sb != UNKNOWN
            evaluated &= ~missing[b]
            agree = want_wet & (sb == IMMERSED)
            agree |= want_dry & (sb == EMERSED)
            agree &= evaluated
            disagree = evaluated & ~agree
            # Start time of each run of disagreement: a running maximum of the
            # times where a run begins (times are sorted), carried across blocks.
            begins = disagree.copy()
            begins[1:] &= ~disagree[:-1]
            begins[0] &= not was_disagreeing
            began = np.where(begins, tb, run_began)
            np.maximum.accumulate(began, out=began)
            # 2 - [agree] + [disagree] + [disagree for longer than fail_after_s]:
            # 1 agree, 2 not evaluated, 3 suspect, 4 fail.
            f = np.subtract(NOT_EVALUATED, agree.view(np.int8), dtype=np.int8)
            f += disagree.view(np.int8)
            long = np.greater(tb - began, fail_ns)
            long &= disagree
            f += long.view(np.int8)
            np.copyto(f, MISSING, where=missing[b])
            flags[b] = f
            run_began, was_disagreeing = int(began[-1]), bool(disagree[-1])
    return flags


def companion_gating_flags(times, state, *, settle_s: float) -> np.ndarray:
    """Immersion gating of a companion sensor (pH, conductivity) by the wet/dry state.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times of the companion sensor, non-decreasing.
    state : array_like of int, shape (n,)
        Immersion state at those times: 1 immersed, 0 emersed, 2 unknown.
    settle_s : float
        Settling time after each immersion starts, in seconds (>= 0; 0 means
        no settling period).

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        4 where emersed (the sensor is in air); 3 where immersed and
        ``t - t_start < settle_s`` (settling, bubbles on the sensor); 1 where
        immersed otherwise; 2 where the state is unknown.

    Notes
    -----
    An immersion starts at an immersed sample whose previous sample of known
    state (unknown samples are skipped) is emersed, or which has no earlier
    sample of known state (the record begins with the sensor going into the
    water). ``t_start`` is the time of that first immersed sample: the latest
    time the immersion can have begun, so the settling period is never
    shortened. The interval is half-open: the start sample itself is 3, a
    sample exactly `settle_s` after it is 1.

    Unknown samples neither end an immersion nor start one; a long stretch of
    unknown state between two immersed samples is therefore not taken as an
    emersion (the gap check reports long gaps).

    Definition: common practice, no source. Cost O(n).
    """
    func = "companion_gating_flags"
    t, s = v.times_and_state(times, state, func=func)
    settle = v.positive(settle_s, func=func, name="settle_s", allow_zero=True)
    settle_ns = 0 if settle == 0 else v.duration_ns(settle, func=func, name="settle_s")

    wet = s == IMMERSED
    prev = previous_valid_index(s != UNKNOWN)
    prev_state = np.where(prev >= 0, s[np.maximum(prev, 0)], EMERSED)
    start = wet & (prev_state == EMERSED)
    last_start = np.maximum.accumulate(np.where(start, np.arange(t.size), 0))
    settling = wet & (t - t[last_start] < settle_ns)

    flags = np.full(t.shape, NOT_EVALUATED, dtype=np.int8)
    flags[wet] = PASS
    flags[settling] = SUSPECT
    flags[s == EMERSED] = FAIL
    return flags


def residual_series(level, predicted) -> np.ndarray:
    """Water-level residual, observed minus predicted.

    Parameters
    ----------
    level, predicted : array_like of float, same shape
        Observed and predicted water level, m above the same datum.

    Returns
    -------
    numpy.ndarray of float64
        ``r = level - predicted`` in m; NaN where either is NaN or infinite.

    Notes
    -----
    Definition: common practice, no source.
    """
    func = "residual_series"
    obs = v.as_values(level, func=func, name="level")
    pred = v.as_values(predicted, func=func, name="predicted")
    v.same_shape(obs, pred, func=func, names=("level", "predicted"))
    ok = np.isfinite(obs) & np.isfinite(pred)
    return np.where(ok, obs - np.where(ok, pred, 0.0), np.nan)


def water_level_residual_flags(level, predicted, *, suspect_m: float, fail_m: float) -> np.ndarray:
    """Residual test: observed water level against the predicted tide.

    Parameters
    ----------
    level : array_like of float
        Observed water level, m above the datum; NaN marks missing. Any shape.
    predicted : array_like of float, same shape as `level`
        Predicted water level, m above the same datum; NaN where no prediction.
    suspect_m, fail_m : float
        Residual limits in m, ``0 < suspect_m <= fail_m``.

    Returns
    -------
    numpy.ndarray of int8, same shape as `level`
        With ``r = level - predicted``: 4 where ``|r| > fail_m``, 3 where
        ``|r| > suspect_m``, else 1 (the limits themselves pass); 9 where the
        level is NaN or infinite; 2 where the level is present but the
        prediction is NaN or infinite.

    Notes
    -----
    The residual holds the surge and other weather effects as well as sensor
    faults, so limits should be set above the storm surges expected at the
    site. Definition: common practice, no source.
    """
    func = "water_level_residual_flags"
    r = residual_series(level, predicted)
    suspect = v.positive(suspect_m, func=func, name="suspect_m")
    fail = v.positive(fail_m, func=func, name="fail_m")
    v.ordered(suspect, fail, func=func, names=("suspect_m", "fail_m"), strict=False)
    obs = v.as_values(level, func=func, name="level")
    a = np.abs(r)
    with np.errstate(invalid="ignore"):
        flags = np.where(a > fail, FAIL, np.where(a > suspect, SUSPECT, PASS)).astype(np.int8)
    flags[np.isnan(r)] = NOT_EVALUATED
    flags[~np.isfinite(obs)] = MISSING
    return flags
