"""The fixed-width time fast path against pandas.to_datetime(format=...) (strptime semantics), the
reference: where the fast path answers, its times equal pandas' exactly; where a stamp is anything
but a clean fixed-width stamp, it declines (returns None) and the reader uses pandas."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.ingest.fasttime import fixed_width_times

FORMATS = ["%Y-%m-%dT%H:%M:%S", "%d/%m/%Y %H:%M", "%Y/%m/%d %H:%M:%S", "%Y%m%d%H%M%S", "%Y-%m-%d"]


def _pandas(stamps, fmt):
    return pd.to_datetime(pd.Series(stamps, dtype=object), format=fmt, errors="coerce").to_numpy(
        dtype="datetime64[ns]")


@pytest.mark.parametrize("fmt", FORMATS)
def test_equals_pandas_on_valid_stamps(fmt):
    rng = np.random.default_rng(1)
    ns = rng.integers(np.datetime64("1900-01-01", "ns").astype(np.int64),
                      np.datetime64("2200-12-31", "ns").astype(np.int64), 20_000)
    stamps = pd.to_datetime(ns).strftime(fmt).to_numpy(dtype=object).copy()
    stamps[:4] = pd.to_datetime(["2024-02-29T23:59:59", "2000-02-29", "2027-12-31T00:00:00",
                                 "2027-01-01T00:00:00"], format="ISO8601").strftime(fmt)  # leap days, year ends
    got = fixed_width_times(stamps, fmt)
    assert got is not None
    np.testing.assert_array_equal(got, _pandas(stamps, fmt))


@pytest.mark.parametrize("bad", [
    "2027-13-01T00:00:00",      # month 13
    "2027-02-29T00:00:00",      # not a leap year
    "2027-04-31T00:00:00",      # April has 30 days
    "2027-01-01T24:00:00",      # hour 24
    "2027-01-01T00:60:00",      # minute 60
    "2027-01-01T00:00:60",      # second 60 (strptime's own rule decides)
    "2027-1-01T00:00:00",       # not zero-padded
    "2027-01-01 00:00:00",      # other separator
    "2027-01-01T00:00:00Z",     # longer
    "2027-01-01T00:00",         # shorter
    "2027-01-01T00:00:0x",      # not a digit
    "2027-01-01T00:00:00 ",     # trailing space
    "2027-01-01T00:00:0\u00b9",  # a non-ASCII digit
    "",
])
def test_declines_anything_else(bad):
    fmt = "%Y-%m-%dT%H:%M:%S"
    stamps = np.array(["2027-01-01T00:00:00", bad, "2027-01-02T00:00:00"], dtype=object)
    assert fixed_width_times(stamps, fmt) is None


@pytest.mark.parametrize("fmt", ["%Y-%m-%d %H:%M:%S%z", "%y%m%d", "%Y-%j", "%Y-%m-%d  %H", "%Y-%m-%d\t%H",
                                 "%d.%m.%Y %I:%M %p", "%Y-%m-%dT%H:%M:%S.%f", "%H:%M:%S", "%Y-%m-%d %%"])
def test_declines_formats_it_does_not_cover(fmt):
    assert fixed_width_times(np.array(["2027-01-01"], dtype=object), fmt) is None


@settings(max_examples=300, deadline=None)
@given(st.lists(st.text(alphabet="0123456789-T: /", min_size=0, max_size=21), min_size=1, max_size=6),
       st.sampled_from(FORMATS))
def test_never_disagrees_with_pandas(stamps, fmt):
    arr = np.array(stamps, dtype=object)
    got = fixed_width_times(arr, fmt)
    if got is not None:
        np.testing.assert_array_equal(got, _pandas(arr, fmt))
