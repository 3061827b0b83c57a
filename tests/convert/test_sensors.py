"""Sensor conversions against published check values and hand-worked cases."""

import numpy as np
import pytest

from qcpipe.convert.sensors import (gravity_from_latitude, immersion_from_wetness,
                                    seawater_density_from_temperature, water_level_from_pressure,
                                    wetness_from_reading)
from qcpipe.units import seconds_from_duration


def test_density_matches_unesco_1983_check_value():
    # Check value of the 1980 equation of state (EOS-80): S = 40, T = 40 degC, p = 10000 dbar
    # gives rho = 1059.82037 kg m-3 (Fofonoff and Millard, 1983, UNESCO Technical Papers in
    # Marine Science 44; value from memory).  We compute with TEOS-10 (gsw), whose absolute
    # salinity and ITS-90 temperature scale differ slightly from EOS-80: tolerance 0.06 kg m-3.
    rho = seawater_density_from_temperature(40.0, salinity=40.0, sea_pressure_dbar=10000.0,
                                            latitude=0.0, longitude=0.0)
    assert rho == pytest.approx(1059.82037, abs=0.06)


def test_density_near_surface_typical_value():
    # Seawater at S = 35, 15 degC, surface: about 1025.97 kg m-3 (EOS-80 tables; from memory).
    rho = seawater_density_from_temperature(15.0, salinity=35.0, sea_pressure_dbar=0.0, latitude=0.0,
                                            longitude=0.0)
    assert rho == pytest.approx(1025.97, abs=0.03)


def test_gravity_at_45_degrees_is_normal_gravity():
    # Normal gravity at 45 deg latitude on the GRS80 ellipsoid is 9.806199 m s-2 (Moritz 1980,
    # Geodetic Reference System 1980; value from memory).
    assert gravity_from_latitude(45.0) == pytest.approx(9.806199, abs=2e-5)


def test_water_level_hydrostatic_hand_worked():
    # 10 000 Pa above air pressure, rho 1025, g 9.81: 10000 / (1025 * 9.81) = 0.99450 m above
    # a sensor at -1.5 m: level -0.50550 m (hand-worked).
    h = water_level_from_pressure(np.array([101325.0 + 10000.0]), air_pressure_pa=101325.0, density=1025.0,
                                  gravity=9.81, sensor_elevation_m=-1.5)
    assert h[0] == pytest.approx(-0.50550, abs=1e-5)


def test_wetness_from_reading_between_references():
    w = wetness_from_reading(np.array([400.0, 800.0, 1200.0, 1500.0, 100.0, np.nan]), air=400.0, water=1200.0)
    np.testing.assert_allclose(w[:5], [0.0, 0.5, 1.0, 1.0, 0.0])
    assert np.isnan(w[5])


def test_wetness_works_for_falling_readings():
    # some probes read lower when wet (e.g. a frequency output); the formula holds either way
    w = wetness_from_reading(np.array([5.0, 3.0, 1.0]), air=5.0, water=1.0)
    np.testing.assert_allclose(w, [0.0, 0.5, 1.0])


def test_parallel_plate_probe_classified():
    # Trade fact (common practice, no source): a small parallel-plate probe reads about 0.06 nF in
    # air and about 0.17 nF in water.  Readings near those values classify as dry and wet.
    w = wetness_from_reading(np.array([0.061, 0.168, 0.059, 0.171]), air=0.06, water=0.17)
    np.testing.assert_array_equal(immersion_from_wetness(w), [0, 1, 0, 1])


def test_immersion_unknown_where_missing():
    np.testing.assert_array_equal(immersion_from_wetness(np.array([np.nan, 0.49, 0.5])), [2, 0, 1])


@pytest.mark.parametrize("text, seconds", [("45 min", 2700.0), ("2 h", 7200.0), ("1.5 d", 129600.0),
                                           ("30 s", 30.0), ("10 minutes", 600.0)])
def test_durations(text, seconds):
    assert seconds_from_duration(text) == seconds


@pytest.mark.parametrize("bad", ["45", "min", "-3 min", "3 weeks", 45])
def test_bad_durations(bad):
    with pytest.raises(ValueError, match="duration"):
        seconds_from_duration(bad)


# --- pH from electrode millivolts -------------------------------------------------

from qcpipe.convert.sensors import nernst_slope_mv, ph_calibration_from_buffers, ph_from_millivolts  # noqa: E402


def test_nernst_slope_at_25_c():
    # 59.16 mV per pH unit at 25 degC: the textbook Nernst slope (IUPAC, Buck et al. 2002; from memory)
    assert nernst_slope_mv(25.0) == pytest.approx(-59.16, abs=0.01)
    # proportional to absolute temperature: 0 degC gives 59.16 * 273.15 / 298.15 = 54.20 (hand-worked)
    assert nernst_slope_mv(0.0) == pytest.approx(-54.20, abs=0.01)


def test_ideal_electrode_two_point_calibration():
    # ideal electrode, zero potential at pH 7: E = -59.16 * (pH - 7) at 25 degC (hand-worked)
    buffers = [(7.0, 0.0, 25.0), (4.0, 177.48, 25.0)]
    a, b = ph_calibration_from_buffers(buffers)
    assert b == pytest.approx(1.0, abs=1e-3) and -a / b == pytest.approx(7.0, abs=1e-3)
    assert ph_from_millivolts(-59.16, 25.0, buffers=buffers) == pytest.approx(8.0, abs=1e-3)


def test_temperature_compensation_of_slope():
    # same electrode at 10 degC: slope 59.16 * 283.15 / 298.15 = 56.18 mV/pH, so -56.18 mV is pH 8
    buffers = [(7.0, 0.0, 25.0), (10.0, -177.48, 25.0)]
    assert ph_from_millivolts(-56.18, 10.0, buffers=buffers) == pytest.approx(8.0, abs=2e-3)


def test_three_point_calibration_with_imperfect_slope():
    # 97 % efficiency, offset +10 mV at 20 degC: E = 10 + 0.97 * S(20) * (pH - 7) (constructed by hand)
    s20 = -59.16 * 293.15 / 298.15
    buffers = [(ph, 10 + 0.97 * s20 * (ph - 7), 20.0) for ph in (4.0, 7.0, 10.0)]
    _, b = ph_calibration_from_buffers(buffers)
    assert b == pytest.approx(0.97, abs=1e-3)
    assert ph_from_millivolts(10 + 0.97 * s20 * 1.1, 20.0, buffers=buffers) == pytest.approx(8.1, abs=2e-3)


def test_calibration_errors():
    with pytest.raises(ValueError, match="span at least 1 pH"):
        ph_calibration_from_buffers([(7.0, 0.0, 25.0), (7.5, -30.0, 25.0)])
    with pytest.raises(ValueError, match="2 to 5 rows"):
        ph_calibration_from_buffers([(7.0, 0.0, 25.0)])


def test_ph_sonde_logging_millivolts_is_converted():
    from types import SimpleNamespace

    from qcpipe.config.register import PhCalibration
    from qcpipe.convert.by_kind import physical_from_raw

    cal = PhCalibration(buffers=[(7.0, 0.0, 25.0), (4.0, 177.48, 25.0)])
    dep = SimpleNamespace(ph_calibration=cal, probe_reference=None, pressure=None)
    out = physical_from_raw("ph", {"ph_mv": np.array([-59.16, 0.0]), "temperature": np.array([25.0, 25.0])},
                            {"ph_mv": "mV", "temperature": "degC"}, deployment=dep, station=None)
    np.testing.assert_allclose(out.variables["ph"], [8.0, 7.0], atol=1e-3)   # hand-worked above


def test_density_matches_teos10_check_values():
    # TEOS-10 GSW check values (gsw_cv_v3_0.npz, shipped with PyPI gsw in gsw/tests): the check
    # cast's practical salinity, in-situ temperature and pressure give the published rho through
    # SA_from_SP and CT_from_t.  The toolbox's own tolerance for rho is of order 1e-10 kg m-3.
    from pathlib import Path

    import gsw

    cv_file = Path(gsw.__file__).parent / "tests" / "gsw_cv_v3_0.npz"
    if not cv_file.exists():
        pytest.skip("this gsw build does not ship its check-value file")
    cv = np.load(cv_file)
    rho = seawater_density_from_temperature(cv["t_chck_cast"], salinity=cv["SP_chck_cast"],
                                            sea_pressure_dbar=cv["p_chck_cast"], latitude=cv["lat_chck_cast"],
                                            longitude=cv["long_chck_cast"])
    ok = np.isfinite(cv["rho"])
    assert ok.sum() >= 90         # three casts, 98 valid levels in v3.0
    np.testing.assert_allclose(rho[ok], cv["rho"][ok], rtol=0, atol=1e-8)
