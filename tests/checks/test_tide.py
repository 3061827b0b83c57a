"""Tests for qcpipe.checks.tide.

The definitions of these checks are common practice, no source; expected values
below are worked by hand (working in the comments) or come from plain loops that
follow the docstring definitions sample by sample.
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.checks.tide import (
    companion_gating_flags,
    immersion_consistency_flags,
    residual_series,
    water_level_residual_flags,
)

NAN = np.nan
S = 10**9  # nanoseconds per second


def minutes(n):
    return np.arange(n, dtype=np.int64) * 60 * S


# --- immersion_consistency_flags ---------------------------------------------

# elevation 1.5 m, margin 0.25 m (both exact in binary): band [1.25, 1.75] m.
BAND = dict(elevation_m=1.5, margin_m=0.25)


def test_band_edges_are_inside_the_band():
    # level 1.75 = 1.5 + 0.25 and 1.25 = 1.5 - 0.25 are on the edges -> 2 whatever
    # the state; just outside (1.75 + 2**-20, 1.25 - 2**-20) the state is judged.
    eps = 2.0**-20
    level = np.array([1.75, 1.75, 1.25, 1.25, 1.75 + eps, 1.75 + eps, 1.25 - eps, 1.25 - eps])
    state = np.array([1, 0, 1, 0, 1, 0, 0, 1], dtype=np.int8)
    got = immersion_consistency_flags(minutes(8), state, level, **BAND, fail_after_s=3600)
    assert got.dtype == np.int8
    # wet expected at 4, 5 (state 1 agrees, 0 disagrees); dry at 6, 7 (0 agrees, 1 not).
    # Runs of disagreement: index 5 alone, index 7 alone: 0 s each -> 3.
    np.testing.assert_array_equal(got, [2, 2, 2, 2, 1, 3, 1, 3])


def test_zero_margin_only_the_elevation_itself_is_not_evaluated():
    level = np.array([1.5, 1.5 + 2.0**-20, 1.5 - 2.0**-20])
    got = immersion_consistency_flags(minutes(3), [1, 1, 0], level, elevation_m=1.5,
                                      margin_m=0, fail_after_s=60)
    np.testing.assert_array_equal(got, [2, 1, 1])


def test_fail_after_is_strictly_longer_than():
    # Emersed probe while the level is well above it: every sample disagrees.
    # 60 s steps: run durations 0, 60, 120, 180 s; fail_after_s = 120 -> the sample
    # at exactly 120 s stays 3, the one at 180 s fails.
    got = immersion_consistency_flags(minutes(4), [0, 0, 0, 0], np.full(4, 3.0), **BAND,
                                      fail_after_s=120)
    np.testing.assert_array_equal(got, [3, 3, 3, 4])
    # One nanosecond past 120 s fails.
    t = np.array([0, 120 * S + 1], dtype=np.int64)
    got = immersion_consistency_flags(t, [0, 0], [3.0, 3.0], **BAND, fail_after_s=120)
    np.testing.assert_array_equal(got, [3, 4])


def test_irregular_times_and_run_restarts():
    # times 0, 10, 200, 205, 300, 900 s; level high (wet expected) throughout.
    # states 0 0 0 1 0 0: run A = indices 0..2 (durations 0, 10, 200 s), index 3
    # agrees (1) and ends it, run B = 4..5 (durations 0, 600 s). fail after 150 s.
    t = np.array([0, 10, 200, 205, 300, 900], dtype=np.int64) * S
    got = immersion_consistency_flags(t, [0, 0, 0, 1, 0, 0], np.full(6, 2.5), **BAND,
                                      fail_after_s=150)
    np.testing.assert_array_equal(got, [3, 3, 4, 1, 3, 4])


def test_unknown_state_nan_level_and_band_end_a_run():
    # 60 s steps, wet expected except index 3 (NaN level) and index 6 (in band).
    # states 0 0 2 0 0 0 0 0: unknown at 2 -> 2, NaN level at 3 -> 2, band at 6 -> 2.
    # Runs: {0, 1}: 0, 60 s; {4, 5}: 0, 60 s; {7}: 0 s. fail after 60 s: none > 60.
    level = np.array([3, 3, 3, NAN, 3, 3, 1.5, 3])
    got = immersion_consistency_flags(minutes(8), [0, 0, 2, 0, 0, 0, 0, 0], level, **BAND,
                                      fail_after_s=60)
    np.testing.assert_array_equal(got, [3, 3, 2, 2, 3, 3, 2, 3])
    # Same with fail after 59 s: the second sample of each two-sample run fails.
    got = immersion_consistency_flags(minutes(8), [0, 0, 2, 0, 0, 0, 0, 0], level, **BAND,
                                      fail_after_s=59)
    np.testing.assert_array_equal(got, [3, 4, 2, 2, 3, 4, 2, 3])


def test_missing_reading_is_nine_and_unknown_without_reading_is_two():
    state = np.array([2, 2, 1], dtype=np.int8)
    level = np.array([3.0, 3.0, 3.0])
    got = immersion_consistency_flags(minutes(3), state, level, **BAND, fail_after_s=60)
    np.testing.assert_array_equal(got, [2, 2, 1])
    # The reading at 0 is missing (NaN), at 1 present but the state unknown anyway.
    got = immersion_consistency_flags(minutes(3), state, level, **BAND, fail_after_s=60,
                                      reading=[NAN, 500.0, 1100.0])
    np.testing.assert_array_equal(got, [9, 2, 1])


def test_datetime64_times_any_unit_give_the_same_flags():
    state, level = [0, 0, 0], [3.0, 3.0, 3.0]
    t_s = np.array(["2024-05-01T00:00:00", "2024-05-01T00:01:00", "2024-05-01T00:02:01"],
                   dtype="datetime64[s]")
    for t in (t_s, t_s.astype("datetime64[ms]"), t_s.astype("datetime64[ns]").view(np.int64)):
        got = immersion_consistency_flags(t, state, level, **BAND, fail_after_s=120)
        np.testing.assert_array_equal(got, [3, 3, 4])  # 121 s > 120 s at the end


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda: immersion_consistency_flags(minutes(2), [1, 3], [1.0, 1.0], **BAND,
                                             fail_after_s=60),
         r"immersion_consistency_flags: state\[1\] = 3; allowed immersion states"),
        (lambda: immersion_consistency_flags(minutes(2), [1.0, 0.0], [1.0, 1.0], **BAND,
                                             fail_after_s=60),
         r"state has dtype float64; expected integer immersion states"),
        (lambda: immersion_consistency_flags(minutes(2), [1, 0], [1.0], **BAND,
                                             fail_after_s=60),
         r"level and times must have the same shape; found \(1,\) and \(2,\)"),
        (lambda: immersion_consistency_flags(minutes(2), [1, 0], [1.0, 1.0], elevation_m=1,
                                             margin_m=-0.1, fail_after_s=60),
         r"margin_m = -0.1; must be a finite number >= 0"),
        (lambda: companion_gating_flags(minutes(2), [1, 0], settle_s=-1),
         r"companion_gating_flags: settle_s = -1.0; must be a finite number >= 0"),
        (lambda: companion_gating_flags(minutes(3)[::-1], [1, 0, 1], settle_s=1),
         r"times must be non-decreasing"),
        (lambda: water_level_residual_flags([1.0], [1.0], suspect_m=0.5, fail_m=0.2),
         r"suspect_m = 0.5 and fail_m = 0.2; expected suspect_m <= fail_m"),
        (lambda: residual_series([1.0, 2.0], [1.0]),
         r"level and predicted must have the same shape"),
    ],
    ids=["bad_state_value", "float_state", "level_shape", "negative_margin",
         "negative_settle", "unsorted_times", "residual_limits_swapped", "residual_shapes"],
)
def test_error_messages(call, match):
    with pytest.raises(ValueError, match=match):
        call()


# --- companion_gating_flags --------------------------------------------------


def test_settling_interval_is_half_open():
    # 60 s steps, states 0 1 1 1 1, settle 120 s. The immersion starts at index 1
    # (t = 60 s); elapsed 0, 60, 120, 180 s -> 3, 3, then 1 at exactly 120 s.
    got = companion_gating_flags(minutes(5), [0, 1, 1, 1, 1], settle_s=120)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, [4, 3, 3, 1, 1])
    # One nanosecond short of 120 s is still settling.
    t = np.array([0, 60 * S, 180 * S - 1], dtype=np.int64)
    got = companion_gating_flags(t, [0, 1, 1], settle_s=120)
    np.testing.assert_array_equal(got, [4, 3, 3])


def test_record_starting_immersed_settles_from_its_first_sample():
    # states 1 1 1 at 0, 60, 120 s, settle 90 s: elapsed 0, 60, 120 -> 3 3 1.
    got = companion_gating_flags(minutes(3), [1, 1, 1], settle_s=90)
    np.testing.assert_array_equal(got, [3, 3, 1])
    # Leading unknowns do not count as emersed either: start is index 2 (t = 120 s).
    got = companion_gating_flags(minutes(5), [2, 2, 1, 1, 1], settle_s=90)
    np.testing.assert_array_equal(got, [2, 2, 3, 3, 1])


def test_unknown_samples_neither_end_nor_start_an_immersion():
    # 60 s steps: 0 1 2 2 1 1 0 2 1 1, settle 150 s.
    # Immersion 1 starts at index 1 (60 s): index 4 (240 s, elapsed 180) -> 1,
    # index 5 -> 1; the unknowns at 2, 3 -> 2 and do not restart it.
    # Index 6 emersed -> 4; index 7 unknown -> 2; immersion 2 starts at index 8
    # (480 s): elapsed 0, 60 -> 3, 3.
    got = companion_gating_flags(minutes(10), [0, 1, 2, 2, 1, 1, 0, 2, 1, 1], settle_s=150)
    np.testing.assert_array_equal(got, [4, 3, 2, 2, 1, 1, 4, 2, 3, 3])


def test_zero_settle_time_and_irregular_times():
    t = np.array([0, 5, 500, 501, 4000], dtype=np.int64) * S
    got = companion_gating_flags(t, [0, 1, 1, 0, 1], settle_s=0)
    np.testing.assert_array_equal(got, [4, 1, 1, 4, 1])
    # settle 495 s: start at 5 s -> 500 s is elapsed 495 = settle -> 1; start at
    # 4000 s -> 3.
    got = companion_gating_flags(t, [0, 1, 1, 0, 1], settle_s=495)
    np.testing.assert_array_equal(got, [4, 3, 1, 4, 3])


@pytest.mark.parametrize("n", [0, 1], ids=["empty", "one"])
def test_short_series(n):
    t, s = minutes(n), np.ones(n, dtype=np.int8)
    got = companion_gating_flags(t, s, settle_s=60)
    assert got.dtype == np.int8 and got.shape == (n,)
    np.testing.assert_array_equal(got, [3] * n)
    got = immersion_consistency_flags(t, s, np.full(n, 3.0), **BAND, fail_after_s=60)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, [1] * n)


# --- water_level_residual_flags ----------------------------------------------


def test_residual_limits_pass_at_equality():
    # r = level - predicted = 0, 0.25, 0.5, 0.5 + 2**-20, 1.0, 1.0 + 2**-20, -1.25
    # (all exact in binary). suspect 0.25 (exclusive), fail 1.0 (exclusive).
    pred = np.full(7, 2.0)
    level = pred + np.array([0, 0.25, 0.5, 0.5 + 2.0**-20, 1.0, 1.0 + 2.0**-20, -1.25])
    got = water_level_residual_flags(level, pred, suspect_m=0.25, fail_m=1.0)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, [1, 1, 3, 3, 3, 4, 4])


def test_residual_missing_level_and_missing_prediction():
    level = np.array([NAN, 1.0, NAN, np.inf, 1.0])
    pred = np.array([1.0, NAN, NAN, 1.0, np.inf])
    got = water_level_residual_flags(level, pred, suspect_m=0.1, fail_m=0.2)
    np.testing.assert_array_equal(got, [9, 2, 9, 9, 2])
    np.testing.assert_array_equal(residual_series(level, pred), [NAN] * 5)


def test_residual_series_sign_and_shape():
    got = residual_series([[2.5, 1.0]], [[2.0, 1.5]])
    np.testing.assert_array_equal(got, [[0.5, -0.5]])  # observed - predicted


# --- the key property: equal to plain loops over samples ---------------------


def naive_consistency(t, state, level, reading, z, margin, fail_ns):
    def verdict(i):  # "missing", None (not evaluated), True (agree), False (disagree)
        if reading is not None and not math.isfinite(reading[i]):
            return "missing"
        if state[i] == 2 or math.isnan(level[i]):
            return None
        if level[i] > z + margin:
            return bool(state[i] == 1)
        if level[i] < z - margin:
            return bool(state[i] == 0)
        return None

    flags = []
    for i in range(len(t)):
        vi = verdict(i)
        if vi == "missing":
            flags.append(9)
        elif vi is None:
            flags.append(2)
        elif vi:
            flags.append(1)
        else:
            r = i
            while r > 0 and verdict(r - 1) is False:
                r -= 1
            flags.append(4 if t[i] - t[r] > fail_ns else 3)
    return np.array(flags)


def naive_gating(t, state, settle_ns):
    flags = []
    for i in range(len(t)):
        if state[i] == 0:
            flags.append(4)
        elif state[i] == 2:
            flags.append(2)
        else:
            start = i
            j = i - 1
            while j >= 0 and state[j] != 0:
                if state[j] == 1:
                    start = j
                j -= 1
            flags.append(3 if t[i] - t[start] < settle_ns else 1)
    return np.array(flags)


STEPS_S = [0, 1, 30, 59, 60, 61, 120, 300, 3600]
LEVEL = st.one_of(st.sampled_from([1.25, 1.5, 1.75, 0.0, 3.0]), st.floats(0, 3), st.just(NAN))


@st.composite
def immersion_series(draw, max_n=40):
    n = draw(st.integers(0, max_n))
    steps = draw(st.lists(st.sampled_from(STEPS_S), min_size=n, max_size=n))
    t0 = draw(st.integers(-2 * 10**9, 2 * 10**9))  # seconds: years 1906..2033
    t = (t0 + np.cumsum(np.array(steps, dtype=np.int64))) * S
    state = np.array(draw(st.lists(st.sampled_from([0, 1, 2]), min_size=n, max_size=n)),
                     dtype=np.int8)
    level = np.array(draw(st.lists(LEVEL, min_size=n, max_size=n)), dtype=float)
    reading = np.array(draw(st.lists(st.sampled_from([NAN, 400.0, 1100.0]), min_size=n,
                                     max_size=n)), dtype=float)
    return t, state, level, reading


@settings(max_examples=200, deadline=None)
@given(immersion_series(), st.sampled_from([0.0, 0.25]), st.sampled_from([1, 60, 61, 600]),
       st.booleans())
def test_consistency_matches_plain_loop(series, margin, fail_s, with_reading):
    t, state, level, reading = series
    reading = reading if with_reading else None
    got = immersion_consistency_flags(t, state, level, elevation_m=1.5, margin_m=margin,
                                      fail_after_s=fail_s, reading=reading)
    np.testing.assert_array_equal(
        got, naive_consistency(t, state, level, reading, 1.5, margin, fail_s * S))


@settings(max_examples=200, deadline=None)
@given(immersion_series(), st.sampled_from([0, 1, 60, 61, 600]))
def test_gating_matches_plain_loop(series, settle_s):
    t, state, _, _ = series
    got = companion_gating_flags(t, state, settle_s=settle_s)
    np.testing.assert_array_equal(got, naive_gating(t, state, settle_s * S))
