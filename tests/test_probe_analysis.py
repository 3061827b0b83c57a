"""Tests for qcpipe.probe_analysis: the whole-record verdict and the fouled/buried periods wired in.

Check values: the synthetic records' truth (tests/tide/probe_records.py: invented data, each
fault's start and end set by construction), a tolerance of one mean tidal day (24.8412 h,
Schureman 1958, from memory), and the IOC flag values 1 pass, 3 suspect, 4 fail (IOC 2013).
"""

from __future__ import annotations

import numpy as np
import pytest

from qcpipe.config.rules import ImmersionSettings, TideTiming
from qcpipe.pipeline.deployment import probe_notices
from qcpipe.probe_analysis import analyse_probe, state_at_clock_corrected_times
from qcpipe.tide.classify import classify_immersion
from tests.tide.probe_records import TIDAL_DAY_S, day, probe_record, seconds_between, stuck_record

PASS, SUSPECT, FAIL = 1, 3, 4       # IOC (2013) primary flags


def analyse(rec, reference_state=None):
    return analyse_probe(rec.times, rec.readings, probe_reference=None, elevation_m=rec.elevation,
                         settings=ImmersionSettings(), timing_rules=TideTiming(), tide=None,
                         reference_state=reference_state)


@pytest.mark.parametrize("with_reference", [False, True], ids=["readings-only", "with-reference"])
def test_fouled_period_fails_its_samples_keeps_the_state_and_is_a_notice(with_reference):
    rec = probe_record("semidiurnal", 0.4, seed=21, fouled=(9, 12))
    a = analyse(rec, rec.reference_state() if with_reference else None)
    assert [f for f, _ in a.findings] == ["unreliable_period"]
    (p,) = a.periods
    assert p.kind == "fouled"
    assert seconds_between(p.start, day(9)) <= TIDAL_DAY_S and seconds_between(p.end, day(12)) <= TIDAL_DAY_S
    inside = (rec.times >= p.start) & (rec.times <= p.end)
    assert np.array_equal(a.unreliable, inside)
    assert np.array_equal(a.quality, np.where(inside, FAIL, PASS))
    # the state stays as the whole-record threshold classes it (fouled samples read dry)
    again = classify_immersion(rec.times, rec.readings, threshold=a.threshold,
                               hysteresis=a.attrs["immersion_hysteresis"], min_state_s=600.0)
    assert np.array_equal(a.state, again)
    (notice,) = probe_notices(a, "st-x", "dep-x")
    assert notice.kind == "fouling" and notice.station == "st-x"
    for t in (p.start, p.end):
        assert np.datetime_as_string(t, unit="m").replace("T", " ") in notice.text
    assert "fouled" in notice.text and "fail" in notice.text
    assert a.attrs["immersion_unreliable_periods"].endswith("fouled")


def test_burial_seen_in_the_readings_only_is_suspect():
    rec = probe_record("diurnal", 0.4, seed=22, buried=(14, 21))
    a = analyse(rec)
    (p,) = a.periods
    assert p.kind == "buried" and not p.strong
    inside = (rec.times >= p.start) & (rec.times <= p.end)
    assert np.array_equal(a.quality, np.where(inside, SUSPECT, PASS))


@pytest.mark.parametrize("wet_fraction", [0.01, 0.005], ids=["wet-1%", "wet-0.5%"])
@pytest.mark.parametrize("tide", ["semidiurnal", "diurnal"])
def test_healthy_probe_wet_rarely_passes_whole(tide, wet_fraction):
    rec = probe_record(tide, wet_fraction, seed=23)
    for ref in (None, rec.reference_state()):
        a = analyse(rec, ref)
        assert a.findings == []                       # neither not_bimodal nor one_state_rare nor a period
        assert (a.quality == PASS).all() and not a.unreliable.any()
        assert a.separation > ImmersionSettings().min_separation


@pytest.mark.parametrize("height", ["water", "random"])
def test_stuck_probe_with_rare_spikes_is_unreliable(height):
    rec = stuck_record(seed=24, n_spikes=8, spike_height=height)
    a = analyse(rec)
    assert [f for f, _ in a.findings] == ["one_state_rare"]
    assert a.findings[0][1] == {"state": "wet", "held": 0, "minimum": 6}
    assert a.unreliable.all() and (a.quality == SUSPECT).all()
    assert a.health is None and a.periods == []
    (notice,) = probe_notices(a, "st-x", "dep-x")
    assert notice.kind == "fouling" and "stuck" in notice.text


def test_reference_state_of_the_wrong_length_is_refused():
    rec = probe_record("semidiurnal", 0.4, seed=25)
    with pytest.raises(ValueError, match="reference_state must have the shape"):
        analyse(rec, rec.reference_state()[:-1])


def test_expected_state_at_clock_corrected_times_by_hand():
    # 10-min samples; a logger 20 min late stamps at t what the water did at t - 20 min
    t = np.datetime64("2025-01-01T00:00", "ns") + np.arange(6) * np.timedelta64(10, "m")
    expected = np.array([0, 0, 1, 1, 1, 0], np.int8)
    got = state_at_clock_corrected_times(t, expected, 1200.0)
    assert got.tolist() == [2, 2, 0, 0, 1, 1]
    assert state_at_clock_corrected_times(t, expected, -600.0).tolist() == [0, 1, 1, 1, 0, 2]
