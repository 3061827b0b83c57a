"""Clock offsets, drift correction, trimming and merging, on hand-worked cases."""

import numpy as np
import pytest

from qcpipe.ingest.timebase import drift_corrected, merge_records, utc_from_logger_time, window_mask


def t(s):
    return np.datetime64(s, "ns")


def test_offset_to_utc():
    out = utc_from_logger_time(np.array([t("2026-10-01T13:00")]), offset_s=3600)
    assert out[0] == t("2026-10-01T12:00")


def test_linear_drift_hand_worked():
    # clock set at day 0, 6 min (360 s) fast at day 10: a sample stamped at day 5 is 180 s fast.
    set_, check_logger, check_ref = t("2026-10-01T00:00"), t("2026-10-11T00:06"), t("2026-10-11T00:00")
    stamped = np.array([t("2026-10-01T00:00"), t("2026-10-06T00:03"), check_logger])
    out = drift_corrected(stamped, clock_set=set_, check_logger=check_logger, check_reference=check_ref)
    # day-5 stamp: error = 360 * (5 d + 180 s) / (10 d + 360 s) = 180.0 s exactly
    assert out[0] == set_
    assert out[1] == t("2026-10-06T00:00")
    assert out[2] == check_ref


def test_slow_clock_is_corrected_forward():
    out = drift_corrected(np.array([t("2026-10-11T00:00")]), clock_set=t("2026-10-01T00:00"),
                          check_logger=t("2026-10-11T00:00"), check_reference=t("2026-10-11T00:02"))
    assert out[0] == t("2026-10-11T00:02")


def test_window_mask_inclusive():
    times = np.array([t("2026-10-01T09:59"), t("2026-10-01T10:00"), t("2026-10-02T10:00"), t("2026-10-02T10:01")])
    np.testing.assert_array_equal(window_mask(times, start=t("2026-10-01T10:00"), end=t("2026-10-02T10:00")),
                                  [False, True, True, False])


def test_merge_drops_identical_overlap_and_keeps_conflict():
    times = np.array([t("2026-10-01T00:00"), t("2026-10-01T00:10"), t("2026-10-01T00:20"),   # file 0
                      t("2026-10-01T00:10"), t("2026-10-01T00:20"), t("2026-10-01T00:30")])  # file 1
    vals = {"temperature": np.array([10.0, 11.0, 12.0, 11.0, 12.5, 13.0])}
    src = np.array([0, 0, 0, 1, 1, 1])
    m = merge_records(times, vals, src)
    np.testing.assert_array_equal(m.time, times[[0, 1, 2, 5]])
    np.testing.assert_array_equal(m.values["temperature"], [10.0, 11.0, 12.0, 13.0])  # first download kept
    assert m.duplicates == 1 and m.conflicts == 1
    np.testing.assert_array_equal(m.conflict["temperature"], [False, False, True, False])
    assert m.conflict_rows == [{"time": "2026-10-01T00:20:00.000000000", "variable": "temperature", "kept": 12.0,
                                "other": 12.5, "kept_source": 0, "other_source": 1}]
    np.testing.assert_array_equal(m.source, [0, 0, 0, 1])


def test_merge_sorts_and_counts_reordering_nan_equal():
    times = np.array([t("2026-10-01T00:20"), t("2026-10-01T00:00"), t("2026-10-01T00:20")])
    m = merge_records(times, {"x": np.array([np.nan, 1.0, np.nan])}, np.array([0, 0, 1]))
    assert m.reordered == 1 and m.duplicates == 1 and m.conflicts == 0
    assert m.time.size == 2


def test_merge_empty():
    m = merge_records(np.array([], "datetime64[ns]"), {"x": np.array([])}, np.array([], int))
    assert m.time.size == 0 and m.duplicates == 0


def test_drift_check_before_set_is_an_error():
    with pytest.raises(ValueError, match="after"):
        drift_corrected(np.array([t("2026-10-01")]), clock_set=t("2026-10-05"), check_logger=t("2026-10-01"),
                        check_reference=t("2026-10-01"))
