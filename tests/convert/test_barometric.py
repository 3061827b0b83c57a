"""Air pressure for water level: the barometer interpolated to the level logger, vented loggers, and
what a wrong air pressure does to the level (TEOS-10 through gsw as the outside reference)."""

from __future__ import annotations

from types import SimpleNamespace

import gsw
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.config.register import PressureSettings
from qcpipe.convert.by_kind import AIR_FROM_BAROMETER, AIR_FROM_CONSTANT, BarometerSeries, physical_from_raw
from qcpipe.convert.sensors import air_pressure_at

T0 = np.datetime64("2026-10-01T00:00:00", "ns")
LAT, LON = 48.24, -20.52


def at_s(*seconds) -> np.ndarray:
    return T0 + (np.asarray(seconds, dtype=np.float64) * 1e9).astype("timedelta64[ns]")


# --- interpolation, hand-worked --------------------------------------------------------------

def test_linear_between_samples_and_exact_at_samples():
    # samples 0 s: 1000 hPa, 600 s: 1010 hPa, 1200 s: 1040 hPa (in Pa)
    bt, bp = at_s(0, 600, 1200), np.array([100000.0, 101000.0, 104000.0])
    got = air_pressure_at(at_s(0, 150, 300, 600, 900, 1200), bt, bp, max_gap_s=3600.0)
    # 150 s: 100000 + 1000 * 150/600 = 100250; 300 s: 100500; 900 s: 101000 + 3000 / 2 = 102500
    np.testing.assert_allclose(got, [100000.0, 100250.0, 100500.0, 101000.0, 102500.0, 104000.0])


def test_no_extrapolation_outside_the_record():
    bt, bp = at_s(600, 1200), np.array([100000.0, 100600.0])
    got = air_pressure_at(at_s(0, 599, 600, 1200, 1201, 5000), bt, bp, max_gap_s=3600.0)
    assert np.isnan(got[[0, 1, 4, 5]]).all()
    np.testing.assert_array_equal(got[[2, 3]], [100000.0, 100600.0])


def test_no_value_across_a_gap_longer_than_allowed():
    # steps of 600 s, then 3600 s: with max_gap 1800 s nothing inside the long step, but both ends keep
    # their own values; a step equal to max_gap is still interpolated
    bt, bp = at_s(0, 600, 4200), np.array([100000.0, 100100.0, 100700.0])
    got = air_pressure_at(at_s(300, 601, 2400, 4199, 4200), bt, bp, max_gap_s=1800.0)
    assert got[0] == pytest.approx(100050.0)
    assert np.isnan(got[1:4]).all()
    assert got[4] == 100700.0
    got = air_pressure_at(at_s(2400), bt, bp, max_gap_s=3600.0)
    assert got[0] == pytest.approx(100100.0 + 600.0 * 1800.0 / 3600.0)   # 100400


def test_missing_barometer_values_are_gaps():
    # 600 s is missing: 0 -> 1200 s is one step of 1200 s
    bt, bp = at_s(0, 600, 1200), np.array([100000.0, np.nan, 100400.0])
    assert np.isnan(air_pressure_at(at_s(300), bt, bp, max_gap_s=900.0)).all()
    assert air_pressure_at(at_s(300), bt, bp, max_gap_s=1200.0)[0] == pytest.approx(100100.0)


def test_unsorted_and_repeated_barometer_samples():
    bt, bp = at_s(1200, 0, 0, 600), np.array([100400.0, 100000.0, 99000.0, 100200.0])
    got = air_pressure_at(at_s(0, 900), bt, bp, max_gap_s=900.0)
    np.testing.assert_allclose(got, [100000.0, 100300.0])      # first of the repeated samples kept


def test_empty_barometer_and_bad_gap():
    assert np.isnan(air_pressure_at(at_s(0, 1), at_s(), np.array([]), max_gap_s=60.0)).all()
    for bad in (0.0, -1.0, float("nan"), float("inf")):
        with pytest.raises(ValueError, match="max_gap_s"):
            air_pressure_at(at_s(0), at_s(0), np.array([1.0]), max_gap_s=bad)


def _loop(times, bt, bp, max_gap_ns):
    """Plain-loop reference: the definition written out sample by sample."""
    pairs = sorted({int(t): float(p) for t, p in reversed(list(zip(bt, bp))) if np.isfinite(p)}.items())
    out = []
    for t in times:
        value = np.nan
        for k, (tk, pk) in enumerate(pairs):
            if tk == t:
                value = pk
                break
            if k + 1 < len(pairs) and tk < t < pairs[k + 1][0]:
                t1, p1 = pairs[k + 1]
                if t1 - tk <= max_gap_ns:
                    value = pk + (p1 - pk) * (t - tk) / (t1 - tk)
                break
        out.append(value)
    return np.array(out)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 100), st.one_of(st.floats(95000, 105000), st.just(np.nan))),
                max_size=15),
       st.lists(st.integers(-10, 110), max_size=30), st.integers(1, 40))
def test_matches_a_plain_loop(baro, times, gap):
    # first-kept rule for repeated times: the loop keeps the first finite sample of each time
    bt = np.array([b[0] for b in baro], dtype=np.int64) * 60_000_000_000
    bp = np.array([b[1] for b in baro], dtype=np.float64)
    t = np.array(times, dtype=np.int64) * 60_000_000_000
    got = air_pressure_at(t.astype("datetime64[ns]"), bt.astype("datetime64[ns]"), bp, max_gap_s=gap * 60.0)
    np.testing.assert_allclose(got, _loop(t, bt, bp, gap * 60_000_000_000), rtol=0, atol=1e-6)


# --- conversion by kind --------------------------------------------------------------------------

def _dep(**pressure):
    return SimpleNamespace(pressure=PressureSettings(**pressure) if pressure else None, ph_calibration=None)


STATION = SimpleNamespace(latitude=LAT, longitude=LON, elevation_m=-1.5)


def _level(pressure_pa, temperature, **settings):
    conv = physical_from_raw("pressure", {"pressure": np.asarray(pressure_pa, float),
                                          "temperature": np.asarray(temperature, float)},
                             {"pressure": "Pa", "temperature": "degC"}, deployment=_dep(**settings),
                             station=STATION, times=at_s(*range(0, 600 * len(pressure_pa), 600)))
    return conv


def _gsw_level(gauge_pa, t, salinity, z):
    """The hydrostatic level computed here directly with gsw (TEOS-10): z + p / (rho g)."""
    p_dbar = gauge_pa / 1.0e4
    sa = gsw.SA_from_SP(salinity, p_dbar, LON, LAT)
    rho = gsw.rho(sa, gsw.CT_from_t(sa, t, p_dbar), p_dbar)
    return z + gauge_pa / (rho * gsw.grav(LAT, 0.0))


def test_ten_hectopascal_error_in_air_pressure_is_about_99_mm():
    # Issue 14: every 10 hPa of air pressure not removed is about 99 mm of false level. Expected value
    # computed independently with TEOS-10 (gsw.rho, gsw.grav): 1000 Pa / (rho g) at S 34, 10 degC,
    # 3 dbar, 48.24 N.
    p = np.array([101325.0 + 30000.0])
    right = _level(p, [10.0], air_pressure_hpa=1013.25, salinity=34.0, use_barometer=False)
    wrong = _level(p, [10.0], air_pressure_hpa=1003.25, salinity=34.0, use_barometer=False)
    sa = gsw.SA_from_SP(34.0, 3.0, LON, LAT)
    rho = gsw.rho(sa, gsw.CT_from_t(sa, 10.0, 3.0), 3.0)
    expected = 1000.0 / (rho * gsw.grav(LAT, 0.0))
    error = wrong.variables["water_level"][0] - right.variables["water_level"][0]
    assert error == pytest.approx(expected, abs=2e-6)
    assert error == pytest.approx(0.099, abs=0.001)


def test_vented_logger_subtracts_nothing():
    gauge = np.array([0.0, 20000.0, 45000.0])            # Pa above the air
    conv = _level(gauge, [12.0, 12.0, 12.0], vented=True, salinity=34.0)
    np.testing.assert_allclose(conv.variables["water_level"], _gsw_level(gauge, 12.0, 34.0, -1.5), atol=1e-9)
    np.testing.assert_array_equal(conv.variables["pressure"], gauge)
    assert conv.air_pressure is None and not conv.barometer_used
    assert conv.attrs["pressure_sensor"] == "vented (gauge pressure)"
    assert conv.attrs["water_level_air_pressure_source"].startswith("none: vented")
    assert "water_level_air_pressure_pa" not in conv.attrs
    assert conv.meta["pressure"]["standard_name"] == "sea_water_pressure_due_to_sea_water"


def test_absolute_logger_subtracts_the_barometer_and_falls_back_to_the_constant():
    # five samples 600 s apart; barometer at 0, 1200 and 2400 s missing: the last two level samples
    # (1800 s inside a gap of 2400 s > 1800 s allowed; 2400 s after the record) take the constant
    air = np.array([100000.0, 101000.0])
    baro = BarometerSeries(at_s(0, 1200), air, "b1 (v001)")
    gauge = np.array([10000.0, 20000.0, 30000.0, 40000.0, 50000.0])
    air_used = np.array([100000.0, 100500.0, 101000.0, 101325.0, 101325.0])
    conv = _level(gauge + air_used, [10.0] * 5, salinity=34.0, barometer_max_gap="30 min")
    assert not conv.barometer_used                       # no barometer given: the constant, unflagged
    conv = physical_from_raw("pressure", {"pressure": gauge + air_used, "temperature": np.full(5, 10.0)},
                             {"pressure": "Pa", "temperature": "degC"},
                             deployment=_dep(salinity=34.0, barometer_max_gap="30 min"), station=STATION,
                             times=at_s(0, 600, 1200, 1800, 2400), barometer=baro)
    np.testing.assert_allclose(conv.air_pressure, air_used)
    np.testing.assert_array_equal(conv.air_pressure_source, [AIR_FROM_BAROMETER] * 3 + [AIR_FROM_CONSTANT] * 2)
    np.testing.assert_allclose(conv.variables["water_level"], _gsw_level(gauge, 10.0, 34.0, -1.5), atol=1e-9)
    assert conv.attrs["water_level_air_pressure_from_barometer"] == 3
    assert conv.attrs["water_level_air_pressure_from_constant"] == 2
    assert conv.attrs["water_level_air_pressure_constant_ranges"] == \
        "2026-10-01T00:30:00Z/2026-10-01T00:40:00Z (2 samples)"
    assert "b1 (v001)" in conv.attrs["water_level_air_pressure_source"]


def test_use_barometer_false_ignores_the_barometer():
    baro = BarometerSeries(at_s(0, 600), np.array([99000.0, 99000.0]), "b1 (v001)")
    conv = physical_from_raw("pressure", {"pressure": np.array([111325.0, 111325.0])}, {"pressure": "Pa"},
                             deployment=_dep(use_barometer=False), station=STATION, times=at_s(0, 600),
                             barometer=baro)
    np.testing.assert_array_equal(conv.air_pressure, [101325.0, 101325.0])
    assert conv.air_pressure_source is None and not conv.barometer_used


def test_barometer_kind_stores_pascal():
    # 1 hPa = 100 Pa (NIST SP 811, Appendix B.8: 1 mbar = 100 Pa)
    conv = physical_from_raw("barometer", {"air_pressure": np.array([1013.25, 980.6])}, {"air_pressure": "hPa"},
                             deployment=_dep(), station=STATION)
    np.testing.assert_allclose(conv.variables["air_pressure"], [101325.0, 98060.0])
    assert "water_level" not in conv.variables


def test_barometer_without_sample_times_is_refused():
    baro = BarometerSeries(at_s(0), np.array([100000.0]), "b1 (v001)")
    with pytest.raises(ValueError, match="times are needed"):
        physical_from_raw("pressure", {"pressure": np.array([110000.0])}, {"pressure": "Pa"},
                          deployment=_dep(), station=STATION, barometer=baro)
