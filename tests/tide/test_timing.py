"""Tests for qcpipe.tide.crossings, qcpipe.tide.clock and qcpipe.tide.elevation.

Synthetic tides are built here with numpy from the M2 (and S2) constituent
speeds; crossing times of the true (continuous) tide come from closed forms or
from scipy's Brent root finder, never from the code under test.

Constituent speeds, Schureman (1958), Table 2 (from memory):
M2 28.9841042 deg/h (period 360 / 28.9841042 = 12.4206012 h), S2 30.0 deg/h.
"""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from qcpipe.tide.clock import clock_error_estimate, clock_verdict
from qcpipe.tide.crossings import (
    Crossings,
    LagEstimate,
    TransitionOffsets,
    observed_transitions,
    predicted_crossings,
    transition_offsets,
    wet_dry_lag,
)
from qcpipe.report.words import clock_verdict_text, elevation_text
from qcpipe.tide.elevation import EffectiveElevation, effective_elevation, elevation_check

S = 10**9  # nanoseconds per second
M2 = math.radians(28.9841042) / 3600  # rad/s, Schureman (1958) Table 2, from memory
S2 = math.radians(30.0) / 3600  # rad/s, Schureman (1958) Table 2, from memory
T0 = int(np.datetime64("2024-03-04T00:00:00", "s").astype(np.int64))  # an arbitrary origin, s
DAYS = 42  # six weeks


def m2_level(t_s):
    """2.0 m mean level, 1.6 m M2 amplitude, t in s since T0."""
    return 2.0 + 1.6 * np.cos(M2 * t_s)


def m2_s2_level(t_s):
    return 2.0 + 1.6 * np.cos(M2 * t_s) + 0.4 * np.cos(S2 * t_s + 1.0)


def ns(t_s):
    return np.rint((T0 + np.asarray(t_s, dtype=float)) * S).astype(np.int64)


def true_crossings(level_fn, z, start_s, stop_s):
    """(flood, drain) times in s of the continuous tide through z: brackets from a
    60 s grid, each root by Brent's method (scipy) to 1e-3 s."""
    g = np.arange(start_s, stop_s, 60.0)
    wet = level_fn(g) > z
    i = np.flatnonzero(wet[1:] != wet[:-1])
    roots = np.array([brentq(lambda x: level_fn(x) - z, g[k], g[k + 1], xtol=1e-3) for k in i])
    up = wet[i + 1]
    return roots[up], roots[~up]


def deployment(level_fn, *, z_true, clock_ahead_s, seed, step_s=300.0, jitter_s=180.0):
    """Immersion record of a point at z_true, on a logger clock ahead by clock_ahead_s.

    The logger samples at its own regular times tau; the true time of sample i is
    tau_i - clock_ahead_s. The point is wet between a (jittered, +-jitter_s uniform)
    flood and the next drain of the true tide.
    """
    rng = np.random.default_rng(seed)
    tau = np.arange(0.0, DAYS * 86400.0, step_s)
    flood, drain = true_crossings(level_fn, z_true, -2 * 86400.0, (DAYS + 2) * 86400.0)
    flood = flood + rng.uniform(-jitter_s, jitter_s, flood.size)
    drain = drain + rng.uniform(-jitter_s, jitter_s, drain.size)
    true_t = tau - clock_ahead_s
    last_flood = np.searchsorted(flood, true_t) - 1
    last_drain = np.searchsorted(drain, true_t) - 1
    wet = flood[last_flood] > drain[last_drain]
    return ns(tau), wet.astype(np.int8)


def reference(level_fn, step_s=600.0):
    """Predicted level every 10 min from a day before to a day after the deployment."""
    t = np.arange(-86400.0, (DAYS + 1) * 86400.0, step_s)
    return ns(t), level_fn(t)


# --- predicted_crossings -----------------------------------------------------


def test_crossings_by_hand():
    # Levels 0, 2, 0 at 0, 10, 20 s through z = 1: flood at 0 + (1-0)/(2-0)*10 = 5 s,
    # drain at 10 + (2-1)/(2-0)*10 = 15 s.
    got = predicted_crossings(np.array([0, 10, 20]) * S, [0.0, 2.0, 0.0], elevation_m=1.0)
    np.testing.assert_array_equal(got.flooding.view(np.int64), [5 * S])
    np.testing.assert_array_equal(got.draining.view(np.int64), [15 * S])
    assert isinstance(got, Crossings) and got.flooding.dtype == np.dtype("datetime64[ns]")


def test_level_at_the_elevation_is_dry():
    # Levels 0, 1, 2, 1, 0 through z = 1: wet only at 2 (level > z). Flood between
    # 1 and 2 at fraction (1-1)/(2-1) = 0 -> t = 10 s; drain between 2 and 1 at
    # fraction (1-2)/(1-2) = 1 -> t = 30 s.
    got = predicted_crossings(np.array([0, 10, 20, 30, 40]) * S, [0.0, 1.0, 2.0, 1.0, 0.0],
                              elevation_m=1.0)
    np.testing.assert_array_equal(got.flooding.view(np.int64), [10 * S])
    np.testing.assert_array_equal(got.draining.view(np.int64), [30 * S])


def test_nan_levels_are_skipped():
    # 0, NaN, 2 at 0, 10, 20 s: interpolated between 0 and 20 s -> flood at 10 s.
    got = predicted_crossings(np.array([0, 10, 20]) * S, [0.0, np.nan, 2.0], elevation_m=1.0)
    np.testing.assert_array_equal(got.flooding.view(np.int64), [10 * S])
    assert got.draining.size == 0


@pytest.mark.parametrize("level_fn", [m2_level, m2_s2_level], ids=["M2", "M2+S2"])
def test_crossings_of_a_sampled_tide_match_the_continuous_tide(level_fn):
    # 10-min samples. Linear interpolation errs by about h**2/8 * |L''|/|L'| in
    # time. For pure M2 at z = 1.6 m: cos = -0.25, sin = 0.968, so
    # |L''|/|L'| = w * 0.25/0.968 = 1.405e-4 * 0.258 = 3.6e-5 /s and the error is
    # 600**2/8 * 3.6e-5 = 1.6 s. S2 (amplitude 0.4 m) raises |L''| by at most
    # (30/28.98)**2 * 0.4/1.6 ~ 27 %; 5 s covers both.
    t, x = reference(level_fn)
    got = predicted_crossings(t, x, elevation_m=1.6)
    flood, drain = true_crossings(level_fn, 1.6, -86400.0 + 600, (DAYS + 1) * 86400.0 - 600)
    got_f = got.flooding.view(np.int64) / S - T0
    got_d = got.draining.view(np.int64) / S - T0
    assert got_f.size == flood.size and got_d.size == drain.size
    np.testing.assert_allclose(got_f, flood, atol=5.0)
    np.testing.assert_allclose(got_d, drain, atol=5.0)


# --- observed_transitions ----------------------------------------------------


def test_observed_transitions_at_midpoints_skipping_unknown():
    # states 0 0 1 2 2 1 0 at 0, 60, ..., 360 s: flood between 60 and 120 s -> 90 s;
    # the unknowns are skipped; drain between 300 and 360 s -> 330 s.
    t = np.arange(7) * 60 * S
    got = observed_transitions(t, [0, 0, 1, 2, 2, 1, 0])
    np.testing.assert_array_equal(got.flooding.view(np.int64), [90 * S])
    np.testing.assert_array_equal(got.draining.view(np.int64), [330 * S])
    # 0 2 2 1: flood between the known samples at 0 and 180 s -> 90 s.
    got = observed_transitions(t[:4], [0, 2, 2, 1])
    np.testing.assert_array_equal(got.flooding.view(np.int64), [90 * S])


# --- transition_offsets ------------------------------------------------------


def test_offsets_by_hand():
    h = 3600 * S
    # Predicted floods at 0, 12 h, 24 h; drains at 6 h, 18 h.
    pf, pd = np.array([0, 12, 24]) * h, np.array([6, 18]) * h
    # Observed floods 10 min, 20 min and 3 h 0 min 1 s after the predicted ones
    # (the last beyond max_offset_s = 3 h -> unmatched); drains 30 and 40 min after.
    of = pf + np.array([600, 1200, 10801]) * S
    od = pd + np.array([1800, 2400]) * S
    got = transition_offsets(of, od, pf, pd)
    np.testing.assert_array_equal(got.flood_offsets_s, [600, 1200, np.nan])
    np.testing.assert_array_equal(got.drain_offsets_s, [1800, 2400])
    assert (got.n_matched, got.n_unmatched) == (4, 1)
    # Pooled median of 600, 1200, 1800, 2400 = 1500; kind medians 900 and 2100;
    # common = (900 + 2100) / 2 = 1500. Residuals about the kind medians:
    # -300, 300, -300, 300 -> MAD 300 -> spread 1.4826 * 300 = 444.78 s
    # (scale 1.4826: Rousseeuw & Croux 1993, from memory).
    assert got.median_s == 1500
    assert (got.flood_median_s, got.drain_median_s, got.common_s) == (900, 2100, 1500)
    assert got.spread_s == pytest.approx(444.78, abs=1e-9)


def test_max_offset_is_inclusive_and_the_nearest_is_taken():
    h = 3600 * S
    pf = np.array([0, 12]) * h
    # 3 h exactly after 0 -> matched +10800; 7 h = 5 h before 12 h: nearest is 12 h,
    # -5 h beyond 3 h -> unmatched; 11 h -> -3600 to 12 h.
    got = transition_offsets(np.array([3, 7, 11]) * h, [], pf, [])
    np.testing.assert_array_equal(got.flood_offsets_s, [10800, np.nan, -3600])
    assert math.isnan(got.drain_median_s) and got.common_s == got.flood_median_s == 3600


def test_elevation_error_cancels_in_the_common_offset():
    # A point higher than assumed floods late and drains early by the same amount
    # (symmetric tide): offsets +1500 (3 floods) and -1500 (2 drains). Their pooled
    # median is +1500 (odd count), but the common part is 0 and the spread about the
    # kind medians 0.
    h = 3600 * S
    pf, pd = np.array([0, 12, 24]) * h, np.array([6, 18]) * h
    got = transition_offsets(pf + 1500 * S, pd - 1500 * S, pf, pd)
    assert got.median_s == 1500
    assert got.common_s == 0 and got.spread_s == 0


def test_nothing_matched():
    got = transition_offsets([], [], [0], [0])
    assert got.n_matched == 0 and math.isnan(got.median_s) and math.isnan(got.spread_s)


# --- clock_verdict (decision rules, by hand) ---------------------------------


def offsets(common_s, spread_s, n=100):
    return TransitionOffsets(np.zeros(0), np.zeros(0), common_s, common_s, common_s,
                             common_s, spread_s, n, 0)


@pytest.mark.parametrize(
    "common_s, spread_s, lag_s, suspected, whole_hours",
    [
        (3600, 120, 3600, True, 1),
        (-7200, 120, -7300, True, -2),
        (3600 + 300, 120, 3900, True, 1),  # 5 min from the hour: still named
        (3600 + 301, 120, 3901, True, None),  # 5 min 1 s: not named
        (1200, 10, 1200, False, None),  # not above the 20-min threshold
        (1201, 10, 1201, True, None),
        (1500, 750, 1500, False, None),  # spread not < |offset| / 2
        (1500, 749, 1500, True, None),
        (3600, 120, 3600 - 601, False, None),  # estimates 10 min 1 s apart
        (3600, 120, 3600 - 600, True, 1),
    ],
    ids=["plus_1h", "minus_2h", "hour_tolerance_edge", "past_hour_tolerance",
         "threshold_edge", "above_threshold", "spread_edge", "below_spread_edge",
         "disagree", "agree_edge"],
)
def test_verdict_rules(common_s, spread_s, lag_s, suspected, whole_hours):
    # Defaults: threshold 20 min, spread < |offset| / 2, agreement 10 min,
    # whole hours within 5 min (the project's chosen defaults; common practice, no source).
    got = clock_verdict(offsets(common_s, spread_s), LagEstimate(lag_s, 0.9, False))
    assert (got.suspected, got.whole_hours) == (suspected, whole_hours)
    assert got.offset_s == common_s and got.lag_xcorr_s == lag_s


def test_verdict_needs_transitions_and_a_lag_inside_the_range():
    got = clock_verdict(offsets(3600, 60, n=3), LagEstimate(3600, 0.9, False))
    assert not got.suspected and clock_verdict_text(got).startswith("clock not assessed: 3 transitions")
    got = clock_verdict(offsets(3600, 60), LagEstimate(3600, 0.9, True))
    assert not got.suspected


# --- clock_error_estimate on synthetic deployments ---------------------------


@pytest.mark.parametrize("clock_ahead_s", [3600, -3600], ids=["ahead_1h", "behind_1h"])
@pytest.mark.parametrize("level_fn", [m2_level, m2_s2_level], ids=["M2", "M2+S2"])
def test_whole_hour_clock_error_is_found_with_its_sign(level_fn, clock_ahead_s):
    t, state = deployment(level_fn, z_true=1.6, clock_ahead_s=clock_ahead_s, seed=1)
    rt, rx = reference(level_fn)
    got = clock_error_estimate(t, state, rt, rx, elevation_m=1.6)
    # Logger stamps = true time + clock_ahead_s, so each transition is stamped
    # clock_ahead_s late: offset = observed - predicted = +clock_ahead_s.
    assert got.offset_s == pytest.approx(clock_ahead_s, abs=300)
    assert got.lag_xcorr_s == pytest.approx(clock_ahead_s, abs=300)
    assert got.suspected and got.whole_hours == clock_ahead_s // 3600
    sign = "+" if clock_ahead_s > 0 else "-"
    assert clock_verdict_text(got).startswith(f"probe clock about {sign}60 min off: likely a UTC-offset "
                                  "or daylight-saving setting")
    # Six weeks hold about 42 * 24 / 12.42 * 2 = 162 transitions.
    assert 150 <= got.n_transitions <= 170


def test_correct_clock_is_not_reported():
    t, state = deployment(m2_level, z_true=1.6, clock_ahead_s=0, seed=2)
    got = clock_error_estimate(t, state, *reference(m2_level), elevation_m=1.6)
    assert not got.suspected and got.whole_hours is None
    assert abs(got.offset_s) < 120 and abs(got.lag_xcorr_s) < 120
    assert clock_verdict_text(got).startswith("no clock error suspected")


def test_25_minute_error_is_reported_but_not_as_whole_hours():
    t, state = deployment(m2_level, z_true=1.6, clock_ahead_s=1500, seed=3)
    got = clock_error_estimate(t, state, *reference(m2_level), elevation_m=1.6)
    assert got.offset_s == pytest.approx(1500, abs=300)
    assert got.lag_xcorr_s == pytest.approx(1500, abs=300)
    assert got.suspected and got.whole_hours is None
    assert clock_verdict_text(got).startswith("probe clock about +25 min off: transitions late")
    assert "UTC-offset" not in clock_verdict_text(got)


def test_elevation_error_is_not_taken_for_a_clock_error():
    # A point at 1.9 m surveyed as 1.6 m floods ~23 min late and drains ~23 min
    # early (0.3 m / 0.78 m/h; M2 slope 1.6 * w * sin(acos(-0.25)) = 0.78 m/h at 1.6 m).
    t, state = deployment(m2_level, z_true=1.9, clock_ahead_s=0, seed=4)
    got = clock_error_estimate(t, state, *reference(m2_level), elevation_m=1.6)
    assert not got.suspected
    assert abs(got.offset_s) < 120 and abs(got.lag_xcorr_s) < 120


def test_wet_dry_lag_direct():
    t, state = deployment(m2_level, z_true=1.6, clock_ahead_s=-1800, seed=5)
    got = wet_dry_lag(t, state, *reference(m2_level), elevation_m=1.6, max_lag_s=3600,
                      step_s=120)
    assert got.lag_s == pytest.approx(-1800, abs=180) and not got.at_limit
    # A perfect match would be 1; jitter (+-3 min) and sampling (5 min) cost a few
    # per cent: mismatch ~ 162 transitions * ~1.5 min / 42 days ~ 0.4 %, C = 1 - 2 * that.
    assert 0.95 < got.peak <= 1.0
    # Shift beyond the lag range: reported at the limit.
    got = wet_dry_lag(t, state, *reference(m2_level), elevation_m=1.6, max_lag_s=1200,
                      step_s=120)
    assert got.at_limit and got.lag_s == -1200


# --- effective elevation -----------------------------------------------------


def test_effective_elevation_recovers_the_surveyed_elevation():
    t, state = deployment(m2_level, z_true=1.6, clock_ahead_s=0, seed=6)
    obs = observed_transitions(t, state)
    got = effective_elevation(obs.flooding, obs.draining, *reference(m2_level))
    # Per transition, +-3 min jitter and +-2.5 min sampling at 0.78 m/h give up to
    # +-7 cm; the median of ~160 is within a few cm.
    assert got.median_m == pytest.approx(1.6, abs=0.03)
    assert 150 <= got.n <= 170
    check = elevation_check(got, 1.6, tolerance_m=0.1)
    assert not check.suspect and abs(check.difference_m) < 0.03
    assert elevation_text(check).startswith("elevation consistent")


def test_sensor_higher_than_surveyed_is_flagged():
    t, state = deployment(m2_level, z_true=1.9, clock_ahead_s=0, seed=7)
    obs = observed_transitions(t, state)
    got = elevation_check(effective_elevation(obs.flooding, obs.draining, *reference(m2_level)),
                          1.6, tolerance_m=0.1)
    # Truly at 1.9 m, surveyed as 1.6 m: difference +0.3 m.
    assert got.suspect and got.difference_m == pytest.approx(0.3, abs=0.05)
    assert elevation_text(got).startswith("elevation suspect")


def test_effective_elevation_by_hand_and_outside_the_reference():
    # Reference 0 m at 0 s, 2 m at 100 s: level at 25 s = 0.5 m, at 75 s = 1.5 m;
    # 200 s is outside -> NaN, not counted. Median of 0.5, 1.5 = 1.0;
    # MAD = 0.5 -> spread 0.7413.
    got = effective_elevation([25 * S], [75 * S, 200 * S], np.array([0, 100]) * S, [0.0, 2.0])
    np.testing.assert_allclose(got.levels_m, [0.5, 1.5, np.nan])
    assert got.n == 2 and got.median_m == 1.0
    assert got.spread_m == pytest.approx(1.4826 * 0.5)
    check = elevation_check(got, 1.25, tolerance_m=0.25)  # difference -0.25: at the limit
    assert check.difference_m == -0.25 and not check.suspect


def test_elevation_not_assessed_without_transitions():
    empty = EffectiveElevation(np.zeros(0), math.nan, math.nan, 0)
    got = elevation_check(empty, 1.6, tolerance_m=0.1)
    assert math.isnan(got.difference_m) and not got.suspect


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda: predicted_crossings([0, 1], [1.0], elevation_m=1.0),
         r"predicted_crossings: level and times must have the same shape"),
        (lambda: transition_offsets([1, 0], [], [], [], max_offset_s=60),
         r"transition_offsets: observed_flood must be non-decreasing"),
        (lambda: transition_offsets([], [], [], [], max_offset_s=0),
         r"max_offset_s = 0.0; must be a finite number > 0"),
        (lambda: wet_dry_lag([0, 1], [1, 0], [0, 1], [1.0, 1.0], elevation_m=1.0,
                             max_lag_s=60, step_s=120),
         r"wet_dry_lag: step_s = 120.0 and max_lag_s = 60.0; expected step_s <= max_lag_s"),
        (lambda: observed_transitions([0, 1], [1, 5]),
         r"observed_transitions: state\[1\] = 5; allowed immersion states"),
        (lambda: elevation_check(EffectiveElevation(np.zeros(0), 1.0, 0.0, 1), 1.0,
                                 tolerance_m=-1),
         r"elevation_check: tolerance_m = -1.0; must be a finite number > 0"),
    ],
    ids=["shapes", "unsorted_observed", "zero_max_offset", "step_above_max_lag",
         "bad_state", "negative_tolerance"],
)
def test_error_messages(call, match):
    with pytest.raises(ValueError, match=match):
        call()
