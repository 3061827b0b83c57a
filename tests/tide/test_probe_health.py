"""Tests for qcpipe.tide.probe_health: fouled and buried periods inside a probe record.

Check values: the synthetic records' own truth (tests/tide/probe_records.py: invented
data, each fault's start and end set by construction), a tolerance of one mean tidal
day (24.8412 h, Schureman 1958, from memory; the tolerance the task sets), and an
independent brute-force implementation (a loop over every window) for the O(n)
window sums. The thresholds' basis is in the module docstring: common practice, no
source.
"""

from __future__ import annotations

import numpy as np
import pytest

from qcpipe.tide.classify import class_separation, otsu_threshold
from qcpipe.tide.probe_health import EVIDENCE_SHARE, held_runs, probe_health

from .probe_records import TIDAL_DAY_S, TIDES, day, probe_record, seconds_between


def health_of(rec, *, with_reference, **kw):
    classes = class_separation(rec.readings, otsu_threshold(rec.readings))
    ref = rec.reference_state() if with_reference else None
    return probe_health(rec.times, rec.readings, dry_level=classes.low_level, wet_level=classes.high_level,
                        reference_state=ref, **kw)


def assert_one_period(health, kind, start_day, end_day):
    assert len(health.periods) == 1, [(p.start, p.end, p.kind) for p in health.periods]
    p = health.periods[0]
    assert p.kind == kind
    assert seconds_between(p.start, day(start_day)) <= TIDAL_DAY_S, p.start
    assert seconds_between(p.end, day(end_day)) <= TIDAL_DAY_S, p.end
    return p


REF = pytest.mark.parametrize("with_reference", [False, True], ids=["readings-only", "with-reference"])
TIDE = pytest.mark.parametrize("tide", list(TIDES))


# --- (a) a 3-day fouling inside 28 days ------------------------------------------


@REF
@TIDE
def test_three_day_fouling_is_found_with_its_ends(tide, with_reference):
    rec = probe_record(tide, 0.4, seed=11, fouled=(10, 13), gap=(20, 20.25))
    h = health_of(rec, with_reference=with_reference)
    p = assert_one_period(h, "fouled", 10, 13)
    assert p.strong                                   # readings held between the levels: FAIL
    assert 0.2 < p.wet_level < 0.85                   # sagged toward the air level (record's wet level = 1)
    inside = (rec.times >= p.start) & (rec.times <= p.end)
    assert np.array_equal(h.unreliable, inside) and np.array_equal(h.strong, inside)


# --- (b) a probe buried for a week ----------------------------------------------


@REF
@TIDE
def test_week_long_burial_is_found_with_its_ends(tide, with_reference):
    rec = probe_record(tide, 0.4, seed=12, buried=(12, 19))
    h = health_of(rec, with_reference=with_reference)
    p = assert_one_period(h, "buried", 12, 19)
    # readings only: the dry level has shifted (weak evidence, suspect); the reference says wet
    # while the probe reads dry (strong, fail)
    assert p.strong is with_reference
    assert p.dry_shift > 0.05


@TIDE
def test_burial_at_the_air_level_is_found_against_the_reference(tide):
    rec = probe_record(tide, 0.4, seed=13, buried=(5, 12), buried_offset=0.0)
    h = health_of(rec, with_reference=True)
    p = assert_one_period(h, "buried", 5, 12)
    assert p.strong and p.mismatch_share > 0.9


# --- (c) a healthy probe that is rarely wet --------------------------------------


@REF
@TIDE
@pytest.mark.parametrize("wet_fraction", [0.01, 0.005], ids=["wet-1%", "wet-0.5%"])
def test_healthy_probe_wet_rarely_is_not_flagged(tide, wet_fraction, with_reference):
    rec = probe_record(tide, wet_fraction, seed=14)
    h = health_of(rec, with_reference=with_reference)
    assert h.periods == [] and not h.unreliable.any()


@REF
@TIDE
@pytest.mark.parametrize("wet_fraction", [0.4, 0.1])
def test_healthy_probe_is_not_flagged(tide, wet_fraction, with_reference):
    rec = probe_record(tide, wet_fraction, seed=15, gap=(3, 3.5))
    assert not health_of(rec, with_reference=with_reference).unreliable.any()


# --- rules at their edges ----------------------------------------------------------


def test_fouling_shorter_than_half_a_window_is_not_reported():
    # a sagged half-day is under half of every tidal-day window: never reported (module docstring)
    rec = probe_record("semidiurnal", 0.4, seed=16, fouled=(10, 10.45))
    assert health_of(rec, with_reference=True).periods == []


def test_period_shorter_than_min_period_is_dropped():
    rec = probe_record("semidiurnal", 0.4, seed=17, fouled=(10, 13))
    assert len(health_of(rec, with_reference=False).periods) == 1
    assert health_of(rec, with_reference=False, min_period_s=5 * 86400.0).periods == []


def test_two_foulings_a_week_apart_are_two_periods():
    rec = probe_record("semidiurnal", 0.4, seed=18, fouled=(4, 7))
    second = probe_record("semidiurnal", 0.4, seed=18, fouled=(15, 18))
    rec.readings = np.where(rec.t_s >= 11 * 86400, second.readings, rec.readings)
    periods = health_of(rec, with_reference=False).periods
    assert [p.kind for p in periods] == ["fouled", "fouled"]
    assert seconds_between(periods[1].start, day(15)) <= TIDAL_DAY_S


def test_held_runs_by_hand():
    # 10-min samples; a run lasts from its first to its last sample plus one step
    t = np.arange(12, dtype=np.int64) * 600 * 10**9
    m = np.array([1, 0, 1, 1, 0, 1, 1, 1, 0, 1, 1, 1], dtype=bool)
    got = held_runs(m, t, 30 * 60 * 10**9)                    # 30 min: runs of three samples or more
    assert got.tolist() == [0, 0, 0, 0, 0, 1, 1, 1, 0, 1, 1, 1]
    assert held_runs(m, t, 10 * 60 * 10**9).tolist() == m.tolist()


@pytest.mark.parametrize("kw, words", [
    (dict(dry_level=0.1, wet_level=0.1), "must be finite and different"),
    (dict(level_band=0.5), "level_band = 0.5"),
    (dict(max_level_shift=0.3), "max_level_shift = 0.3"),
    (dict(reference_state=np.full(5, 3)), "reference_state must hold integer states"),
    (dict(reference_state=np.ones(4, np.int8)), "reference_state must have the shape"),
    (dict(min_samples=0), "min_samples = 0"),
])
def test_parameter_errors_name_the_parameter(kw, words):
    args = dict(dry_level=0.06, wet_level=0.17) | kw
    with pytest.raises(ValueError, match=words):
        probe_health(np.arange(5) * 600 * 10**9, np.full(5, 0.06), **args)


# --- O(n) window sums against a loop over every window ---------------------------------


def brute_force(t, x, ref, *, dry, wet, window_ns, b, min_between_ns, m):
    """Every sample's window measured by a plain loop over its members (O(n w))."""
    n = x.size
    ok = np.isfinite(x)
    u = (x - dry) / (wet - dry)
    at_dry, at_wet = ok & (u < b), ok & (u > 1 - b)
    between = ok & ~at_dry & ~at_wet
    step = np.median(np.diff(t))
    held = np.zeros(n, bool)
    i = 0
    while i < n:                                  # runs of between readings, one by one
        if between[i]:
            j = i
            while j + 1 < n and between[j + 1]:
                j += 1
            if t[j] - t[i] + step >= min_between_ns:
                held[i:j + 1] = True
            i = j + 1
        else:
            i += 1
    d0, w0 = np.median(u[at_dry]), np.median(u[at_wet])
    out = {k: np.full(n, np.nan) for k in ("dry_shift", "wet_sag", "between_share", "mismatch_share", "separation")}
    out["n"] = np.zeros(n, int)
    for i in range(n):
        w = [j for j in range(n) if abs(t[j] - t[i]) <= window_ns // 2]
        w = np.array(w)
        out["n"][i] = ok[w].sum()
        ud, uw = u[w][at_dry[w]], u[w][at_wet[w]]
        if ud.size >= m:
            out["dry_shift"][i] = ud.mean() - d0
        if uw.size >= m:
            out["wet_sag"][i] = w0 - uw.mean()
        if ud.size >= m and uw.size >= m:
            out["separation"][i] = np.sqrt(2) * (uw.mean() - ud.mean()) / np.sqrt(ud.var() + uw.var())
        nd = at_wet[w].sum() + between[w].sum()
        if nd >= m:
            out["between_share"][i] = held[w].sum() / nd
        rw = ok[w] & (ref[w] == 1)
        if rw.sum() >= m:
            out["mismatch_share"][i] = (rw & ~at_wet[w]).sum() / rw.sum()
    out["flagged"] = ((out["between_share"] >= EVIDENCE_SHARE) | (out["mismatch_share"] >= EVIDENCE_SHARE)
                      | (out["wet_sag"] >= 0.05) | (out["dry_shift"] >= 0.05))
    return out


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_window_measures_equal_a_loop_over_windows(seed):
    # irregular times (steps 5 to 15 min), missing readings, a sagging stretch, a random reference
    rng = np.random.default_rng(seed)
    n = 700
    t = np.cumsum(rng.integers(300, 900, n)).astype(np.int64) * 10**9
    wet = np.sin(np.arange(n) / 9.0) > 0
    x = 0.06 + 0.11 * wet + rng.normal(0, 0.004, n)
    x[300:420] = np.where(wet[300:420], 0.11 + rng.normal(0, 0.004, 120), x[300:420])
    x[rng.uniform(size=n) < 0.05] = np.nan
    ref = np.where(rng.uniform(size=n) < 0.1, 2, wet.astype(np.int8)).astype(np.int8)
    window_ns, m = 8 * 3600 * 10**9, 4
    h = probe_health(t, x, dry_level=0.06, wet_level=0.17, reference_state=ref, window_s=8 * 3600.0,
                     min_samples=m, min_between_s=1800.0, min_period_s=3600.0)
    bf = brute_force(t, x, ref, dry=0.06, wet=0.17, window_ns=window_ns, b=0.2, min_between_ns=1800 * 10**9, m=m)
    got = h.measures
    assert np.array_equal(got.n, bf["n"])
    for name in ("dry_shift", "wet_sag", "between_share", "mismatch_share", "separation"):
        np.testing.assert_allclose(getattr(got, name), bf[name], rtol=1e-9, atol=1e-12, equal_nan=True,
                                   err_msg=name)
    flagged = bf["flagged"]
    assert flagged.any() and not flagged.all()       # the case exercises both verdicts
    expected = brute_force_periods(t, flagged, merge_ns=window_ns // 2, min_ns=3600 * 10**9)
    assert expected                                   # and reports at least one period
    assert [(int(p.start.astype(np.int64)), int(p.end.astype(np.int64))) for p in h.periods] == expected
    mask = np.zeros(n, bool)
    for a, b in expected:
        mask |= (t >= a) & (t <= b)
    assert np.array_equal(h.unreliable, mask)


def brute_force_periods(t, flagged, *, merge_ns, min_ns):
    """Runs of flagged samples walked one by one: merged when closer than merge_ns, kept if >= min_ns long."""
    runs, i, n = [], 0, flagged.size
    while i < n:
        if flagged[i]:
            j = i
            while j + 1 < n and flagged[j + 1]:
                j += 1
            if runs and t[i] - runs[-1][1] < merge_ns:
                runs[-1] = (runs[-1][0], int(t[j]))
            else:
                runs.append((int(t[i]), int(t[j])))
            i = j + 1
        else:
            i += 1
    return [(a, b) for a, b in runs if b - a >= min_ns]
