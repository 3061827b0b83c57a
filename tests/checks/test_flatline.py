"""Tests for qcpipe.checks.flatline."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.checks import flat_line_flags

NAN = np.nan
S = 10**9  # nanoseconds per second


def minutes(n):
    return np.arange(n, dtype=np.int64) * 60 * S


def test_run_durations_reach_thresholds_at_equality():
    # 60 s steps, x = 1 1 1 1 1 2, tolerance 0. Run durations by hand:
    # 0, 60, 120, 180, 240 s, then a new run at x = 2 (0 s).
    # suspect after 120 s, fail after 240 s (both reached at equality).
    x = np.array([1, 1, 1, 1, 1, 2], dtype=float)
    got = flat_line_flags(x, minutes(6), tolerance=0, suspect_after_s=120, fail_after_s=240)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, [1, 1, 3, 3, 4, 1])


def test_one_nanosecond_short_of_threshold():
    t = np.array([0, 120 * S - 1], dtype=np.int64)
    got = flat_line_flags(np.array([1.0, 1.0]), t, tolerance=0, suspect_after_s=120,
                          fail_after_s=240)
    np.testing.assert_array_equal(got, [1, 1])


def test_tolerance_is_inclusive_and_drift_counts():
    # Steps of exactly 0.5 (exact in binary) with tolerance 0.5: one run, a slow
    # drift from 0 to 2 counted as flat (documented). Durations 0..240 s.
    x = np.array([0.0, 0.5, 1.0, 1.5, 2.0])
    got = flat_line_flags(x, minutes(5), tolerance=0.5, suspect_after_s=120, fail_after_s=240)
    np.testing.assert_array_equal(got, [1, 1, 3, 3, 4])
    # Tolerance 0.25: every step starts a new run.
    got = flat_line_flags(x, minutes(5), tolerance=0.25, suspect_after_s=120, fail_after_s=240)
    np.testing.assert_array_equal(got, [1, 1, 1, 1, 1])


def test_nan_is_skipped_within_a_run():
    # x = 1 NaN 1 1 at 0, 60, 120, 180 s: the NaN is 9 and the run goes on
    # across it (successive valid values are equal): durations 0, -, 120, 180.
    x = np.array([1.0, NAN, 1.0, 1.0])
    got = flat_line_flags(x, minutes(4), tolerance=0, suspect_after_s=120, fail_after_s=180)
    np.testing.assert_array_equal(got, [1, 9, 3, 4])


def test_irregular_times():
    # Constant values at 0, 10, 200, 205 s: durations 0, 10, 200, 205 s;
    # suspect 100 s, fail 205 s.
    t = np.array([0, 10, 200, 205], dtype=np.int64) * S
    got = flat_line_flags(np.zeros(4), t, tolerance=0, suspect_after_s=100, fail_after_s=205)
    np.testing.assert_array_equal(got, [1, 1, 3, 4])


def test_run_restarts_after_a_change():
    # 3 3 3 7 7 7 at 60 s: second run starts at index 3. suspect 120, fail 600.
    x = np.array([3, 3, 3, 7, 7, 7], dtype=float)
    got = flat_line_flags(x, minutes(6), tolerance=1, suspect_after_s=120, fail_after_s=600)
    np.testing.assert_array_equal(got, [1, 1, 3, 1, 1, 3])


@pytest.mark.parametrize(
    "x, expected",
    [([], []), ([1.0], [1]), ([NAN], [9]), ([np.inf, 1.0], [9, 1])],
    ids=["empty", "one_value", "one_nan", "inf_is_missing"],
)
def test_short_and_empty_series(x, expected):
    x = np.array(x)
    got = flat_line_flags(x, minutes(x.size), tolerance=0, suspect_after_s=1, fail_after_s=2)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, expected)


# --- the key property: equal to a plain loop walking back along the run ------


def naive_flat_line(x, t, tolerance, suspect_ns, fail_ns):
    flags = []
    for i in range(len(x)):
        if not math.isfinite(x[i]):
            flags.append(9)
            continue
        valid = [j for j in range(i + 1) if math.isfinite(x[j])]
        r = len(valid) - 1  # position of i among valid samples; walk back
        while r > 0 and abs(x[valid[r]] - x[valid[r - 1]]) <= tolerance:
            r -= 1
        lasted = t[i] - t[valid[r]]
        flags.append(4 if lasted >= fail_ns else 3 if lasted >= suspect_ns else 1)
    return np.array(flags)


STEPS_S = [0, 1, 2, 5, 30, 59, 60, 61, 120, 300, 3600]
# Mostly a few dyadic values so that runs and exact-tolerance steps are common.
VALUE = st.one_of(st.sampled_from([0.0, 0.5, 1.0, 1.5, 4.0]), st.floats(-5, 5), st.just(NAN))


@st.composite
def irregular_series(draw, max_n=40):
    n = draw(st.integers(0, max_n))
    steps = draw(st.lists(st.sampled_from(STEPS_S), min_size=n, max_size=n))
    t0 = draw(st.integers(-2 * 10**9, 2 * 10**9))  # seconds: years 1906..2033
    t = (t0 + np.cumsum(np.array(steps, dtype=np.int64))) * S
    x = np.array(draw(st.lists(VALUE, min_size=n, max_size=n)), dtype=float)
    return x, t


@settings(max_examples=300, deadline=None)
@given(
    irregular_series(),
    st.sampled_from([0.0, 0.5, 1.0]),
    st.sampled_from([1, 60, 61, 300, 3600]),
    st.sampled_from([0, 1, 60, 600, 7200]),
)
def test_matches_plain_loop_on_irregular_series(series, tolerance, suspect_s, extra_s):
    x, t = series
    fail_s = suspect_s + extra_s
    got = flat_line_flags(x, t, tolerance=tolerance, suspect_after_s=suspect_s,
                          fail_after_s=fail_s)
    np.testing.assert_array_equal(got, naive_flat_line(x, t, tolerance, suspect_s * S, fail_s * S))
