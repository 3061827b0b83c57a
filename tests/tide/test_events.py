"""Tests for qcpipe.tide.events: high and low waters and their tidal-day classes.

Outside references: the analytical extrema of a cosine, and for the mixed tide
the roots of its analytical derivative found by scipy.optimize.brentq.
Constituent speeds, deg/h (Schureman 1958, values from memory):
M2 28.9841042, K1 15.0410686, O1 13.9430356.
"""

import numpy as np
import pytest
from scipy.optimize import brentq

from qcpipe.tide.events import TideEvents, high_low_waters, tidal_day_classes

S = 10**9
M2, K1, O1 = 28.9841042, 15.0410686, 13.9430356  # deg/h, Schureman 1958 (from memory)
T_M2 = 360.0 / M2 * 3600.0  # s, 12.4206 h
A, Z0, PHASE_T = 1.2, 2.0, 3600.0  # m, m, s: first high water 1 h after the start
T0 = np.datetime64("2024-03-01T00:00:00", "ns").view(np.int64)  # any origin


def m2(t_s):
    return Z0 + A * np.cos(np.deg2rad(M2) / 3600.0 * (t_s - PHASE_T))


def mixed(t_s):
    w = np.deg2rad([M2, K1, O1]) / 3600.0
    return Z0 + 0.6 * np.cos(w[0] * t_s) + 0.4 * np.cos(w[1] * t_s - 0.5) + 0.3 * np.cos(w[2] * t_s - 0.2)


def mixed_rate(t_s):
    w = np.deg2rad([M2, K1, O1]) / 3600.0
    return -(0.6 * w[0] * np.sin(w[0] * t_s) + 0.4 * w[1] * np.sin(w[1] * t_s - 0.5)
             + 0.3 * w[2] * np.sin(w[2] * t_s - 0.2))


def seconds(events):
    return (events.time.view(np.int64) - T0) / S


def analytic_m2_events(t_start, t_end):
    """Highs at PHASE_T + k T, lows at PHASE_T + (k + 1/2) T inside the record."""
    k = np.arange(-2, int((t_end - t_start) / T_M2 * 2) + 4) / 2
    tk = PHASE_T + k * T_M2
    keep = (tk > t_start + 1800) & (tk < t_end - 1800)
    return tk[keep], np.where(k[keep] % 1 == 0, Z0 + A, Z0 - A)


def check_m2(events, t_start, t_end, *, atol_s=60.0, atol_m=0.001):
    tk, hk = analytic_m2_events(t_start, t_end)
    assert len(events) == tk.size
    np.testing.assert_allclose(seconds(events), tk, atol=atol_s, rtol=0)
    np.testing.assert_allclose(events.height, hk, atol=atol_m, rtol=0)
    np.testing.assert_array_equal(events.kind, np.where(hk > Z0, "high", "low"))


def test_pure_m2_events_at_analytical_times_and_heights():
    t = np.arange(0, 5 * 86400, 60.0)  # 1-min sampling, 5 days
    ev = high_low_waters(T0 + (t * S).astype(np.int64), m2(t))
    assert isinstance(ev, TideEvents)
    assert ev.time.dtype == np.dtype("datetime64[ns]")
    check_m2(ev, t[0], t[-1])


def test_m2_with_noise_and_10_s_wiggles():
    # 1-s sampling over 2.5 days; white noise 5 mm and 10-s waves of 3 cm
    # amplitude. Tolerances 1 min and 1 mm as required; the expected scatter
    # of the fitted crest is about 1.5 * 5 mm / sqrt(3600) = 0.13 mm.
    rng = np.random.default_rng(20240301)
    t = np.arange(0, 2.5 * 86400, 1.0)
    h = m2(t) + rng.normal(0, 0.005, t.size) + 0.03 * np.sin(2 * np.pi * t / 10.0)
    ev = high_low_waters(T0 + (t * S).astype(np.int64), h)
    check_m2(ev, t[0], t[-1])


def test_irregular_sampling():
    rng = np.random.default_rng(7)
    t = np.cumsum(rng.uniform(20, 100, 9000))  # about 5 days, steps 20..100 s
    ev = high_low_waters(T0 + (t * S).astype(np.int64), m2(t))
    check_m2(ev, t[0], t[-1])


def test_shifted_time_origin_shifts_the_events():
    t = np.arange(0, 3 * 86400, 300.0)
    base = high_low_waters(T0 + (t * S).astype(np.int64), m2(t))
    shift = 123_456_789 * S
    moved = high_low_waters(T0 + shift + (t * S).astype(np.int64), m2(t))
    np.testing.assert_array_equal(moved.time.view(np.int64) - shift, base.time.view(np.int64))
    np.testing.assert_array_equal(moved.height, base.height)


def test_noise_without_tide_gives_no_events():
    rng = np.random.default_rng(3)
    t = np.arange(0, 3 * 86400, 60.0)
    h = 1.0 + rng.normal(0, 0.01, t.size)
    assert len(high_low_waters(T0 + (t * S).astype(np.int64), h)) == 0


def test_scattered_nans_change_nothing():
    t = np.arange(0, 4 * 86400, 60.0)
    h = m2(t)
    h[::7] = np.nan
    ev = high_low_waters(T0 + (t * S).astype(np.int64), h)
    check_m2(ev, t[0], t[-1])


def test_gap_over_a_high_water_hides_it_and_creates_nothing():
    # A 4-h NaN block centred on the high water at PHASE_T + 2 T: that high must
    # be absent; every other analytical event is found, none added.
    t = np.arange(0, 4 * 86400, 60.0)
    h = m2(t)
    centre = PHASE_T + 2 * T_M2
    h[np.abs(t - centre) < 2 * 3600] = np.nan
    ev = high_low_waters(T0 + (t * S).astype(np.int64), h)
    tk, hk = analytic_m2_events(t[0], t[-1])
    keep = np.abs(tk - centre) > 3 * 3600
    assert len(ev) == keep.sum()
    np.testing.assert_allclose(seconds(ev), tk[keep], atol=60, rtol=0)
    np.testing.assert_allclose(ev.height, hk[keep], atol=0.001, rtol=0)


def test_gaps_on_rising_and_falling_limbs_with_noise_create_no_event():
    # Nine 2-h NaN blocks centred on mid-flood and mid-ebb (a quarter period from
    # the extrema); 2-cm noise at the edges of each piece of record must not
    # make a high/low pair there: exactly the analytical events come back.
    rng = np.random.default_rng(11)
    t = np.arange(0, 3 * 86400, 60.0)
    h = m2(t) + rng.normal(0, 0.02, t.size)
    for f in (0.75, 1.25, 1.75, 2.25, 2.75, 3.25, 3.75, 4.25, 4.75):
        h[np.abs(t - PHASE_T - f * T_M2) < 3600] = np.nan
    ev = high_low_waters(T0 + (t * S).astype(np.int64), h)
    tk, _ = analytic_m2_events(t[0], t[-1])
    assert len(ev) == tk.size
    np.testing.assert_array_equal(ev.kind[::2], "high")
    # Time tolerance 10 min: with 2-cm noise at 1-min sampling the fitted crest
    # time scatters by about 100 s (slope noise over the 1-h fit window divided
    # by the curvature A * omega^2), so 10 min is about 6 standard deviations.
    np.testing.assert_allclose(seconds(ev), tk, atol=600, rtol=0)


def test_extremum_whose_window_is_cut_by_a_gap_is_not_reported():
    # Amplitude 3 m; the record stops 25 min after the high at PHASE_T + T and
    # resumes 3 h later. The level falls 3 * (1 - cos(omega * 25 min)) = 6.7 cm
    # before the gap (more than min_range_m = 1 cm, so the range test alone
    # would keep the high), but the high's 1-h smoothing window is cut by the
    # gap, so it is dropped; the other events stay.
    t = np.arange(0, 2 * 86400, 60.0)
    h = Z0 + 3.0 / A * (m2(t) - Z0)
    stop = PHASE_T + T_M2 + 1500
    h[(t > stop) & (t < stop + 3 * 3600)] = np.nan
    ev = high_low_waters(T0 + (t * S).astype(np.int64), h, min_range_m=0.01)
    tk, _ = analytic_m2_events(t[0], t[-1])
    expected = tk[np.abs(tk - (PHASE_T + T_M2)) > 60]
    np.testing.assert_allclose(seconds(ev), expected, atol=60, rtol=0)


def test_mixed_tide_events_match_derivative_roots():
    t = np.arange(0, 15 * 86400, 360.0)  # 6-min sampling, 15 days
    ev = high_low_waters(T0 + (t * S).astype(np.int64), mixed(t))
    # Reference: every sign change of the analytical derivative on a 1-min grid,
    # refined by brentq; kept if the neighbouring extrema differ by >= 0.05 m
    # (min_range_m) and the extremum lies 30 min inside the record.
    g = np.arange(0, 15 * 86400, 60.0)
    r = mixed_rate(g)
    i = np.flatnonzero(np.sign(r[:-1]) != np.sign(r[1:]))
    roots = np.array([brentq(mixed_rate, g[j], g[j + 1], xtol=1e-3) for j in i])
    roots = roots[(roots > 1800) & (roots < t[-1] - 1800)]
    assert np.all(np.abs(np.diff(mixed(roots))) >= 0.05)
    assert np.all(np.diff(roots) >= 4 * 3600)
    assert len(ev) == roots.size
    np.testing.assert_allclose(seconds(ev), roots, atol=60, rtol=0)
    np.testing.assert_allclose(ev.height, mixed(roots), atol=0.001, rtol=0)


def test_mixed_tide_classes():
    t = np.arange(0, 15 * 86400, 360.0)
    ev = high_low_waters(T0 + (t * S).astype(np.int64), mixed(t))
    labels = tidal_day_classes(ev)
    assert set(labels) == {"HHW", "LHW", "HLW", "LLW"}
    assert np.all(np.isin(labels[ev.is_high], ["HHW", "LHW"]))
    assert np.all(np.isin(labels[~ev.is_high], ["LLW", "HLW"]))
    # Tidal days of 24.8412 h (Schureman 1958, from memory) from 3.1 h before
    # the first event: within each, one HHW, at least as high as its LHW.
    day = np.floor((seconds(ev) - seconds(ev)[0] + 24.8412 * 3600 / 8) / (24.8412 * 3600))
    for d in np.unique(day):
        in_day = day == d
        highs = in_day & ev.is_high
        lows = in_day & ~ev.is_high
        if highs.any():
            assert (labels[highs] == "HHW").sum() == 1
            assert ev.height[highs][labels[highs] == "HHW"][0] == ev.height[highs].max()
        if lows.any():
            assert (labels[lows] == "LLW").sum() == 1
            assert ev.height[lows][labels[lows] == "LLW"][0] == ev.height[lows].min()


def test_classes_by_hand():
    # Four events within one tidal day, heights by hand: 1.5 and 1.1 m highs,
    # 0.2 and 0.6 m lows -> HHW, HLW, LHW, LLW in time order.
    hours = np.array([0, 6, 12, 18]) * 3600 * S
    ev = TideEvents(
        time=(T0 + hours).astype("datetime64[ns]"),
        height=np.array([1.5, 0.6, 1.1, 0.2]),
        kind=np.array(["high", "low", "high", "low"]),
    )
    np.testing.assert_array_equal(tidal_day_classes(ev), ["HHW", "HLW", "LHW", "LLW"])
    # Origin 13 h in: the events at 0, 6, 12 h fall in the tidal day before it
    # (1.5 HHW, 1.1 LHW, 0.6 the only low -> LLW); the 18-h low is alone in its
    # day -> LLW.
    later = tidal_day_classes(ev, origin=np.datetime64(int(T0 + 13 * 3600 * S), "ns"))
    np.testing.assert_array_equal(later, ["HHW", "LLW", "LHW", "LLW"])


def test_empty_and_tiny_series():
    assert len(high_low_waters(np.zeros(0, "datetime64[ns]"), np.zeros(0))) == 0
    assert len(high_low_waters(np.array([0, 1], dtype=np.int64), [1.0, np.nan])) == 0
    assert tidal_day_classes(high_low_waters(np.zeros(0, np.int64), np.zeros(0))).size == 0


@pytest.mark.parametrize(
    "kwargs, match",
    [({"min_separation_s": 0}, "min_separation_s = 0.0; must be a finite number > 0"),
     ({"smoothing_s": -1}, "smoothing_s = -1.0; must be a finite number >= 0"),
     ({"max_gap_s": float("inf")}, "max_gap_s = inf")],
    ids=["separation", "smoothing", "gap"],
)
def test_error_messages(kwargs, match):
    with pytest.raises(ValueError, match=match):
        high_low_waters(np.arange(5, dtype=np.int64), np.zeros(5), **kwargs)


def test_unsorted_times_are_refused():
    with pytest.raises(ValueError, match="must be non-decreasing"):
        high_low_waters(np.array([0, 2, 1], dtype=np.int64), np.zeros(3))


# ---------------------------------------------------------------- any form factor
# Reference: tests/tide/brute_tide.py (independent: analytical derivative roots on a
# 20-s grid refined by brentq, and the minimum-height rule by a plain loop).

FORM_FACTORS = [0.1, 0.5, 0.9, 1.2, 2.0, 4.0, float("inf")]


@pytest.mark.parametrize("form_factor", FORM_FACTORS, ids=lambda f: f"F={f:g}")
@pytest.mark.parametrize("step_s", [360.0, 900.0], ids=["6min", "15min"])
def test_events_at_every_form_factor_match_brute_force(form_factor, step_s):
    # (K1 + O1) / (M2 + S2) = form_factor, 32 days; every brute-force event found
    # with the same kind, heights within 5 mm and times within 5 min (the
    # tolerances of issue 13), and no other event
    from tests.tide.brute_tide import brute_events, constituents_for_form_factor, level

    amps = constituents_for_form_factor(form_factor)
    t = np.arange(0, 32 * 86400 + 1, step_s)
    ev = high_low_waters(T0 + (t * S).astype(np.int64), level(amps, t))
    bt, bh, bhigh = brute_events(amps, t[0], t[-1])
    assert len(ev) == bt.size
    np.testing.assert_array_equal(ev.kind, np.where(bhigh, "high", "low"))
    np.testing.assert_allclose(seconds(ev), bt, atol=300, rtol=0)
    np.testing.assert_allclose(ev.height, bh, atol=0.005, rtol=0)


def test_mixed_tide_pairs_closer_than_four_hours_are_kept():
    # F = 2: the brute-force record holds high/low pairs about 3 h apart and more
    # than min_range_m = 5 cm different; the former default 4-h separation rule
    # deleted them, the default (no time rule) keeps them
    from tests.tide.brute_tide import brute_events, constituents_for_form_factor, level

    amps = constituents_for_form_factor(2.0)
    t = np.arange(0, 32 * 86400 + 1, 360.0)
    bt, _, _ = brute_events(amps, t[0], t[-1])
    assert np.diff(bt).min() < 3.5 * 3600
    ev = high_low_waters(T0 + (t * S).astype(np.int64), level(amps, t))
    assert len(ev) == bt.size
    fewer = high_low_waters(T0 + (t * S).astype(np.int64), level(amps, t), min_separation_s=4 * 3600)
    assert len(fewer) < bt.size


def test_broad_diurnal_crest_times_within_a_minute():
    # Purely diurnal tide at neap (K1 and O1 nearly opposed; the crests are
    # broad and asymmetric), 15-min sampling rounded to 1 mm as a gauge reports
    # it: crest times within 1 min of the derivative roots (the former parabola
    # over 1 h missed three of 63 crests here by more than that)
    from tests.tide.brute_tide import brute_events, constituents_for_form_factor, level

    amps = constituents_for_form_factor(float("inf"))
    t = np.arange(0, 32 * 86400 + 1, 900.0)
    h = np.round(level(amps, t), 3)
    ev = high_low_waters(T0 + (t * S).astype(np.int64), h)
    bt, bh, _ = brute_events(amps, t[0], t[-1])
    assert len(ev) == bt.size
    np.testing.assert_allclose(seconds(ev), bt, atol=60, rtol=0)
    np.testing.assert_allclose(ev.height, bh, atol=0.001, rtol=0)
