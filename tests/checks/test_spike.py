"""Tests for qcpipe.checks.spike."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.checks import spike_flags

NAN = np.nan
S = 10**9  # nanoseconds per second


def minutes(n):
    """Regular 60 s sampling as int64 nanoseconds."""
    return np.arange(n, dtype=np.int64) * 60 * S


def test_single_spike_flags_only_the_spike():
    # Flat series of 21 zeros with 10 at index 10; 60 s steps, half window 180 s,
    # so interior samples have k = 6 neighbours. By hand: the spike's neighbours
    # are all 0, d = 10 > fail 5 -> 4. Each sample within 3 steps of the spike
    # has the spike among its 6 neighbours: d = 10/6 = 1.67 <= suspect 2 -> 1.
    # The first and last samples have neighbours on one side only -> 2.
    x = np.zeros(21)
    x[10] = 10.0
    got = spike_flags(x, minutes(21), half_window_s=180, suspect=2, fail=5)
    assert got.dtype == np.int8
    expected = np.ones(21, dtype=np.int8)
    expected[10] = 4
    expected[[0, 20]] = 2
    np.testing.assert_array_equal(got, expected)


def test_tall_spike_also_flags_its_neighbours():
    # As above with spike 15: neighbours get d = 15/6 = 2.5 > suspect 2 -> 3;
    # the documented side effect of a mean of neighbours.
    x = np.zeros(21)
    x[10] = 15.0
    got = spike_flags(x, minutes(21), half_window_s=180, suspect=2, fail=5)
    expected = np.ones(21, dtype=np.int8)
    expected[7:14] = 3
    expected[10] = 4
    expected[[0, 20]] = 2
    np.testing.assert_array_equal(got, expected)


def test_window_ends_are_inclusive():
    # Times 0, 100, 200, 300 s, half window 100 s: the neighbours of t = 200 s are
    # at exactly 100 s distance and count. By hand d = |3 - 0| = 3 -> suspect.
    t = np.array([0, 100, 200, 300], dtype=np.int64) * S
    x = np.array([0.0, 0.0, 3.0, 0.0])
    got = spike_flags(x, t, half_window_s=100, suspect=2, fail=5)
    assert got[2] == 3
    # 1 ns beyond the window end the sample at 300 s drops out: one neighbour
    # left, fewer than min_neighbours = 2 -> not evaluated.
    t_late = t.copy()
    t_late[3] += 1
    assert spike_flags(x, t_late, half_window_s=100, suspect=2, fail=5)[2] == 2


def test_thresholds_are_strict():
    # d = 3 exactly (neighbours all 0): equal to suspect -> 1; equal to fail -> 3.
    x = np.array([0.0, 0.0, 3.0, 0.0, 0.0])
    t = minutes(5)
    assert spike_flags(x, t, half_window_s=120, suspect=3, fail=4)[2] == 1
    assert spike_flags(x, t, half_window_s=120, suspect=2, fail=3)[2] == 3


def test_nan_is_missing_and_not_a_neighbour():
    # Index 1 is NaN -> 9. Index 2 (value 5) has neighbours within 60 s at
    # index 1 (NaN, skipped) and 3 (value 0): k = 1.
    x = np.array([0.0, NAN, 5.0, 0.0, 0.0])
    t = minutes(5)
    got = spike_flags(x, t, half_window_s=60, suspect=2, fail=4)
    assert got[1] == 9
    assert got[2] == 2  # k = 1 < min_neighbours = 2
    got1 = spike_flags(x, t, half_window_s=60, suspect=2, fail=4, min_neighbours=1,
                       one_sided_edges=True)
    # By hand with min_neighbours = 1: index 2, d = |5 - 0| = 5 -> 4;
    # index 0, neighbours {NaN} -> none -> 2; index 3, neighbours 5 and 0,
    # d = |0 - 2.5| = 2.5 -> 3; index 4, neighbour 0, d = 0 -> 1.
    np.testing.assert_array_equal(got1, [2, 9, 4, 3, 1])
    # Both sides needed (the default): index 2 has the NaN before it, so no
    # valid neighbour before -> 2; index 4 has none after -> 2.
    got2 = spike_flags(x, t, half_window_s=60, suspect=2, fail=4, min_neighbours=1)
    np.testing.assert_array_equal(got2, [2, 9, 2, 3, 2])


def test_infinite_value_is_missing_and_not_a_neighbour():
    # Half window 120 s. By hand: index 0 has neighbours {1, 2} minus the
    # infinite one -> k = 1 -> 2 (same for index 4); index 1 has {0, 3} -> d = 0
    # -> 1 (same for index 3). Were inf counted, index 1 would get d = inf.
    x = np.array([0.0, 0.0, np.inf, 0.0, 0.0])
    got = spike_flags(x, minutes(5), half_window_s=120, suspect=1, fail=2)
    np.testing.assert_array_equal(got, [2, 1, 9, 1, 2])


def test_irregular_times():
    # Times 0, 10, 70, 75, 200 s; half window 60 s. Neighbour sets by hand:
    #   t=0:   {10}          k=1 -> 2
    #   t=10:  {0, 70}       mean (0+6)/2 = 3,   d = |0 - 3| = 3     -> 3
    #   t=70:  {10, 75}      mean (0+0)/2 = 0,   d = 6               -> 4
    #   t=75:  {70}          k=1 -> 2
    #   t=200: {}            k=0 -> 2
    t = np.array([0, 10, 70, 75, 200], dtype=np.int64) * S
    x = np.array([0.0, 0.0, 6.0, 0.0, 0.0])
    got = spike_flags(x, t, half_window_s=60, suspect=2, fail=5)
    np.testing.assert_array_equal(got, [2, 3, 4, 2, 2])


def test_samples_at_the_same_time_are_neighbours():
    t = np.array([0, 0, 0], dtype=np.int64)
    x = np.array([0.0, 0.0, 9.0])
    # Index 2: neighbours 0, 0 -> d = 9 -> 4. Index 0: neighbours 0, 9 ->
    # d = 4.5 -> 3 (suspect 4, fail 5).
    got = spike_flags(x, t, half_window_s=1, suspect=4, fail=5, one_sided_edges=True)
    np.testing.assert_array_equal(got, [3, 3, 4])
    # Sides are by position: index 0 has nothing before it, index 2 nothing
    # after it -> 2; index 1 has 0 before and 9 after -> d = 4.5 -> 3.
    got = spike_flags(x, t, half_window_s=1, suspect=4, fail=5)
    np.testing.assert_array_equal(got, [2, 3, 2])


def test_constant_series_passes():
    got = spike_flags(np.full(6, 21.5), minutes(6), half_window_s=60, suspect=0.1, fail=1)
    # Ends have one neighbour (< 2) -> 2; interior d = 0 -> 1.
    np.testing.assert_array_equal(got, [2, 1, 1, 1, 1, 2])


@pytest.mark.parametrize(
    "x, expected",
    [([], []), ([1.0], [2]), ([NAN], [9]), ([NAN, NAN, NAN], [9, 9, 9])],
    ids=["empty", "one_value", "one_nan", "all_nan"],
)
def test_short_and_empty_series(x, expected):
    x = np.array(x)
    got = spike_flags(x, minutes(x.size), half_window_s=600, suspect=1, fail=2)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, expected)


# --- the key property: equal to a plain O(n * n) loop ------------------------


def naive_spike(x, t, half_ns, suspect, fail, min_neighbours, one_sided=True):
    """Loops over every pair; returns flags and the distance of d to a threshold."""
    flags, margin = [], []
    for i in range(len(x)):
        if not math.isfinite(x[i]):
            flags.append(9)
            margin.append(math.inf)
            continue
        near = [j for j in range(len(x))
                if j != i and abs(t[j] - t[i]) <= half_ns and math.isfinite(x[j])]
        nb = [x[j] for j in near]
        both_sides = any(j < i for j in near) and any(j > i for j in near)
        if len(nb) < min_neighbours or not (one_sided or both_sides):
            flags.append(2)
            margin.append(math.inf)
            continue
        d = abs(x[i] - math.fsum(nb) / len(nb))
        flags.append(4 if d > fail else 3 if d > suspect else 1)
        margin.append(min(abs(d - suspect), abs(d - fail)))
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
    st.floats(0.1, 20),
    st.floats(0, 30),
    st.integers(1, 4),
    st.booleans(),
)
def test_matches_plain_loop_on_irregular_series(series, half_window_s, suspect, extra, min_nb, one_sided):
    x, t = series
    fail = suspect + extra
    got = spike_flags(x, t, half_window_s=half_window_s, suspect=suspect, fail=fail,
                      min_neighbours=min_nb, one_sided_edges=one_sided)
    want, margin = naive_spike(x, t, round(half_window_s * S), suspect, fail, min_nb, one_sided)
    # Cumulative sums round differently from the loop: compare where d is not
    # within 1e-9 of a threshold (values are at most 100 in size, n <= 40).
    sure = margin > 1e-9
    np.testing.assert_array_equal(got[sure], want[sure])


def test_matches_plain_loop_on_long_offset_series():
    # Numerical stability: water-level-like values near 1e4 with 1e-3 noise,
    # 5000 irregular samples; the plain loop is evaluated at 200 of them.
    rng = np.random.default_rng(7)
    n = 5000
    t = np.cumsum(rng.integers(1, 120, n)).astype(np.int64) * S
    x = 1e4 + rng.normal(0, 1e-3, n)
    x[rng.integers(0, n, 50)] += 0.01
    got = spike_flags(x, t, half_window_s=300, suspect=0.003, fail=0.006)
    idx = rng.choice(n, 200, replace=False)
    for i in idx:
        sel = (np.abs(t - t[i]) <= 300 * S) & (np.arange(n) != i)
        nb = x[sel]
        d = abs(x[i] - math.fsum(nb) / nb.size)
        if min(abs(d - 0.003), abs(d - 0.006)) < 1e-9:
            continue
        one_side = not ((sel & (np.arange(n) < i)).any() and (sel & (np.arange(n) > i)).any())
        want = 2 if nb.size < 2 or one_side else 4 if d > 0.006 else 3 if d > 0.003 else 1
        assert got[i] == want, (i, d)


# --- a clean tide at the record's ends and beside gaps ------------------------


def test_clean_tide_ends_and_gaps_are_not_evaluated():
    # An M2 tide (speed 28.984104 deg/h, Schureman 1958), 2 m amplitude, sampled
    # every 6 min for 3 days with two gaps of 1 h; the water-level spike rule of
    # the demo (half window 18 min, suspect 0.15 m, fail 0.4 m,
    # qc_rules/kelpwhistle-cove.toml). The tide rises at up to 2 m * 0.506 rad/h
    # = 1.01 m/h. With neighbours on one side only (6, 12, 18 min away, mean
    # 12 min) the mean lags by about 0.2 m: suspect at a steep end. With both
    # sides the lag cancels and the curvature leaves d < 0.01 m. Both sides
    # needed: every sample with no neighbour within 18 min on one side (the two
    # ends, the last sample before each gap and the first after it) is 2, all
    # others pass.
    hours = np.arange(0, 72, 0.1)
    keep = ~(((hours > 20) & (hours < 21)) | ((hours > 50) & (hours < 51)))
    hours = hours[keep]
    t = np.round(hours * 3600).astype(np.int64) * S
    level = 2.0 * np.sin(np.radians(28.984104 * hours) + 0.3)
    got = spike_flags(level, t, half_window_s=18 * 60, suspect=0.15, fail=0.4)
    step = np.diff(hours)
    beside_gap = np.zeros(hours.size, bool)
    beside_gap[[0, -1]] = True
    beside_gap[:-1] |= step > 0.3
    beside_gap[1:] |= step > 0.3
    assert beside_gap.sum() == 6
    np.testing.assert_array_equal(got[beside_gap], 2)
    np.testing.assert_array_equal(got[~beside_gap], 1)
    # One-sided evaluation (the rule option, the former behaviour): the first
    # sample, rising at 1.01 * cos(0.3) = 0.97 m/h, is suspect (d about 0.19 m).
    one = spike_flags(level, t, half_window_s=18 * 60, suspect=0.15, fail=0.4, one_sided_edges=True)
    assert one[0] == 3
    np.testing.assert_array_equal(one[~beside_gap], 1)
