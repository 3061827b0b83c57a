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


def chunked(t, v, sizes):
    edges = np.cumsum([0] + list(sizes))
    blocks = [(t[a:b], v[a:b]) for a, b in zip(edges[:-1], edges[1:]) if a < t.size]
    if edges[-1] < t.size:
        blocks.append((t[edges[-1]:], v[edges[-1]:]))
    parts = list(core_flags_in_chunks(blocks, RULES))
    tt = np.concatenate([p[0] for p in parts])
    flags = {k: np.concatenate([p[2][k] for p in parts]) for k in parts[0][2]}
    return tt, flags


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), sizes=st.lists(st.integers(1, 97), min_size=1, max_size=60))
def test_chunked_equals_in_memory(seed, sizes):
    t, v = series(seed, 1500)
    whole = flags_for_variable(v, t, RULES)
    tt, flags = chunked(t, v, sizes)
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
