"""The window helpers against numpy's own ``searchsorted`` (the reference: numpy documents
``searchsorted(a, v, side)`` as the insertion indices that keep ``a`` sorted) on long
series, so the block-by-block path (more than 65,536 samples) is exercised."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.checks import windows as _windows
from qcpipe.checks.windows import (
    _equal_run_edge,
    constant_windows,
    floats_from_keys,
    order_keys,
    running_max_in_blocks,
    last_change_before_stop,
    previous_valid_index,
    running_sums,
    sorted_search,
    window_bounds,
)


@pytest.mark.parametrize("seed", range(6))
def test_blockwise_search_equals_numpy(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(70_000, 400_000))
    # irregular steps with repeated times and long gaps
    steps = rng.choice([0, 1, 1, 1, 2, 5, 1000], size=n).astype(np.int64) * 1_000_000_000
    t = np.cumsum(steps)
    for w in (0, 1, 3_000_000_000, 600_000_000_000, 10**15):
        for side in ("left", "right"):
            np.testing.assert_array_equal(sorted_search(t, t - w, side), np.searchsorted(t, t - w, side))
            np.testing.assert_array_equal(sorted_search(t, t + w, side), np.searchsorted(t, t + w, side))


@pytest.mark.parametrize("side", ["left", "right"])
def test_zero_width_edges_equal_numpy(side):
    rng = np.random.default_rng(7)
    t = np.sort(rng.integers(0, 50, 1000)).astype(np.int64)      # many repeated times
    np.testing.assert_array_equal(_equal_run_edge(t, side), np.searchsorted(t, t, side))


def test_window_bounds_with_zero_width_sides():
    t = np.array([0, 0, 1, 1, 1, 3, 7, 7], dtype=np.int64)
    for inc_b in (True, False):
        for inc_a in (True, False):
            start, stop = window_bounds(t, 0, 0, include_before=inc_b, include_after=inc_a)
            np.testing.assert_array_equal(start, np.searchsorted(t, t, "left" if inc_b else "right"))
            np.testing.assert_array_equal(stop, np.searchsorted(t, t, "right" if inc_a else "left"))


@pytest.mark.parametrize("seed", range(4))
def test_symmetric_window_stops_equal_numpy(seed):
    """A symmetric window's stops come from counting its starts, not from a second search."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 3000))
    t = np.cumsum(rng.choice([0, 0, 1, 2, 3, 50], size=n)).astype(np.int64) + int(rng.integers(-100, 100))
    for w in (1, 2, 3, 7, 49, 50, 51, 10**6):
        for closed in (True, False):
            start, stop = window_bounds(t, w, w, include_before=closed, include_after=closed)
            np.testing.assert_array_equal(start, np.searchsorted(t, t - w, "left" if closed else "right"))
            np.testing.assert_array_equal(stop, np.searchsorted(t, t + w, "right" if closed else "left"))


def _constant(v):
    return v.size > 0 and bool(np.all(v == v[0]))


def test_constant_windows_equal_brute_force():
    """Exact constancy of every window against a direct look at its valid values."""
    rng = np.random.default_rng(5)
    n = 600
    x = rng.choice([0.0, 0.0, 0.0, 1.0, 2.5, np.nan], size=n)
    t = np.cumsum(rng.choice([0, 1, 1, 2, 9], size=n)).astype(np.int64)
    ok = np.isfinite(x)
    prev = previous_valid_index(ok)
    change = ok & (prev >= 0) & (x != x[prev])
    _, c, _ = running_sums(x, ok, ref=0.0)
    for w in (1, 3, 10, 40):
        for inc in (True, False):
            start, stop = window_bounds(t, w, 0, include_before=inc, include_after=False)
            got = constant_windows(last_change_before_stop(change, c, stop), c[stop] - c[start], c[start])
            want = [_constant(x[a:b][ok[a:b]])
                    for a, b in zip(start, stop)]
            np.testing.assert_array_equal(got, want)
    # stop=None stands for stop_i = i (the window ends just before each sample)
    start = window_bounds(t, 10, 0, include_before=False, include_after=False)[0]
    got = constant_windows(last_change_before_stop(change, c, None), c[:-1] - c[start], c[start])
    want = [_constant(x[a:b][ok[a:b]])
            for a, b in zip(start, range(n))]
    np.testing.assert_array_equal(got, want)


def test_calendar_month_equals_numpy_datetime_fields():
    """Against numpy's own calendar conversion (datetime64[M]) over 1950-2100, with times on
    and either side of every month start."""
    from qcpipe.checks.range import calendar_month

    starts = np.arange(np.datetime64("1950-01"), np.datetime64("2100-01")).astype("datetime64[ns]").view(np.int64)
    t = np.sort(np.concatenate([starts - 1, starts, starts + 1, starts + 86_400_000_000_000 * 15]))
    expected = t.astype("datetime64[ns]").astype("datetime64[M]").astype(np.int64) % 12 + 1
    np.testing.assert_array_equal(calendar_month(t), expected)
    rng = np.random.default_rng(3)
    shuffled = rng.permutation(t)                   # the check does not need sorted times
    np.testing.assert_array_equal(calendar_month(shuffled),
                                  shuffled.astype("datetime64[ns]").astype("datetime64[M]").astype(np.int64) % 12 + 1)


# --- running maxima within blocks (flat line) ----------------------------------


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.floats(allow_nan=False, allow_infinity=False, width=64), st.booleans()),
                max_size=60))
def test_running_max_in_blocks_matches_plain_loop(items):
    # Values of any size and sign (-0.0, subnormals, 1e308); a True starts a new block.
    x = np.array([v for v, _ in items], dtype=np.float64)
    block = np.cumsum([new for _, new in items]).astype(np.int64)
    np.testing.assert_array_equal(floats_from_keys(order_keys(x)).view(np.uint64), x.view(np.uint64))
    from_start, to_end = running_max_in_blocks(x, block)
    want_start, want_end = [], []
    for i in range(x.size):
        same = [j for j in range(x.size) if block[j] == block[i]]
        want_start.append(max(x[j] for j in same if j <= i))
        want_end.append(max(x[j] for j in same if j >= i))
    np.testing.assert_array_equal(from_start, np.array(want_start, dtype=np.float64))
    np.testing.assert_array_equal(to_end, np.array(want_end, dtype=np.float64))


@st.composite
def _irregular_times(draw):
    """Sorted int64 times with repeated times (steps of 0) and gaps far longer than the windows."""
    n = draw(st.integers(1, 200))
    steps = draw(st.lists(st.sampled_from([0, 0, 1, 2, 3, 7, 50, 1000, 10**9]), min_size=n, max_size=n))
    t0 = draw(st.integers(-2**50, 2**50))
    return t0 + np.cumsum(np.array(steps, dtype=np.int64))


@settings(max_examples=300, deadline=None)
@given(_irregular_times(), st.integers(0, 2000), st.integers(0, 2000), st.booleans(), st.booleans(),
       st.sampled_from([1, 2, 5, 8192]))
def test_window_edges_equal_numpy_searchsorted(t, before, after, include_before, include_after, block):
    """Every window edge (both sides, open or closed, zero width, symmetric or not), searched block by
    block (blocks of 1, 2 and 5 keys put even short series on the block path) or in one call."""
    saved = _windows._BLOCK
    _windows._BLOCK = block
    try:
        start, stop = window_bounds(t, before, after, include_before=include_before, include_after=include_after)
    finally:
        _windows._BLOCK = saved
    np.testing.assert_array_equal(start, np.searchsorted(t, t - before, "left" if include_before else "right"))
    np.testing.assert_array_equal(stop, np.searchsorted(t, t + after, "right" if include_after else "left"))
