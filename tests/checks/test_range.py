"""Tests for qcpipe.checks.range: gross range and climatology checks."""

import numpy as np
import pytest

from qcpipe.checks import climatology_flags, gross_range_flags

NAN = np.nan


def test_gross_range_limits_are_inclusive():
    # sensor limits -5 .. 40, expected 0 .. 30 (invented). Worked by hand: the
    # limits pass; the next float beyond a limit is outside it.
    below_sensor = np.nextafter(-5.0, -np.inf)
    above_sensor = np.nextafter(40.0, np.inf)
    values = [below_sensor, -5.0, -0.5, 0.0, 15.0, 30.0, 30.5, 40.0, above_sensor]
    expected = [4, 3, 3, 1, 1, 1, 3, 3, 4]
    got = gross_range_flags(
        np.array(values), sensor_min=-5.0, sensor_max=40.0, expected_min=0.0, expected_max=30.0
    )
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, expected)


def test_gross_range_nan_and_infinity():
    got = gross_range_flags(np.array([NAN, np.inf, -np.inf, 1.0]), sensor_min=0, sensor_max=2)
    np.testing.assert_array_equal(got, [9, 4, 4, 1])


def test_gross_range_without_expected_limits_never_suspect():
    got = gross_range_flags(np.array([-1.0, 0.0, 99.0, 100.0, 101.0]), sensor_min=0, sensor_max=100)
    np.testing.assert_array_equal(got, [4, 1, 1, 1, 4])


def test_gross_range_one_expected_limit_only():
    got = gross_range_flags(np.array([1.0, 5.0, 9.0]), sensor_min=0, sensor_max=10, expected_max=8)
    np.testing.assert_array_equal(got, [1, 1, 3])


def test_gross_range_keeps_shape_and_accepts_integers():
    got = gross_range_flags(np.array([[0, 5], [11, 3]]), sensor_min=0, sensor_max=10)
    np.testing.assert_array_equal(got, [[1, 1], [4, 1]])


def test_gross_range_empty():
    got = gross_range_flags(np.array([]), sensor_min=0, sensor_max=1)
    assert got.shape == (0,) and got.dtype == np.int8


# Invented winter/summer sea temperature ranges (degC). Months worked by hand
# from the calendar dates.
RANGES = [((12, 1, 2), 5.0, 12.0), ((6, 7, 8), 12.0, 22.0)]


def test_climatology_month_edges_and_limits():
    times = np.array(
        [
            "2024-01-31T23:59:59",  # January (winter range)
            "2024-02-29T12:00:00",  # February, leap day (winter)
            "2024-03-01T00:00:00",  # March: no range
            "2024-06-01T00:00:00",  # June (summer)
            "2024-08-31T23:59:59",  # August (summer)
            "2024-09-01T00:00:00",  # September: no range
            "1969-12-15T00:00:00",  # December before 1970 (winter)
        ],
        dtype="datetime64[s]",
    )
    values = np.array([12.0, 4.5, 100.0, 12.0, 22.5, 0.0, 5.0])
    expected = [1, 3, 2, 1, 3, 2, 1]
    got = climatology_flags(values, times, ranges=RANGES)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, expected)


def test_climatology_accepts_int_nanoseconds_and_nan():
    # 2024-07-01T00:00:00Z = 1719792000 s since 1970 (19905 days * 86400; from the
    # calendar: 54 years incl. 13 leap days = 19723 days to 2024-01-01, + 182 days).
    t = np.array([1719792000, 1719792000, 1719792000], dtype=np.int64) * 10**9
    got = climatology_flags(np.array([NAN, 11.0, 15.0]), t, ranges=RANGES)
    np.testing.assert_array_equal(got, [9, 3, 1])


def test_climatology_without_ranges_not_evaluated():
    t = np.array(["2024-05-01"], dtype="datetime64[D]")
    np.testing.assert_array_equal(climatology_flags(np.array([1.0]), t, ranges=[]), [2])


def test_climatology_unsorted_times_are_fine():
    t = np.array(["2024-07-01", "2024-01-01"], dtype="datetime64[D]")
    got = climatology_flags(np.array([6.0, 6.0]), t, ranges=RANGES)
    np.testing.assert_array_equal(got, [3, 1])


@pytest.mark.parametrize(
    "ranges, match",
    [
        ([((13,), 0, 1)], r"ranges\[0\] month 13; expected an integer 1..12"),
        ([((1,), 0, 1), ((2, 1), 0, 1)], r"month 1 appears in more than one"),
        ([((1,), 5, 1)], r"ranges\[0\] low = 5.0 and ranges\[0\] high = 1.0"),
        ([((), 0, 1)], r"ranges\[0\] months = \(\); expected a non-empty"),
        ([((1,), 0)], r"ranges\[0\] = \(\(1,\), 0\); expected \(months, low, high\)"),
    ],
    ids=["month_13", "duplicate_month", "low_above_high", "no_months", "two_items"],
)
def test_climatology_bad_ranges(ranges, match):
    t = np.array(["2024-01-01"], dtype="datetime64[D]")
    with pytest.raises(ValueError, match=match):
        climatology_flags(np.array([1.0]), t, ranges=ranges)
