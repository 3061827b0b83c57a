"""Thinning for display and time parsing, against a plain-loop reference and datetime."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.review.data import parse_time, runs_of, thin_indices


def brute_force(times, values, flags, t0, t1, columns):
    """Per (pixel column, flag class): the lowest and highest value, by a loop over the samples."""
    groups: dict = {}
    for i, (t, v, f) in enumerate(zip(times, values, flags)):
        if not t0 <= t <= t1:
            continue
        col = min(int((t - t0) * columns / max(t1 - t0, 1)), columns - 1)
        v = 0.0 if np.isnan(v) else v
        lo, hi = groups.get((col, int(f)), ((v, i), (v, i)))
        groups[(col, int(f))] = (min(lo, (v, i)), max(hi, (v, i)))
    return groups


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 10_000), st.one_of(st.floats(-50, 50), st.just(float("nan"))), st.sampled_from([1, 2, 3, 4, 9])),
                min_size=0, max_size=300),
       st.integers(1, 60), st.integers(0, 4000), st.integers(0, 8000))
def test_every_flag_class_of_every_column_keeps_its_extremes(samples, columns, a, span):
    samples.sort(key=lambda s: s[0])
    times = np.array([s[0] for s in samples], dtype=np.int64)
    values = np.array([s[1] for s in samples], dtype=np.float64)
    flags = np.array([s[2] for s in samples], dtype=np.int8)
    t0, t1 = a, a + span
    idx = thin_indices(times, values, flags, t0, t1, columns)
    groups = brute_force(times, values, flags, t0, t1, columns)
    kept_vals = {}
    for i in idx:
        assert t0 <= times[i] <= t1
        col = min(int((times[i] - t0) * columns / max(t1 - t0, 1)), columns - 1)
        kept_vals.setdefault((col, int(flags[i])), []).append(0.0 if np.isnan(values[i]) else values[i])
    assert set(kept_vals) == set(groups)
    for key, ((lo, _), (hi, _)) in groups.items():
        assert min(kept_vals[key]) == lo and max(kept_vals[key]) == hi
        assert len(kept_vals[key]) <= 2
    assert np.all(np.diff(idx) > 0)


def test_thinning_rejects_no_columns():
    with pytest.raises(ValueError, match="columns must be >= 1"):
        thin_indices(np.arange(3), np.zeros(3), np.ones(3), 0, 2, 0)


def test_runs_of():
    assert runs_of(np.array([0, 1, 1, 0, 1], bool)) == [(1, 2), (4, 4)]
    assert runs_of(np.zeros(4, bool)) == []


@pytest.mark.parametrize("text, want", [
    ("2026-09-20T06:00:00Z", dt.datetime(2026, 9, 20, 6, tzinfo=dt.timezone.utc)),
    ("2026-09-20T08:00:00+02:00", dt.datetime(2026, 9, 20, 6, tzinfo=dt.timezone.utc)),
    ("1789884000000", dt.datetime(2026, 9, 20, 6, tzinfo=dt.timezone.utc)),
])
def test_parse_time_gives_utc_nanoseconds(text, want):
    assert parse_time(text, "start") == int(want.timestamp()) * 10**9


@pytest.mark.parametrize("text", ["soon", "2026-09-20T06:00:00", "3000-01-01T00:00:00Z", "-99999999999999", ""])
def test_parse_time_refuses_with_a_sentence(text):
    with pytest.raises(ValueError, match="start"):
        parse_time(text, "start")
