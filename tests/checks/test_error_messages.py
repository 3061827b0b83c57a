"""The messages a user sees when a check is called wrongly."""

import numpy as np
import pytest

from qcpipe.checks import (
    aggregate_flags,
    find_gaps,
    flat_line_flags,
    gap_flags,
    gross_range_flags,
    rate_of_change_flags,
    spike_flags,
    worst_flag,
)

X = np.array([1.0, 2.0, 3.0])
T = np.array([0, 60, 120], dtype=np.int64) * 10**9
SPIKE = dict(half_window_s=60, suspect=1, fail=2)
RATE = dict(window_s=600, n_sigma=3)
FLAT = dict(tolerance=0, suspect_after_s=60, fail_after_s=120)

CASES = {
    "sensor_limits_swapped": (
        lambda: gross_range_flags(X, sensor_min=10, sensor_max=0),
        r"gross_range_flags: sensor_min = 10.0 and sensor_max = 0.0; expected "
        r"sensor_min < sensor_max \(are the limits swapped\?\)"),
    "expected_below_sensor": (
        lambda: gross_range_flags(X, sensor_min=0, sensor_max=10, expected_min=-1),
        r"expected_min = -1.0 is below sensor_min = 0.0"),
    "expected_limits_swapped": (
        lambda: gross_range_flags(X, sensor_min=0, sensor_max=10, expected_min=5,
                                  expected_max=4),
        r"expected_min = 5.0 and expected_max = 4.0"),
    "nan_limit": (
        lambda: gross_range_flags(X, sensor_min=float("nan"), sensor_max=1),
        r"sensor_min = nan; expected a number"),
    "string_values": (
        lambda: gross_range_flags(np.array(["a"]), sensor_min=0, sensor_max=1),
        r"values has dtype <U1; expected a numeric array"),
    "negative_half_window": (
        lambda: spike_flags(X, T, half_window_s=-5, suspect=1, fail=2),
        r"spike_flags: half_window_s = -5.0; must be a finite number > 0"),
    "suspect_above_fail": (
        lambda: spike_flags(X, T, half_window_s=60, suspect=3, fail=2),
        r"suspect = 3.0 and fail = 2.0; expected suspect <= fail"),
    "zero_min_neighbours": (
        lambda: spike_flags(X, T, **SPIKE, min_neighbours=0),
        r"min_neighbours = 0; must be an integer >= 1"),
    "shape_mismatch": (
        lambda: spike_flags(X, T[:2], **SPIKE),
        r"values and times must have the same shape; found \(3,\) and \(2,\)"),
    "times_step_back": (
        lambda: rate_of_change_flags(X, np.array([0, 120, 60]) * 10**9, **RATE),
        r"times must be non-decreasing; times\[2\] = 1970-01-01T00:01:00.000000000 is "
        r"earlier than times\[1\] = 1970-01-01T00:02:00.000000000; sort the records"),
    "times_nat": (
        lambda: rate_of_change_flags(X, np.array(["2024-01-01", "NaT", "2024-01-02"],
                                                 dtype="datetime64[D]"), **RATE),
        r"times\[1\] is NaT"),
    "float_times": (
        lambda: rate_of_change_flags(X, T.astype(float), **RATE),
        r"times has dtype float64; expected numpy datetime64 or int64 nanoseconds"),
    "two_dim_values": (
        lambda: rate_of_change_flags(X.reshape(1, 3), T, **RATE),
        r"values must be one-dimensional; found shape \(1, 3\)"),
    "min_samples_one": (
        lambda: rate_of_change_flags(X, T, **RATE, min_samples=1),
        r"min_samples = 1; must be an integer >= 2"),
    "n_sigma_zero": (
        lambda: rate_of_change_flags(X, T, window_s=60, n_sigma=0),
        r"n_sigma = 0.0; must be a finite number > 0"),
    "infinite_window": (
        lambda: rate_of_change_flags(X, T, window_s=float("inf"), n_sigma=3),
        r"window_s = inf; must be a finite number > 0"),
    "negative_tolerance": (
        lambda: flat_line_flags(X, T, tolerance=-0.1, suspect_after_s=60, fail_after_s=120),
        r"tolerance = -0.1; must be a finite number >= 0"),
    "flat_thresholds_swapped": (
        lambda: flat_line_flags(X, T, tolerance=0, suspect_after_s=120, fail_after_s=60),
        r"suspect_after_s = 120.0 and fail_after_s = 60.0; expected suspect_after_s <= "),
    "zero_max_gap": (
        lambda: gap_flags(T, max_gap_s=0),
        r"gap_flags: max_gap_s = 0.0; must be a finite number > 0"),
    "find_gaps_unsorted": (
        lambda: find_gaps(T[::-1], max_gap_s=1),
        r"find_gaps: times must be non-decreasing; times\[1\]"),
    "gap_values_shape": (
        lambda: gap_flags(T, X[:1], max_gap_s=1),
        r"values and times must have the same shape"),
    "aggregate_shape": (
        lambda: aggregate_flags(X, [np.array([1, 1])]),
        r"flag_arrays\[0\] has shape \(2,\); expected \(3,\)"),
    "aggregate_bad_flag": (
        lambda: aggregate_flags(X, [np.array([1, 1, 1]), np.array([1, 5, 1])]),
        r"flag_arrays\[1\] holds 5 at index 1; allowed flag values are 1, 2, 3, 4, 9"),
    "aggregate_float_flags": (
        lambda: aggregate_flags(X, [np.array([1.0, 1.0, 1.0])]),
        r"flag_arrays\[0\] has dtype float64; expected integer flags"),
    "worst_flag_empty": (
        lambda: worst_flag([]),
        r"worst_flag: flag_arrays is empty"),
}


@pytest.mark.parametrize("call, match", CASES.values(), ids=CASES.keys())
def test_error_message(call, match):
    with pytest.raises(ValueError, match=match):
        call()
