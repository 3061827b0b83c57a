"""Tests for qcpipe.checks.gap."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.checks import GAP_DTYPE, find_gaps, gap_flags

NAN = np.nan
S = 10**9  # nanoseconds per second


def test_gap_flagged_at_the_next_sample():
    # Steps 60, 60, 180, 60, 1 s; max gap 60 s: only the 180 s step (> 60) is a
    # gap, flagged at the sample that ends it (index 3). A step equal to 60 s is
    # not a gap.
    t = np.array([0, 60, 120, 300, 360, 361], dtype=np.int64) * S
    got = gap_flags(t, max_gap_s=60)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, [1, 1, 1, 3, 1, 1])


def test_find_gaps_reports_start_end_duration():
    t = np.array(["2024-03-01T00:00", "2024-03-01T00:10", "2024-03-01T02:10",
                  "2024-03-01T02:20", "2024-03-02T02:20"], dtype="datetime64[m]")
    gaps = find_gaps(t, max_gap_s=600)
    assert gaps.dtype == GAP_DTYPE
    # By hand: 00:10 -> 02:10 is 7200 s; 02:20 -> next day 02:20 is 86400 s.
    np.testing.assert_array_equal(
        gaps["start"], np.array(["2024-03-01T00:10", "2024-03-01T02:20"], dtype="datetime64[ns]"))
    np.testing.assert_array_equal(
        gaps["end"], np.array(["2024-03-01T02:10", "2024-03-02T02:20"], dtype="datetime64[ns]"))
    np.testing.assert_array_equal(gaps["duration_s"], [7200.0, 86400.0])


def test_missing_values_widen_the_gap():
    # Samples every 60 s, value at 120 s missing: valid samples at 0, 60, 180 s,
    # so the 120 s step between 60 s and 180 s is a gap (> 60 s).
    t = np.array([0, 60, 120, 180], dtype=np.int64) * S
    x = np.array([1.0, 1.0, NAN, 1.0])
    np.testing.assert_array_equal(gap_flags(t, x, max_gap_s=60), [1, 1, 9, 3])
    np.testing.assert_array_equal(gap_flags(t, max_gap_s=60), [1, 1, 1, 1])


def test_equal_times_are_not_gaps():
    t = np.array([5, 5, 5], dtype=np.int64) * S
    np.testing.assert_array_equal(gap_flags(t, max_gap_s=1), [1, 1, 1])
    assert find_gaps(t, max_gap_s=1).size == 0


@pytest.mark.parametrize("n", [0, 1], ids=["empty", "one_sample"])
def test_short_series(n):
    t = np.arange(n, dtype=np.int64)
    got = gap_flags(t, max_gap_s=1)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, [1] * n)
    assert find_gaps(t, max_gap_s=1).size == 0


def naive_gaps(t, ok, max_gap_ns):
    flags, gaps, last = [], [], None
    for i in range(len(t)):
        if not ok[i]:
            flags.append(9)
            continue
        flags.append(3 if last is not None and t[i] - t[last] > max_gap_ns else 1)
        last = i
    for i in range(1, len(t)):
        if t[i] - t[i - 1] > max_gap_ns:
            gaps.append((t[i - 1], t[i]))
    return np.array(flags), gaps


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.sampled_from([0, 1, 59, 60, 61, 3600]), max_size=40),
    st.data(),
    st.sampled_from([1, 60, 61, 3600]),
)
def test_matches_plain_loop(steps, data, max_gap_s):
    t = np.cumsum(np.array(steps, dtype=np.int64)) * S
    ok = np.array(data.draw(st.lists(st.booleans(), min_size=len(steps), max_size=len(steps))),
                  dtype=bool)
    x = np.where(ok, 1.0, NAN)
    want_flags, want_gaps = naive_gaps(t, ok, max_gap_s * S)
    np.testing.assert_array_equal(gap_flags(t, x, max_gap_s=max_gap_s), want_flags)
    gaps = find_gaps(t, max_gap_s=max_gap_s)
    assert [(int(a), int(b)) for a, b in zip(gaps["start"].view(np.int64),
                                              gaps["end"].view(np.int64))] == want_gaps
