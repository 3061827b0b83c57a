"""Tests for qcpipe.checks.rate."""

import math
import statistics

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.checks import rate_of_change_flags

NAN = np.nan
S = 10**9  # nanoseconds per second


def minutes(n):
    return np.arange(n, dtype=np.int64) * 60 * S


def test_hand_worked_series():
    # 60 s steps, window 300 s (open, so it holds the 4 samples 60..240 s back).
    # x = 0 1 0 1 0 1 0 5. By hand (s = sample standard deviation):
    #   i=0: first sample -> 2
    #   i=1: window {0}            k=1 < 3 -> 2
    #   i=2: window {0, 1}         k=2 < 3 -> 2
    #   i=3: window {0, 1, 0}      mean 1/3, sum of squares 2/3, s^2 = 1/3,
    #        s = 0.577; step 1 <= 3 s = 1.732 -> 1
    #   i=4..6: window of four 0/1 values, s^2 = 1/3; step 1 -> 1
    #   i=7: window {1, 0, 1, 0}, s = 0.577; step |5 - 0| = 5 > 1.732 -> 3
    x = np.array([0, 1, 0, 1, 0, 1, 0, 5], dtype=float)
    got = rate_of_change_flags(x, minutes(8), window_s=300, n_sigma=3)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, [2, 2, 2, 1, 1, 1, 1, 3])


def test_window_start_is_excluded():
    # Times 0, 60, 120, 180 s, x = 10 0 0 1, min_samples 2. For i=3 with
    # window_s = 180 the window (0, 180) holds {0, 0}: s = 0, step 1 > 0 -> 3.
    # One ns wider, the sample at 0 s (value 10) joins: {10, 0, 0},
    # s = sqrt(((20/3)^2 + 2 (10/3)^2) / 2) = 5.77; 1 <= 3 * 5.77 -> 1.
    x = np.array([10.0, 0.0, 0.0, 1.0])
    t = minutes(4)
    assert rate_of_change_flags(x, t, window_s=180, n_sigma=3, min_samples=2)[3] == 3
    assert rate_of_change_flags(x, t, window_s=180 + 1e-9, n_sigma=3, min_samples=2)[3] == 1


def test_sample_at_the_same_time_is_not_in_the_window():
    # Times 0, 60, 120, 120 s; x = 0 0 4 5; window 200 s, n_sigma 1, min 2.
    # i=3: step |5 - 4| = 1; window (-80, 120) s holds {0, 0} (the sample at
    # 120 s is excluded): s = 0 -> 3. Were it included, {0, 0, 4} gives
    # s = sqrt(96/18) = 2.31 and the step would pass.
    t = np.array([0, 60, 120, 120], dtype=np.int64) * S
    x = np.array([0.0, 0.0, 4.0, 5.0])
    assert rate_of_change_flags(x, t, window_s=200, n_sigma=1, min_samples=2)[3] == 3


def test_constant_series():
    # s = 0: a zero step passes, any nonzero step is suspect.
    x = np.array([5.0, 5.0, 5.0, 5.0, 5.0, 5.0 + 1e-12, 5.0 + 1e-12])
    got = rate_of_change_flags(x, minutes(7), window_s=1e6, n_sigma=3)
    # i=0 first; i=1, 2 fewer than 3 in window; i=3, 4 step 0 -> 1;
    # i=5 step 1e-12 > 0 -> 3; i=6 window {5 x5, 5+1e-12}, s > 0, step 0 -> 1.
    np.testing.assert_array_equal(got, [2, 2, 2, 1, 1, 3, 1])


def test_locally_constant_window_inside_varying_series():
    # Ten varying values (invented), then eight samples of 20.3, the last raised
    # by 1e-9; window 300 s (the 4 previous samples). At the last sample the
    # window holds four equal values 20.3, so s is exactly 0 and the 1e-9 step is
    # suspect. Plain cumulative sums leave a rounding residue here (s^2 about
    # 1.5e-13 in float64, found by trying), which would hide the step; the exact
    # constant-window guard must catch it. Samples 14..16 have step 0 -> 1.
    head = [-1.87, 0.124, -6.975, -0.656, -3.738, -2.197, -1.633, -0.949, 1.235, 3.128]
    x = np.concatenate([head, np.full(8, 20.3)])
    x[-1] = 20.3 + 1e-9
    got = rate_of_change_flags(x, minutes(x.size), window_s=300, n_sigma=3)
    np.testing.assert_array_equal(got[14:], [1, 1, 1, 3])


def test_nan_is_skipped_for_step_and_window():
    # x = 0 1 0 1 NaN 4, window covers all the past. i=5: previous valid value is
    # x[3] = 1, step 3; window {0, 1, 0, 1}, s = 0.577, 2 s = 1.155 -> 3.
    # i=3: window {0, 1, 0}, s = 0.577; step 1 <= 1.155 -> 1.
    x = np.array([0.0, 1.0, 0.0, 1.0, NAN, 4.0])
    got = rate_of_change_flags(x, minutes(6), window_s=1e6, n_sigma=2)
    np.testing.assert_array_equal(got, [2, 2, 2, 1, 9, 3])


def test_first_valid_sample_after_leading_nans_not_evaluated():
    x = np.array([NAN, NAN, 1.0, 2.0])
    got = rate_of_change_flags(x, minutes(4), window_s=1e6, n_sigma=2, min_samples=2)
    np.testing.assert_array_equal(got, [9, 9, 2, 2])  # i=3: window {1}, k=1 < 2


def test_irregular_times():
    # Times 0, 10, 20, 500, 505 s; window 60 s; min 2; n_sigma 1.
    #   i=3 (500 s): window (440, 500) empty -> 2, despite a step of 7.
    #   i=4 (505 s): window (445, 505) holds {8}: k=1 -> 2.
    #   i=2 (20 s): window (-40, 20) holds {0, 2}: s = sqrt(2) = 1.414; step
    #   |1 - 2| = 1 -> 1.
    t = np.array([0, 10, 20, 500, 505], dtype=np.int64) * S
    x = np.array([0.0, 2.0, 1.0, 8.0, 8.0])
    got = rate_of_change_flags(x, t, window_s=60, n_sigma=1, min_samples=2)
    np.testing.assert_array_equal(got, [2, 2, 1, 2, 2])


@pytest.mark.parametrize(
    "x, expected",
    [([], []), ([1.0], [2]), ([NAN], [9]), ([NAN, NAN], [9, 9])],
    ids=["empty", "one_value", "one_nan", "all_nan"],
)
def test_short_and_empty_series(x, expected):
    x = np.array(x)
    got = rate_of_change_flags(x, minutes(x.size), window_s=600, n_sigma=3)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, expected)


# --- the key property: equal to a plain O(n * n) loop ------------------------


def naive_rate(x, t, window_ns, n_sigma, min_samples):
    """Plain loops; statistics.stdev is exact-rational, so s = 0 only if constant."""
    flags, margin = [], []
    for i in range(len(x)):
        if not math.isfinite(x[i]):
            flags.append(9)
            margin.append(math.inf)
            continue
        prev = [j for j in range(i) if math.isfinite(x[j])]
        win = [x[j] for j in range(len(x))
               if t[i] - window_ns < t[j] < t[i] and math.isfinite(x[j])]
        if not prev or len(win) < min_samples:
            flags.append(2)
            margin.append(math.inf)
            continue
        step = abs(x[i] - x[prev[-1]])
        s = statistics.stdev(win)
        flags.append(3 if step > n_sigma * s else 1)
        # A constant window must match exactly; otherwise allow for rounding.
        margin.append(math.inf if s == 0 else abs(step - n_sigma * s))
    return np.array(flags), np.array(margin)


STEPS_S = [0, 1, 2, 5, 30, 59, 60, 61, 120, 300, 3600]
VALUE = st.one_of(st.integers(-3, 3).map(float), st.floats(-100, 100), st.just(NAN))


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
    st.sampled_from([1, 30, 60, 61, 90, 300, 3600, 1e6]),
    st.floats(0.1, 5),
    st.integers(2, 5),
)
def test_matches_plain_loop_on_irregular_series(series, window_s, n_sigma, min_samples):
    x, t = series
    got = rate_of_change_flags(x, t, window_s=window_s, n_sigma=n_sigma, min_samples=min_samples)
    want, margin = naive_rate(x, t, round(window_s * S), n_sigma, min_samples)
    sure = margin > 1e-8  # values at most 100 in size, n <= 40
    np.testing.assert_array_equal(got[sure], want[sure])


def test_matches_plain_loop_on_long_offset_series():
    # Numerical stability: pressure-like values near 1e5 with 1e-2 noise and
    # occasional steps, 20000 irregular samples; the loop is checked at 200.
    rng = np.random.default_rng(11)
    n = 20000
    t = np.cumsum(rng.integers(1, 120, n)).astype(np.int64) * S
    x = 1e5 + rng.normal(0, 1e-2, n)
    x[rng.integers(0, n, 100)] += 0.05
    got = rate_of_change_flags(x, t, window_s=900, n_sigma=3)
    for i in rng.choice(np.arange(1, n), 200, replace=False):
        win = x[(t > t[i] - 900 * S) & (t < t[i])]
        step = abs(x[i] - x[i - 1])
        if win.size < 3:
            assert got[i] == 2
            continue
        s = statistics.stdev(win.tolist())
        if abs(step - 3 * s) < 1e-9:
            continue
        assert got[i] == (3 if step > 3 * s else 1), (i, step, s)
