"""Tests for qcpipe.checks.flags: flag values and the aggregate flag."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.checks import (
    FAIL,
    FLAG_MEANINGS,
    FLAG_VALUES,
    MISSING,
    NOT_EVALUATED,
    PASS,
    SUSPECT,
    aggregate_flags,
    worst_flag,
)

NAN = np.nan


def test_flag_values_are_the_ioc_primary_flags():
    # IOC Manuals and Guides 54 Vol. 3 (2013) primary flags, as given in the
    # project brief: 1 pass, 2 not evaluated, 3 suspect, 4 fail, 9 missing.
    assert (PASS, NOT_EVALUATED, SUSPECT, FAIL, MISSING) == (1, 2, 3, 4, 9)
    for flag in (PASS, NOT_EVALUATED, SUSPECT, FAIL, MISSING):
        assert isinstance(flag, np.int8)
    assert FLAG_VALUES.dtype == np.int8
    np.testing.assert_array_equal(FLAG_VALUES, [1, 2, 3, 4, 9])


def test_flag_meanings_pair_with_flag_values():
    # CF flag_meanings: blank-separated words, one per flag_values entry.
    words = FLAG_MEANINGS.split(" ")
    assert words == ["pass", "not_evaluated", "suspect", "fail", "missing"]
    assert len(words) == FLAG_VALUES.size


def test_flag_words_a_person_reads():
    # the IOC primary flags' meanings (IOC Manuals and Guides 54 Vol. 3, 2013), in the words
    # the reports print, keyed by the flag as text as the catalog's flag counts are
    from qcpipe.checks import FLAG_KEYS, FLAG_WORDS

    assert FLAG_WORDS == {"1": "pass", "2": "not evaluated", "3": "suspect", "4": "fail", "9": "missing"}
    assert FLAG_KEYS == ("1", "2", "3", "4", "9")


# Each case: values, flags of each check, expected aggregate (worked by hand from
# the rule: 9 where value is NaN; else worst of 4 > 3 > 1 among checks giving
# 1/3/4; 2 if none did).
AGGREGATE_CASES = {
    "nan_value_is_missing_whatever_the_checks_say": (
        [NAN, NAN], [[1, 4], [3, 2]], [9, 9]),
    "fail_beats_suspect_beats_pass": (
        [0.0, 0.0, 0.0], [[1, 1, 3], [3, 4, 1], [1, 3, 1]], [3, 4, 3]),
    "not_evaluated_is_ignored": (
        [0.0, 0.0], [[2, 2], [1, 3]], [1, 3]),
    "nobody_evaluated_gives_not_evaluated": (
        [0.0], [[2], [2]], [2]),
    "check_missing_on_present_value_is_ignored": (
        [0.0, 0.0], [[9, 9], [1, 2]], [1, 2]),
    "infinite_value_is_not_missing": (
        [np.inf], [[4], [9]], [4]),
}


@pytest.mark.parametrize(
    "values, flags, expected", AGGREGATE_CASES.values(), ids=AGGREGATE_CASES.keys()
)
def test_aggregate_flags_hand_cases(values, flags, expected):
    arrays = [np.array(f, dtype=np.int8) for f in flags]
    got = aggregate_flags(np.array(values), arrays)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, expected)


def test_aggregate_flags_without_checks():
    got = aggregate_flags(np.array([1.0, NAN, 3.0]), [])
    np.testing.assert_array_equal(got, [2, 9, 2])
    assert got.dtype == np.int8


def test_aggregate_flags_empty_series():
    got = aggregate_flags(np.array([]), [np.array([], dtype=np.int8)])
    assert got.shape == (0,) and got.dtype == np.int8


def test_aggregate_flags_masked_and_datetime_values():
    masked = np.ma.array([1.0, 2.0], mask=[False, True])
    np.testing.assert_array_equal(aggregate_flags(masked, [np.array([1, 1])]), [1, 9])
    times = np.array(["2024-01-01", "NaT"], dtype="datetime64[s]")
    np.testing.assert_array_equal(aggregate_flags(times, [np.array([3, 3])]), [3, 9])


def test_aggregate_flags_keeps_shape_of_2d_values():
    values = np.array([[0.0, NAN], [1.0, 2.0]])
    flags = np.array([[1, 1], [3, 2]], dtype=np.int8)
    np.testing.assert_array_equal(aggregate_flags(values, [flags]), [[1, 9], [3, 2]])


def test_worst_flag():
    got = worst_flag([np.array([1, 2, 9, 4]), np.array([3, 2, 2, 1])])
    np.testing.assert_array_equal(got, [3, 2, 2, 4])
    assert got.dtype == np.int8


def naive_aggregate(values, flag_arrays):
    """Plain loop over samples and checks: the rule as README "What comes out" states it."""
    severity = {1: 1, 3: 2, 4: 3}
    out = []
    for i, value in enumerate(values):
        if np.isnan(value):
            out.append(9)
            continue
        worst = None
        for flags in flag_arrays:
            f = int(flags[i])
            if f in severity and (worst is None or severity[f] > severity[worst]):
                worst = f
        out.append(2 if worst is None else worst)
    return out


@st.composite
def values_and_flags(draw):
    n = draw(st.integers(0, 30))
    values = draw(st.lists(st.sampled_from([0.0, 1.5, -2.0, NAN, np.inf]), min_size=n, max_size=n))
    n_checks = draw(st.integers(0, 5))
    flag = st.sampled_from([1, 2, 3, 4, 9])
    arrays = [
        np.array(draw(st.lists(flag, min_size=n, max_size=n)), dtype=np.int8)
        for _ in range(n_checks)
    ]
    return np.array(values, dtype=float), arrays


@settings(max_examples=200, deadline=None)
@given(values_and_flags())
def test_aggregate_flags_matches_plain_loop(case):
    values, arrays = case
    np.testing.assert_array_equal(aggregate_flags(values, arrays), naive_aggregate(values, arrays))
