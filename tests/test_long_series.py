"""The core checks in chunks equal the in-memory core checks at every sample, whatever the chunk size."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.checks import aggregate_flags
from qcpipe.long_series import core_flags_in_chunks, core_qc_netcdf, required_overlap_s
from qcpipe.config.rules import VariableRules
from qcpipe.apply_rules import flags_for_variable

RULES = VariableRules.model_validate({
    "units": "degC",
    "gross_range": {"sensor_min": -5, "sensor_max": 40, "expected_min": 0, "expected_max": 30},
    "climatology": [{"months": [1, 2, 3], "min": 2, "max": 25}],
    "spike": {"half_window": "5 min", "suspect": 1.0, "fail": 3.0},
    "rate_of_change": {"window": "20 min", "n_sigma": 3.0},
    "flat_line": {"tolerance": 0.0, "suspect_after": "10 min", "fail_after": "30 min"},
    "gap": {"max_gap": "3 min"},
})


def series(seed: int, n: int):
    rng = np.random.default_rng(seed)
    steps = rng.choice([30, 60, 60, 60, 90, 600, 3600], size=n, p=[.1, .6, .1, .1, .05, .04, .01])
    t = np.datetime64("2026-01-20T00:00", "ns") + np.cumsum(steps).astype("timedelta64[s]")
    v = 12 + np.cumsum(rng.normal(0, 0.2, n))
    v[rng.random(n) < 0.03] += rng.choice([-6, 6], size=None)          # spikes
    stuck = rng.integers(0, n - 80)
    v[stuck:stuck + 70] = v[stuck]                                     # a long flat run
    v[rng.random(n) < 0.05] = np.nan                                   # missing values
    nan_run = rng.integers(0, n - 60)
    v[nan_run:nan_run + 50] = np.nan                                   # a long missing stretch
    return t, v


#: the flat-line and spike options: each reads a different span around a sample
VARIANTS = {
    "default": RULES,
    "flat_current_tolerance": RULES.model_copy(update={"flat_line": RULES.flat_line.model_copy(
        update={"tolerance": 0.3})}),
    "flat_real_time": RULES.model_copy(update={"flat_line": RULES.flat_line.model_copy(
        update={"tolerance": 0.3, "mode": "real_time"})}),
    "flat_previous_delayed": RULES.model_copy(update={"flat_line": RULES.flat_line.model_copy(
        update={"tolerance": 0.3, "reference": "previous"})}),
    "spike_one_sided": RULES.model_copy(update={"spike": RULES.spike.model_copy(
        update={"one_sided_edges": True})}),
}


def chunked(t, v, sizes, rules=RULES):
    edges = np.cumsum([0] + list(sizes))
    blocks = [(t[a:b], v[a:b]) for a, b in zip(edges[:-1], edges[1:]) if a < t.size]
    if edges[-1] < t.size:
        blocks.append((t[edges[-1]:], v[edges[-1]:]))
    parts = list(core_flags_in_chunks(blocks, rules))
    tt = np.concatenate([p[0] for p in parts])
    flags = {k: np.concatenate([p[2][k] for p in parts]) for k in parts[0][2]}
    return tt, flags


@pytest.mark.parametrize("variant", VARIANTS)
@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), sizes=st.lists(st.integers(1, 97), min_size=1, max_size=60))
def test_chunked_equals_in_memory(variant, seed, sizes):
    rules = VARIANTS[variant]
    t, v = series(seed, 1500)
    whole = flags_for_variable(v, t, rules)
    tt, flags = chunked(t, v, sizes, rules)
    np.testing.assert_array_equal(tt, t)
    for check, arr in whole.items():
        np.testing.assert_array_equal(flags[check], arr, err_msg=check)
    assert set(flags) == set(whole) | {"aggregate"}
    np.testing.assert_array_equal(flags["aggregate"], aggregate_flags(v, list(whole.values())))


def test_overlap_is_the_longest_window():
    assert required_overlap_s(RULES) == 30 * 60     # flat line fail_after, longer than 20 min and 5 min


def test_blocks_out_of_order_rejected():
    t, v = series(1, 100)
    with pytest.raises(ValueError, match="time order"):
        list(core_flags_in_chunks([(t[50:], v[50:]), (t[:50], v[:50])], RULES))


def test_netcdf_to_netcdf_in_slices(tmp_path):
    t, v = series(7, 5000)
    src = tmp_path / "in.nc"
    xr.Dataset({"temperature": ("time", v)}, coords={"time": t}).to_netcdf(
        src, encoding={"time": {"units": "seconds since 1970-01-01T00:00:00Z", "dtype": "float64"}})
    counts = core_qc_netcdf(src, "temperature", RULES, tmp_path / "out.nc", block=333)
    with xr.open_dataset(tmp_path / "out.nc") as out:
        whole = flags_for_variable(v, t, RULES)
        np.testing.assert_array_equal(out["time"].values, t)
        for check, arr in whole.items():
            np.testing.assert_array_equal(out[f"temperature_qc_{check}"].values, arr, err_msg=check)
            assert counts[check] == {int(a): int(c) for a, c in zip(*np.unique(arr, return_counts=True))}
        np.testing.assert_array_equal(out["temperature_qc_aggregate"].values, aggregate_flags(v, list(whole.values())))


def _minute_series(pieces):
    """Values every 60 s from (count, value) pieces; NaN marks missing."""
    v = np.concatenate([np.full(k, x, dtype=float) for k, x in pieces])
    return np.datetime64("2026-02-01T00:00", "ns") + np.arange(v.size).astype("timedelta64[m]"), v


FLAT_ONLY = VariableRules.model_validate({
    "units": "degC", "flat_line": {"tolerance": 1.0, "suspect_after": "10 min", "fail_after": "30 min"}})


@pytest.mark.parametrize("sizes", [[1], [7], [50], [64, 3]], ids=["1", "7", "50", "64_3"])
@pytest.mark.parametrize("case", ["run_across_missing", "look_ahead_from_before_the_buffer"])
def test_delayed_flat_line_across_a_long_missing_stretch(case, sizes):
    # Hand-made: the delayed flat line (overlap 30 min) decides a sample from
    # samples more than the overlap away when missing values lie between.
    if case == "run_across_missing":
        # 0 for 10 min, 60 min missing, 0 for 6 min, then far values: by hand the
        # look-ahead of each early sample reaches the first valid sample 30 min
        # later (at 70 min, value 0): the early samples fail in the whole record.
        t, v = _minute_series([(10, 0.0), (60, np.nan), (6, 0.0), (80, 50.0)])
        expect_fail = [0, 9, 70]
    else:
        # 0 at 0 min, 1 at 1 min, missing to 100 min, -1 at 100 min, then far
        # values. The look-ahead from 0 min (-1 and 1 within 1.0 of 0) covers the
        # sample at 100 min; the one from 1 min does not (|-1 - 1| = 2), nor the
        # look-back from 100 min. So the sample at 100 min fails only if the
        # chunks keep the sample at 0 min, 31+ min before the one at 1 min.
        t, v = _minute_series([(1, 0.0), (1, 1.0), (98, np.nan), (1, -1.0), (80, 50.0)])
        expect_fail = [0, 1, 100]
    whole = flags_for_variable(v, t, FLAT_ONLY)["flat_line"]
    np.testing.assert_array_equal(whole[expect_fail], 4)
    sizes = sizes * (t.size // sum(sizes) + 1)
    tt, flags = chunked(t, v, sizes, FLAT_ONLY)
    np.testing.assert_array_equal(tt, t)
    np.testing.assert_array_equal(flags["flat_line"], whole)
