"""Tests for qcpipe.tide.companion: a temperature logger's clock lag from its steps at wet/dry transitions.

Synthetic shore: an M2 tide (speed 28.9841042 deg/h, Schureman (1958) Table 2, from memory) at a
point 0.8 m above mean level, its crossings found here with scipy's Brent root finder; a logger
reading 12 degC under water and a daily air cycle around 17 degC in air, with noise, whose clock
runs a known lag ahead.  The function is compared with a plain-loop implementation written
here, and with the known lag.
"""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from qcpipe.tide.companion import shares_error, step_lag

S = 10**9
M2 = math.radians(28.9841042) / 3600  # rad/s, Schureman (1958) Table 2, from memory
T0 = int(np.datetime64("2026-05-04T00:00:00", "s").astype(np.int64))
DAYS = 14
STEP_S = 600.0  # 10-min sampling


def level(t_s):
    return 1.6 * np.cos(M2 * t_s)


def crossings(z=0.8):
    """Times (s) the continuous tide crosses z: brackets on a 60 s grid, roots by Brent's method to 1e-3 s."""
    g = np.arange(-86400.0, (DAYS + 1) * 86400.0, 60.0)
    wet = level(g) > z
    i = np.flatnonzero(wet[1:] != wet[:-1])
    return np.array([brentq(lambda x: level(x) - z, g[k], g[k + 1], xtol=1e-3) for k in i]), wet[i + 1]


def logger(lag_s, seed=1, jumps=True):
    """A temperature logger whose clock is ``lag_s`` ahead: stamps (ns) and readings (degC)."""
    rng = np.random.default_rng(seed)
    stamps = np.arange(0.0, DAYS * 86400.0, STEP_S)
    true = stamps - lag_s
    air = 17.0 + 4.0 * np.sin(2 * np.pi * true / 86400.0)
    temp = np.where(level(true) > 0.8, 12.0, air) if jumps else air
    temp = temp + rng.normal(0.0, 0.05, stamps.size)
    return ((T0 + stamps) * S).astype(np.int64), temp


def transitions_ns():
    t, _ = crossings()
    return np.rint((T0 + t) * S).astype(np.int64)


def brute_force(times, values, trans, *, max_lag_s=3 * 3600, min_contrast=3.0, min_transitions=4):
    """step_lag's definition (its docstring) with plain loops over steps, transitions and lag bins."""
    t = [int(x) for x in times]
    x = [float(y) for y in values]
    h = float(np.median(np.diff(times))) / S
    steps = [(t[j] + (t[j + 1] - t[j]) // 2, abs(x[j + 1] - x[j])) for j in range(len(t) - 1)
             if t[j + 1] - t[j] <= 3 * h * S]
    nbin = int(math.floor(max_lag_s / h + 0.5))
    sums, cnt = [0.0] * (2 * nbin + 1), [0] * (2 * nbin + 1)
    for s, a in steps:
        for r in trans:
            d = (s - int(r)) / S
            if abs(d) <= max_lag_s:
                b = int(round(d / h)) + nbin
                if 0 <= b <= 2 * nbin:
                    sums[b] += a
                    cnt[b] += 1
    means = [sums[i] / cnt[i] if cnt[i] else float("nan") for i in range(len(sums))]
    best = max(range(len(means)), key=lambda i: (means[i] if means[i] == means[i] else -1.0))
    lag0 = (best - nbin) * h
    level_ = float(np.nanmedian(means))
    lags = []
    for r in trans:
        cand = [(a, (s - int(r)) / S) for s, a in steps if abs((s - int(r)) / S - lag0) <= 2 * h]
        if cand:
            lags.append(max(cand)[1])
    med = float(np.median(lags))
    spread = 1.4826 * float(np.median(np.abs(np.array(lags) - med)))
    return med, spread, len(lags), means[best] / level_


@pytest.mark.parametrize("lag_min", [60, 0, -25], ids=["60 min fast", "on time", "25 min slow"])
def test_lag_matches_the_known_lag_and_the_plain_loop(lag_min):
    times, temp = logger(lag_min * 60.0)
    trans = transitions_ns()
    got = step_lag(times, temp, trans)
    med, spread, n, contrast = brute_force(times, temp, trans)
    # the plain loops give the same numbers (float sums in another order: 1e-9 relative)
    assert got.lag_s == pytest.approx(med, abs=1e-6)
    assert got.spread_s == pytest.approx(spread, abs=1e-6)
    assert got.n_matched == n
    assert got.contrast == pytest.approx(contrast, rel=1e-9)
    # the known lag: a step is timed at a sampling midpoint, within half an interval (5 min) of the jump
    assert got.found
    assert abs(got.lag_s - lag_min * 60.0) <= STEP_S / 2
    assert got.spread_s <= STEP_S
    assert got.n_matched >= 0.9 * got.n_transitions > 0


def test_a_logger_without_jumps_at_wetting_has_no_lag():
    times, temp = logger(0.0, jumps=False)
    got = step_lag(times, temp, transitions_ns())
    assert not got.found and got.contrast < 3.0


def test_gaps_and_missing_readings_are_skipped():
    times, temp = logger(3600.0)
    temp[100:400] = np.nan
    times = np.concatenate((times[:800], times[1000:]))
    temp = np.concatenate((temp[:800], temp[1000:]))
    got = step_lag(times, temp, transitions_ns())
    assert got.found and abs(got.lag_s - 3600.0) <= STEP_S / 2


def test_nothing_to_match():
    times, temp = logger(0.0)
    got = step_lag(times, temp, np.array([], "datetime64[ns]"))
    assert not got.found and math.isnan(got.lag_s) and got.n_matched == 0


def test_bad_arguments_name_the_function_and_argument():
    times, temp = logger(0.0)
    with pytest.raises(ValueError, match="step_lag: max_lag_s"):
        step_lag(times, temp, transitions_ns(), max_lag_s=-1)
    with pytest.raises(ValueError, match="step_lag"):
        step_lag(times[::-1], temp, transitions_ns())


@pytest.mark.parametrize("lag, probe, shares", [(0.0, 3600.0, True), (-3600.0, 3600.0, False),
                                                (-1700.0, 3600.0, True), (-1900.0, 3600.0, False),
                                                (float("nan"), 3600.0, False)])
def test_shares_error_is_nearer_the_probe_than_zero(lag, probe, shares):
    # the logger's own error is lag + probe offset: shared when nearer the probe's error than zero
    assert shares_error(lag, probe) is shares
