"""Tests for qcpipe.tide.datums.

Outside references: the analytical datums of a pure M2 cosine (MHW = Z0 + A,
MLW = Z0 - A, MHHW = MHW and MLLW = MLW for a pure semidiurnal tide, MSL = Z0)
under the definitions of NOAA (2000), Tidal Datums and Their Applications, NOS
CO-OPS 1 (from memory). Constituent speeds from Schureman (1958), from memory.
"""

import numpy as np
import pytest

from qcpipe.tide.datums import TidalDatums, tidal_datums
from qcpipe.tide.events import high_low_waters

S = 10**9
M2, K1, O1 = 28.9841042, 15.0410686, 13.9430356  # deg/h, Schureman 1958 (from memory)
A, Z0 = 1.2, 2.0
T0 = np.datetime64("2024-03-01T00:00:00", "ns").view(np.int64)
DAYS = 30


def m2(t_s):
    return Z0 + A * np.cos(np.deg2rad(M2) / 3600.0 * (t_s - 3600.0))


def mixed(t_s):
    w = np.deg2rad([M2, K1, O1]) / 3600.0
    return Z0 + 0.6 * np.cos(w[0] * t_s) + 0.4 * np.cos(w[1] * t_s - 0.5) + 0.3 * np.cos(w[2] * t_s - 0.2)


def ns(t_s):
    return T0 + (t_s * S).astype(np.int64)


@pytest.fixture(scope="module")
def m2_datums():
    t = np.arange(0, DAYS * 86400 + 1, 360.0)  # 6-min sampling, 30 days
    return tidal_datums(ns(t), m2(t))


def test_pure_m2_datums_are_analytical(m2_datums):
    d = m2_datums
    assert isinstance(d, TidalDatums)
    # 1 mm: the event fit is exact to about 0.02 mm (see high_low_waters Notes).
    assert d.mhw == pytest.approx(Z0 + A, abs=0.001)
    assert d.mlw == pytest.approx(Z0 - A, abs=0.001)
    assert d.mn == pytest.approx(2 * A, abs=0.001)
    assert d.mhhw == pytest.approx(d.mhw, abs=0.001)
    assert d.mllw == pytest.approx(d.mlw, abs=0.001)
    assert d.gt == pytest.approx(2 * A, abs=0.001)
    assert d.mtl == pytest.approx(Z0, abs=0.001)
    assert d.dtl == pytest.approx(Z0, abs=0.001)


def test_pure_m2_msl_is_the_mean_level(m2_datums):
    # The mean of K hourly samples of A cos(omega k h + phi) is bounded by
    # A / (K sin(omega h / 2)) (geometric sum of the phasors); K = 720 + 1
    # hourly heights in 30 days gives 6.6 mm for A = 1.2 m.
    k = DAYS * 24 + 1
    bound = A / (k * np.sin(np.deg2rad(M2) / 2))
    assert m2_datums.n_hourly_heights == k
    assert abs(m2_datums.msl - Z0) <= bound


def test_record_length_and_note(m2_datums):
    assert m2_datums.record_length_days == pytest.approx(DAYS, abs=1e-9)
    assert "30.00 days" in m2_datums.note
    assert "19-year" in m2_datums.note
    assert "approximate" in m2_datums.note
    # 30 days / 12.4206 h = 57.97 cycles: 58 high waters, 58 low waters, give or
    # take the one at each end.
    assert abs(m2_datums.n_high_waters - 58) <= 1
    assert abs(m2_datums.n_low_waters - 58) <= 1


def test_mixed_tide_has_a_diurnal_inequality():
    t = np.arange(0, DAYS * 86400, 360.0)
    d = tidal_datums(ns(t), mixed(t))
    assert d.mhhw > d.mhw + 0.05
    assert d.mllw < d.mlw - 0.05
    assert d.gt > d.mn
    assert d.dtl == pytest.approx((d.mhhw + d.mllw) / 2)
    assert d.mtl == pytest.approx((d.mhw + d.mlw) / 2)


def test_given_events_are_used():
    t = np.arange(0, 10 * 86400, 360.0)
    h = m2(t)
    ev = high_low_waters(ns(t), h)
    shifted = type(ev)(ev.time, ev.height + 1.0, ev.kind)
    d = tidal_datums(ns(t), h, shifted)
    assert d.mhw == pytest.approx(Z0 + A + 1.0, abs=0.001)


def test_msl_skips_hours_in_gaps():
    # M2 at 10-min sampling for 2 days with NaN strictly between 6 h and 12 h:
    # the hourly heights inside that gap must not be interpolated across it.
    t = np.arange(0, 2 * 86400 + 1, 600.0)
    h = m2(t)
    gap = (t > 6 * 3600) & (t < 12 * 3600)
    h[gap] = np.nan
    d = tidal_datums(ns(t), h)
    # Whole hours in [0, 48 h] = 49, minus those strictly inside the gap: the
    # hours 7..11 h (5 hours; 6 h and 12 h are samples).
    assert d.n_hourly_heights == 49 - 5


def test_no_events_is_an_error():
    t = np.arange(0, 86400, 600.0)
    with pytest.raises(ValueError, match="holds 0 high and 0 low waters; datums need"):
        tidal_datums(ns(t), np.full(t.size, 1.5))


# ---------------------------------------------------------------- any form factor
# Reference: tests/tide/brute_tide.py (events from the analytical derivative by
# brentq and the minimum-height rule by a plain loop; datums by loops over tidal
# days of 24.8412 h, NOAA 2000 definitions, from memory).

FORM_FACTORS = [0.1, 0.5, 0.9, 1.2, 2.0, 4.0, float("inf")]


@pytest.mark.parametrize("form_factor", FORM_FACTORS, ids=lambda f: f"F={f:g}")
def test_datums_at_every_form_factor_match_brute_force(form_factor):
    # 32 days at 6-min sampling; tidal days from 3.1 h (1/8 tidal day) before the
    # first high or low water, in both; MHW, MLW, MHHW, MLLW within 5 mm (issue 13)
    from tests.tide.brute_tide import TIDAL_DAY_S, brute_datums, brute_events, constituents_for_form_factor, level

    amps = constituents_for_form_factor(form_factor)
    t = np.arange(0, 32 * 86400 + 1, 360.0)
    d = tidal_datums(ns(t), level(amps, t))
    bt, bh, bhigh = brute_events(amps, t[0], t[-1])
    ref = brute_datums(bt, bh, bhigh, bt[0] - TIDAL_DAY_S / 8)
    assert (d.tidal_day_origin.astype("datetime64[ns]").view(np.int64) - T0) / S == pytest.approx(
        bt[0] - TIDAL_DAY_S / 8, abs=300)
    for key in ("mhw", "mlw", "mhhw", "mllw"):
        assert getattr(d, key) == pytest.approx(ref[key], abs=0.005), key
    assert d.n_high_waters == int(bhigh.sum()) and d.n_low_waters == int((~bhigh).sum())


@pytest.mark.parametrize("form_factor", [0.9, 2.0], ids=lambda f: f"F={f:g}")
def test_tidal_day_origin_is_used_and_stated(form_factor):
    # The same brute-force comparison with origins through a tidal day (every
    # 3 h); the note names the origin. Moving it moves MHHW by centimetres on a
    # month-long record (stated in tidal_datums' Notes: up to about 5 cm for these
    # 1-m tides): here by more than 5 mm and less than 6 cm.
    from tests.tide.brute_tide import brute_datums, brute_events, constituents_for_form_factor, level

    amps = constituents_for_form_factor(form_factor)
    t = np.arange(0, 32 * 86400 + 1, 360.0)
    h = level(amps, t)
    ev = high_low_waters(ns(t), h)
    bt, bh, bhigh = brute_events(amps, t[0], t[-1])
    mhhw = []
    for hours in np.arange(0.0, 24.0, 3.0):
        d = tidal_datums(ns(t), h, ev, tidal_day_origin=np.datetime64(int(ns(np.array([hours * 3600]))[0]), "ns"))
        ref = brute_datums(bt, bh, bhigh, hours * 3600)
        assert d.mhhw == pytest.approx(ref["mhhw"], abs=0.005)
        assert d.mllw == pytest.approx(ref["mllw"], abs=0.005)
        assert f"from {np.datetime64(int(ns(np.array([hours * 3600]))[0]), 'ns').astype('datetime64[s]')}Z" in d.note
        mhhw.append(d.mhhw)
    assert 0.005 < np.ptp(mhhw) < 0.06
