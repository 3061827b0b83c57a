"""Block-by-block evaluation does not change any flag.

The checks run their element-wise steps over blocks of ``CACHE_BLOCK`` samples and carry
state (runs of disagreement, month tables) from one block to the next. On a series shorter
than one block that is the single-pass computation the other tests compare with plain loops
and hand-worked values; here the same series is cut into blocks of 1, 2, 3, 7 and 64 samples
and every flag must stay the same. Property test, no external check value.
"""

from __future__ import annotations

import numpy as np
import pytest

from qcpipe import checks
from qcpipe.checks import windows as _windows
from qcpipe.checks.tide import immersion_consistency_flags

S = 1_000_000_000


def _series(seed: int, n: int = 700):
    rng = np.random.default_rng(seed)
    # irregular steps with repeated times and gaps, crossing month starts (2027-01-31 23:00 on)
    steps = rng.choice([0, 1, 1, 2, 30, 3600, 86_400], size=n, p=[.1, .4, .2, .1, .1, .05, .05])
    t = np.datetime64("2027-01-31T23:00", "ns").astype(np.int64) + np.cumsum(steps) * S
    x = np.round(rng.normal(10.0, 2.0, n), 1)
    x[rng.random(n) < 0.3] = 10.0                               # stuck stretches
    x[rng.random(n) < 0.02] += rng.choice([-30.0, 30.0])        # spikes and range failures
    x[rng.random(n) < 0.05] = np.nan
    x[rng.random(n) < 0.01] = np.inf
    level = 1.6 + 1.5 * np.sin(np.arange(n) / 25.0)
    state = (level > 1.6).astype(np.int8)
    state[rng.random(n) < 0.15] ^= 1                            # runs of disagreement
    state[rng.random(n) < 0.05] = 2
    reading = np.where(rng.random(n) < 0.03, np.nan, 1.0)
    return t, x, level, state, reading


def _all_flags(t, x, level, state, reading):
    ranges = [([1, 2, 3], 5.0, 14.0), ([6, 7], 8.0, 20.0)]
    return {
        "gross_range": checks.gross_range_flags(x, sensor_min=-5.0, sensor_max=35.0,
                                                expected_min=4.0, expected_max=16.0),
        "gross_range_sensor_only": checks.gross_range_flags(x, sensor_min=-5.0, sensor_max=35.0),
        "climatology": checks.climatology_flags(x, t, ranges=ranges),
        "spike": checks.spike_flags(x, t, half_window_s=40.0, suspect=1.0, fail=5.0),
        "rate_of_change": checks.rate_of_change_flags(x, t, window_s=600.0, n_sigma=2.0),
        "rate_of_change_distinct_times": checks.rate_of_change_flags(
            x[np.r_[True, np.diff(t) > 0]], t[np.r_[True, np.diff(t) > 0]], window_s=600.0, n_sigma=2.0),
        "flat_line": checks.flat_line_flags(x, t, tolerance=0.05, suspect_after_s=20.0, fail_after_s=3600.0),
        "immersion": immersion_consistency_flags(t, state, level, reading=reading, elevation_m=1.6,
                                                 margin_m=0.1, fail_after_s=3.0),
    }


@pytest.mark.parametrize("seed", range(3))
@pytest.mark.parametrize("block", [1, 2, 3, 7, 64])
def test_flags_do_not_depend_on_the_block_size(monkeypatch, seed, block):
    data = _series(seed)
    whole = _all_flags(*data)
    assert all(f.size == data[0].size or name == "rate_of_change_distinct_times" for name, f in whole.items())
    monkeypatch.setattr(_windows, "CACHE_BLOCK", block)
    cut = _all_flags(*data)
    for name in whole:
        np.testing.assert_array_equal(cut[name], whole[name], err_msg=name)
    # the series is varied enough that every check gives more than one flag value
    assert all(np.unique(f).size > 1 for f in whole.values())
