"""Properties shared by every check: int8 output, and what must not change it."""

import numpy as np
import pandas as pd
import pytest

from qcpipe.checks import (
    climatology_flags,
    flat_line_flags,
    gap_flags,
    gross_range_flags,
    rate_of_change_flags,
    spike_flags,
)

S = 10**9

# A small irregular series with a spike, a stuck stretch, a gap and a NaN
# (invented), on whole seconds so that every time unit below can hold it.
T_S = np.array([0, 60, 120, 180, 240, 300, 900, 960, 1020, 1080, 1140, 1141, 1200])
X = np.array([10.0, 10.2, 10.1, 14.0, 10.3, 10.3, 10.3, 10.3, np.nan, 10.3, 9.9, 9.8, 10.0])

TIME_CHECKS = {
    "spike": lambda x, t: spike_flags(x, t, half_window_s=120, suspect=1, fail=3),
    "rate_of_change": lambda x, t: rate_of_change_flags(x, t, window_s=600, n_sigma=2,
                                                        min_samples=2),
    "flat_line": lambda x, t: flat_line_flags(x, t, tolerance=0.01, suspect_after_s=300,
                                              fail_after_s=700),
    "gap": lambda x, t: gap_flags(t, x, max_gap_s=300),
}
ALL_CHECKS = {
    **TIME_CHECKS,
    "gross_range": lambda x, t: gross_range_flags(x, sensor_min=0, sensor_max=40,
                                                  expected_min=9, expected_max=12),
    "climatology": lambda x, t: climatology_flags(x, t, ranges=[(range(1, 13), 9.5, 12.0)]),
}


@pytest.mark.parametrize("check", ALL_CHECKS.values(), ids=ALL_CHECKS.keys())
@pytest.mark.parametrize("n", [0, 1, X.size], ids=["empty", "one", "full"])
def test_flags_are_int8_of_input_length(check, n):
    got = check(X[:n], T_S[:n] * S)
    assert got.dtype == np.int8
    assert got.shape == (n,)
    assert set(np.unique(got)) <= {1, 2, 3, 4, 9}


def test_series_exercises_every_check():
    # Guards the invariance tests below against a series on which nothing happens.
    for name, check in ALL_CHECKS.items():
        got = check(X, T_S * S)
        assert set(np.unique(got)) - {1, 9}, name


@pytest.mark.parametrize("check", TIME_CHECKS.values(), ids=TIME_CHECKS.keys())
@pytest.mark.parametrize(
    "as_times",
    [
        lambda ts: (ts * S).astype(np.int64),
        lambda ts: ts.astype("datetime64[s]"),
        lambda ts: (ts * 1000).astype("datetime64[ms]"),
        lambda ts: pd.DatetimeIndex((ts * S).astype("datetime64[ns]")),
    ],
    ids=["int64_ns", "datetime64_s", "datetime64_ms", "pandas_index"],
)
def test_time_containers_give_the_same_flags(check, as_times):
    expected = check(X, T_S * S)
    np.testing.assert_array_equal(check(X, as_times(T_S)), expected)


@pytest.mark.parametrize("check", TIME_CHECKS.values(), ids=TIME_CHECKS.keys())
@pytest.mark.parametrize("shift_ns", [1, 54 * 365 * 86400 * S + 7, -86400 * S],
                         ids=["one_ns", "to_2024", "before_1970"])
def test_shifting_the_time_origin_changes_nothing(check, shift_ns):
    expected = check(X, T_S * S)
    np.testing.assert_array_equal(check(X, T_S * S + shift_ns), expected)


@pytest.mark.parametrize("check", TIME_CHECKS.values(), ids=TIME_CHECKS.keys())
def test_list_and_pandas_values_accepted(check):
    expected = check(X, T_S * S)
    np.testing.assert_array_equal(check(pd.Series(X), T_S * S), expected)
    np.testing.assert_array_equal(check(list(X), T_S * S), expected)
