"""Barometer fallback test: hand-worked cases (definition: common practice, no source)."""

import numpy as np
import pytest

from qcpipe.checks import barometer_fallback_flags


def test_suspect_where_the_constant_was_used_missing_wins():
    values = np.array([1.2, 1.3, np.nan, 1.5, np.inf])
    fell_back = np.array([False, True, True, False, False])
    np.testing.assert_array_equal(barometer_fallback_flags(values, fell_back), [1, 3, 9, 1, 9])


def test_empty_and_single():
    assert barometer_fallback_flags(np.array([]), np.array([], bool)).dtype == np.int8
    assert barometer_fallback_flags(np.array([]), np.array([], bool)).size == 0
    np.testing.assert_array_equal(barometer_fallback_flags([2.0], [True]), [3])


@pytest.mark.parametrize("values, mask, words", [
    ([1.0, 2.0], [True], "same shape"),
    ([1.0, 2.0], [1, 0], "boolean"),
    (["a"], [True], "numeric"),
])
def test_bad_arguments_are_named(values, mask, words):
    with pytest.raises(ValueError, match=words):
        barometer_fallback_flags(np.array(values), np.array(mask))
