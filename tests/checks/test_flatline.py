"""Tests for qcpipe.checks.flatline."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.checks import flat_line_flags
from qcpipe.checks.flatline import MODES, REFERENCES

NAN = np.nan
S = 10**9  # nanoseconds per second


def minutes(n):
    return np.arange(n, dtype=np.int64) * 60 * S


# The hand-worked cases below were written for successive differences in real
# time (the former default, now reference="previous", mode="real_time").
PREVIOUS_REAL_TIME = dict(reference="previous", mode="real_time")


def test_run_durations_reach_thresholds_at_equality():
    # 60 s steps, x = 1 1 1 1 1 2, tolerance 0. Run durations by hand:
    # 0, 60, 120, 180, 240 s, then a new run at x = 2 (0 s).
    # suspect after 120 s, fail after 240 s (both reached at equality).
    x = np.array([1, 1, 1, 1, 1, 2], dtype=float)
    got = flat_line_flags(x, minutes(6), tolerance=0, suspect_after_s=120,
                          fail_after_s=240, **PREVIOUS_REAL_TIME)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, [1, 1, 3, 3, 4, 1])


def test_one_nanosecond_short_of_threshold():
    t = np.array([0, 120 * S - 1], dtype=np.int64)
    got = flat_line_flags(np.array([1.0, 1.0]), t, tolerance=0, suspect_after_s=120,
                          fail_after_s=240, **PREVIOUS_REAL_TIME)
    np.testing.assert_array_equal(got, [1, 1])


def test_tolerance_is_inclusive_and_drift_counts():
    # Steps of exactly 0.5 (exact in binary) with tolerance 0.5: one run, a slow
    # drift from 0 to 2 counted as flat (documented). Durations 0..240 s.
    x = np.array([0.0, 0.5, 1.0, 1.5, 2.0])
    got = flat_line_flags(x, minutes(5), tolerance=0.5, suspect_after_s=120,
                          fail_after_s=240, **PREVIOUS_REAL_TIME)
    np.testing.assert_array_equal(got, [1, 1, 3, 3, 4])
    # Tolerance 0.25: every step starts a new run.
    got = flat_line_flags(x, minutes(5), tolerance=0.25, suspect_after_s=120,
                          fail_after_s=240, **PREVIOUS_REAL_TIME)
    np.testing.assert_array_equal(got, [1, 1, 1, 1, 1])


def test_nan_is_skipped_within_a_run():
    # x = 1 NaN 1 1 at 0, 60, 120, 180 s: the NaN is 9 and the run goes on
    # across it (successive valid values are equal): durations 0, -, 120, 180.
    x = np.array([1.0, NAN, 1.0, 1.0])
    got = flat_line_flags(x, minutes(4), tolerance=0, suspect_after_s=120,
                          fail_after_s=180, **PREVIOUS_REAL_TIME)
    np.testing.assert_array_equal(got, [1, 9, 3, 4])


def test_irregular_times():
    # Constant values at 0, 10, 200, 205 s: durations 0, 10, 200, 205 s;
    # suspect 100 s, fail 205 s.
    t = np.array([0, 10, 200, 205], dtype=np.int64) * S
    got = flat_line_flags(np.zeros(4), t, tolerance=0, suspect_after_s=100,
                          fail_after_s=205, **PREVIOUS_REAL_TIME)
    np.testing.assert_array_equal(got, [1, 1, 3, 4])


def test_run_restarts_after_a_change():
    # 3 3 3 7 7 7 at 60 s: second run starts at index 3. suspect 120, fail 600.
    x = np.array([3, 3, 3, 7, 7, 7], dtype=float)
    got = flat_line_flags(x, minutes(6), tolerance=1, suspect_after_s=120,
                          fail_after_s=600, **PREVIOUS_REAL_TIME)
    np.testing.assert_array_equal(got, [1, 1, 3, 1, 1, 3])


@pytest.mark.parametrize(
    "x, expected",
    [([], []), ([1.0], [1]), ([NAN], [9]), ([np.inf, 1.0], [9, 1])],
    ids=["empty", "one_value", "one_nan", "inf_is_missing"],
)
def test_short_and_empty_series(x, expected):
    x = np.array(x)
    got = flat_line_flags(x, minutes(x.size), tolerance=0, suspect_after_s=1,
                          fail_after_s=2, **PREVIOUS_REAL_TIME)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, expected)


@pytest.mark.parametrize("mode", MODES)
def test_current_reference_does_not_take_a_drift_for_a_flat_line(mode):
    # Steps of 0.5 with tolerance 0.5 (the drift case above): each value is
    # within 0.5 of the one before but not of the one two steps back, so the
    # look-back within the tolerance of the current value lasts 60 s at most.
    x = np.array([0.0, 0.5, 1.0, 1.5, 2.0])
    got = flat_line_flags(x, minutes(5), tolerance=0.5, suspect_after_s=120, fail_after_s=240, mode=mode)
    np.testing.assert_array_equal(got, [1, 1, 1, 1, 1])


def test_current_reference_by_hand():
    # 60 s steps, tolerance 0.5, suspect 120 s, fail 180 s.
    # x = 0 0.5 0 0.5 1 1 1: successive steps are all <= 0.5 (one run of 360 s
    # with reference "previous"). Against the current value, real time:
    #   i=2 (0):   0.5, 0 within 0.5 back to t=0     lasted 120 -> 3
    #   i=3 (0.5): 0, 0.5, 0 within 0.5 back to t=0  lasted 180 -> 4
    #   i=4 (1):   0.5 within, 0 not                 lasted  60 -> 1
    #   i=5 (1):   1, 0.5 within, 0 not              lasted 120 -> 3
    #   i=6 (1):   1, 1, 0.5 within, 0 not           lasted 180 -> 4
    x = np.array([0.0, 0.5, 0.0, 0.5, 1.0, 1.0, 1.0])
    real = flat_line_flags(x, minutes(7), tolerance=0.5, suspect_after_s=120, fail_after_s=180,
                           mode="real_time")
    np.testing.assert_array_equal(real, [1, 1, 3, 4, 1, 3, 4])
    # Delayed: the look-backs that reach 180 s cover samples 0..3 (from i=3)
    # and 3..6 (from i=6): all fail.
    delayed = flat_line_flags(x, minutes(7), tolerance=0.5, suspect_after_s=120, fail_after_s=180)
    np.testing.assert_array_equal(delayed, [4, 4, 4, 4, 4, 4, 4])
    # Reference "previous": one run of 360 s; delayed gives it all 4.
    prev = flat_line_flags(x, minutes(7), tolerance=0.5, suspect_after_s=120, fail_after_s=180,
                           reference="previous")
    np.testing.assert_array_equal(prev, [4, 4, 4, 4, 4, 4, 4])


@pytest.mark.parametrize("reference", REFERENCES)
@pytest.mark.parametrize("mode, expected", [("delayed", [3, 3, 3, 3, 1]), ("real_time", [1, 1, 3, 3, 1])])
def test_delayed_flags_a_stuck_run_from_its_first_sample(reference, mode, expected):
    # 1 1 1 1 2 at 60 s, tolerance 0, suspect 120 s, fail 240 s. The run of
    # 1 lasts 180 s: suspect from its first sample in delayed mode; in real
    # time its first 120 s are unflagged.
    x = np.array([1.0, 1.0, 1.0, 1.0, 2.0])
    got = flat_line_flags(x, minutes(5), tolerance=0, suspect_after_s=120, fail_after_s=240,
                          reference=reference, mode=mode)
    np.testing.assert_array_equal(got, expected)


def test_delayed_run_across_a_time_gap():
    # Equal values at 0, 10, 200, 205 s, fail after 100 s: the look-back of the
    # sample at 200 s reaches the last sample at or before 100 s (t = 10); the
    # look-ahead from t = 0 reaches the first at or after 100 s (t = 200), so
    # the sample at 0 s is covered too.
    t = np.array([0, 10, 200, 205], dtype=np.int64) * S
    got = flat_line_flags(np.zeros(4), t, tolerance=0, suspect_after_s=50, fail_after_s=100)
    np.testing.assert_array_equal(got, [4, 4, 4, 4])


@pytest.mark.parametrize("reference", REFERENCES)
@pytest.mark.parametrize("mode", MODES)
def test_options_are_validated(reference, mode):
    x = np.zeros(3)
    flat_line_flags(x, minutes(3), tolerance=0, suspect_after_s=60, fail_after_s=60,
                    reference=reference, mode=mode)
    with pytest.raises(ValueError, match=r"flat_line_flags: reference = 'successive'; expected one of"):
        flat_line_flags(x, minutes(3), tolerance=0, suspect_after_s=60, fail_after_s=60,
                        reference="successive", mode=mode)
    with pytest.raises(ValueError, match=r"flat_line_flags: mode = 'realtime'; expected one of"):
        flat_line_flags(x, minutes(3), tolerance=0, suspect_after_s=60, fail_after_s=60,
                        reference=reference, mode="realtime")


# --- a slow real drift, and the recall of stuck runs ---------------------------


def test_slow_drift_is_not_a_flat_line():
    # A real drift of 0.048 degC/h sampled every 5 min for 12 h, with the demo's
    # temperature rule (qc_rules/kelpwhistle-cove.toml): tolerance 0.005 degC,
    # suspect after 3 h, fail after 6 h. Each 5-min step is 0.004 degC, within
    # the tolerance, so successive differences make the whole 12 h one run:
    # 36 samples of 3 h pass, 36 suspect, 72 fail (real time; the figures of
    # issue 13). Against the current value the values within 0.005 degC span
    # 0.005 / 0.048 h = 6.25 min: no flag, in either mode.
    t = np.arange(144, dtype=np.int64) * 300 * S
    x = 12.0 + 0.048 * (t / (3600 * S))
    rule = dict(tolerance=0.005, suspect_after_s=3 * 3600, fail_after_s=6 * 3600)
    old = flat_line_flags(x, t, **rule, **PREVIOUS_REAL_TIME)
    assert [(old == f).sum() for f in (1, 3, 4)] == [36, 36, 72]
    for mode in MODES:
        np.testing.assert_array_equal(flat_line_flags(x, t, **rule, mode=mode), 1)


def stuck_series(rng, n=3000):
    """Noisy temperature mostly every 60 s with time gaps, NaN and 8 stuck runs of 65-240 samples.

    Returns values, times, the stuck samples (valid ones) and each run's first sample."""
    steps = rng.choice([60, 120, 1800], size=n, p=[0.95, 0.04, 0.01])
    t = np.cumsum(steps).astype(np.int64) * S
    x = 15 + np.cumsum(rng.normal(0, 0.05, n))
    stuck = np.zeros(n, bool)
    starts = rng.choice(np.arange(50, n - 300, 350), 8, replace=False)
    for start in starts:
        length = rng.integers(65, 240)
        x[start:start + length] = x[start]
        stuck[start:start + length] = True
    x[rng.random(n) < 0.03] = np.nan
    x[starts] = x[starts + 1]       # keep each run's first sample valid
    return x, t, stuck & np.isfinite(x), starts


@pytest.mark.parametrize("seed", range(5))
def test_recall_of_stuck_runs_is_one_in_delayed_mode(seed):
    # Every sample of a stuck run (exactly repeated value, lasting at least the
    # fail duration of 1 h, across gaps and NaN) is flagged 4 in delayed mode
    # with either reference. In real time the first hour of each run is not:
    # its first sample is never 4 and recall stays below 0.8 (runs of 65-240
    # samples, 60 of them in their first hour at 60 s).
    x, t, stuck, starts = stuck_series(np.random.default_rng(seed))
    rule = dict(tolerance=0.001, suspect_after_s=1800, fail_after_s=3600)
    for reference in REFERENCES:
        delayed = flat_line_flags(x, t, **rule, reference=reference)
        assert (delayed[stuck] == 4).mean() == 1.0
        real = flat_line_flags(x, t, **rule, reference=reference, mode="real_time")
        assert not np.any(real[starts] == 4)
        assert (real[stuck] == 4).mean() < 0.8


# --- the key property: equal to plain loops ---------------------------------


def naive_flat_line(x, t, tolerance, suspect_ns, fail_ns):
    """Reference "previous", real time: walk back along the run of successive differences."""
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


def naive_flat_line_previous_delayed(x, t, tolerance, suspect_ns, fail_ns):
    """Reference "previous", delayed: walk back to the run's start and ahead to its end."""
    valid = [j for j in range(len(x)) if math.isfinite(x[j])]
    flags = np.full(len(x), 9)
    for p, i in enumerate(valid):
        r = e = p
        while r > 0 and abs(x[valid[r]] - x[valid[r - 1]]) <= tolerance:
            r -= 1
        while e + 1 < len(valid) and abs(x[valid[e + 1]] - x[valid[e]]) <= tolerance:
            e += 1
        lasted = t[valid[e]] - t[valid[r]]
        flags[i] = 4 if lasted >= fail_ns else 3 if lasted >= suspect_ns else 1
    return flags


def naive_flat_line_current(x, t, tolerance, suspect_ns, fail_ns, delayed):
    """Reference "current": walk back from each sample while values stay within the tolerance of it;
    delayed, also mark the samples of each look-back (back to the last sample at or before t_i - D)
    and look-ahead (up to the first sample at or after t_j + D) that stay within it."""
    valid = [j for j in range(len(x)) if math.isfinite(x[j])]
    flags = np.full(len(x), 9)
    for i in valid:
        flags[i] = 1
    for p, i in enumerate(valid):
        r = p
        while r > 0 and abs(x[valid[r - 1]] - x[i]) <= tolerance:
            r -= 1
        lasted = t[i] - t[valid[r]]
        flags[i] = max(flags[i], 4 if lasted >= fail_ns else 3 if lasted >= suspect_ns else 1)
    if not delayed:
        return flags
    for grade, d in ((3, suspect_ns), (4, fail_ns)):
        for p, i in enumerate(valid):
            before = [q for q in range(p) if t[valid[q]] <= t[i] - d]
            if before and all(abs(x[valid[q]] - x[i]) <= tolerance for q in range(before[-1], p + 1)):
                for q in range(before[-1], p + 1):
                    flags[valid[q]] = max(flags[valid[q]], grade)
            after = [q for q in range(p + 1, len(valid)) if t[valid[q]] >= t[i] + d]
            if after and all(abs(x[valid[q]] - x[i]) <= tolerance for q in range(p, after[0] + 1)):
                for q in range(p, after[0] + 1):
                    flags[valid[q]] = max(flags[valid[q]], grade)
    return flags


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
    # a stuck stretch of the first value (runs longer than the durations are common)
    if n > 4:
        a = draw(st.integers(0, n - 2))
        b = draw(st.integers(a + 1, n))
        x[a:b] = np.where(np.isnan(x[a:b]), NAN, x[a])
    return x, t


@settings(max_examples=300, deadline=None)
@given(
    irregular_series(),
    st.sampled_from([0.0, 0.5, 1.0]),
    st.sampled_from([1, 60, 61, 300, 3600]),
    st.sampled_from([0, 1, 60, 600, 7200]),
    st.sampled_from(REFERENCES),
    st.sampled_from(MODES),
)
def test_matches_plain_loop_on_irregular_series(series, tolerance, suspect_s, extra_s, reference, mode):
    x, t = series
    fail_s = suspect_s + extra_s
    got = flat_line_flags(x, t, tolerance=tolerance, suspect_after_s=suspect_s,
                          fail_after_s=fail_s, reference=reference, mode=mode)
    args = (x, t, tolerance, suspect_s * S, fail_s * S)
    if reference == "previous":
        want = naive_flat_line(*args) if mode == "real_time" else naive_flat_line_previous_delayed(*args)
    else:
        want = naive_flat_line_current(*args, delayed=mode == "delayed")
    np.testing.assert_array_equal(got, want)
    if mode == "delayed":   # delayed flags are never milder than real-time ones
        real = flat_line_flags(x, t, tolerance=tolerance, suspect_after_s=suspect_s,
                               fail_after_s=fail_s, reference=reference, mode="real_time")
        assert np.all(got >= real)


@settings(max_examples=100, deadline=None)
@given(st.integers(0, 10**6), st.sampled_from([0.0, 0.01, 0.1]), st.sampled_from(MODES))
def test_current_reference_matches_plain_loop_on_long_noisy_series(seed, tolerance, mode):
    # Longer series (300 samples, many lattice blocks per run) of rounded noise
    # with stuck stretches, time gaps and NaN.
    rng = np.random.default_rng(seed)
    n = 300
    t = np.cumsum(rng.choice([0, 30, 60, 60, 60, 600], n)).astype(np.int64) * S
    x = np.round(10 + np.cumsum(rng.normal(0, 0.02, n)), 2)
    for a in rng.integers(0, n - 10, 4):
        x[a:a + rng.integers(5, 60)] = x[a]
    x[rng.random(n) < 0.05] = NAN
    got = flat_line_flags(x, t, tolerance=tolerance, suspect_after_s=300, fail_after_s=900, mode=mode)
    want = naive_flat_line_current(x, t, tolerance, 300 * S, 900 * S, delayed=mode == "delayed")
    np.testing.assert_array_equal(got, want)
