"""Raw units through the units library (pint), checked against UDUNITS-2 and NIST SP 811."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qcpipe.units import UnitError, check_raw_unit, same_unit, stored_unit, to_stored_units

cfunits = pytest.importorskip("cfunits")

#: raw units a logger export writes, in the spellings teams use; every one is compared with UDUNITS-2
RAW_UNITS = ["degC", "degF", "K", "Pa", "hPa", "mbar", "kPa", "bar", "dbar", "psi", "inHg", "S/m", "S m-1",
             "mS/cm", "mS cm-1", "uS/cm", "uS cm-1", "V", "mV", "pF", "nF", "1", "percent"]


@pytest.mark.parametrize("raw", RAW_UNITS)
def test_conversions_agree_with_udunits(raw):
    # UDUNITS-2 (through cfunits, the CF checker's units library) is the outside reference:
    # a second, independent implementation of the same unit definitions
    values = np.array([-40.0, 0.0, 1.0, 12.5, 1013.25, 5.0e4])
    expected = cfunits.Units.conform(values, cfunits.Units(raw), cfunits.Units(stored_unit(raw)))
    np.testing.assert_allclose(to_stored_units(values, raw), expected, rtol=1e-12, atol=1e-9)


@pytest.mark.parametrize("value, unit, expected", [
    (32.0, "degF", 0.0), (212.0, "degF", 100.0), (-40.0, "degF", -40.0),  # definition of the Fahrenheit scale
    (273.15, "K", 0.0),                                                    # definition of the Celsius scale
    (1.0, "psi", 6894.757), (1.0, "inHg", 3386.389),                       # NIST SP 811 (2008) Appendix B.8
    (1.0, "mbar", 100.0), (1.0, "dbar", 1.0e4),                            # SI prefixes of the bar (NIST SP 811)
    (1.0, "mS/cm", 0.1), (50000.0, "uS/cm", 5.0),                          # 1 S m-1 = 10 mS cm-1 (SI prefixes)
])
def test_handbook_values(value, unit, expected):
    assert to_stored_units(value, unit) == pytest.approx(expected, rel=1e-6)


@pytest.mark.parametrize("raw, stored", [
    ("degF", "degC"), ("hPa", "Pa"), ("mS/cm", "S m-1"), ("uS cm-1", "S m-1"), ("mV", "V"), ("nF", "pF"),
    ("count", "count"), ("counts", "count"), ("1", "1")])
def test_stored_units_are_cf_spellings(raw, stored):
    assert stored_unit(raw) == stored
    assert cfunits.Units(stored).isvalid        # a units string CF (UDUNITS-2) accepts


def test_unknown_and_incompatible_units_are_one_line_errors():
    with pytest.raises(UnitError, match="unknown unit 'blorps'"):
        stored_unit("blorps")
    with pytest.raises(UnitError, match="is not a temperature, pressure"):
        stored_unit("m s-2")                     # an acceleration: nothing qcpipe stores
    with pytest.raises(UnitError, match="'hPa' is a pressure, but this variable is a temperature") as info:
        check_raw_unit("hPa", stored="degC")
    assert "\n" not in str(info.value)
    assert check_raw_unit("psi", stored="Pa") == "psi"
    assert check_raw_unit("count", stored="1") == "count"   # a count is a plain number


@settings(max_examples=50, deadline=None)
@given(st.floats(-1e6, 1e6), st.sampled_from(RAW_UNITS))
def test_affine_on_any_value(x, raw):
    # any value converts as UDUNITS-2 converts it (the cached affine factors lose nothing)
    got = to_stored_units(np.array([x]), raw)[0]
    ref = cfunits.Units.conform(np.array([x]), cfunits.Units(raw), cfunits.Units(stored_unit(raw)))[0]
    assert got == pytest.approx(ref, rel=1e-10, abs=1e-7)


@pytest.mark.parametrize("a, b, same", [
    ("mS/cm", "mS cm-1", True), ("hPa", "mbar", True), ("\u00b0C", "degC", True),  # SI: 1 hPa = 1 mbar
    ("hPa", "kPa", False), ("degF", "degC", False), ("deg C", "degC", False), ("blorps", "blorps", True)])
def test_same_unit(a, b, same):
    # a header's unit text against a layout's (README "Logger layouts", units_from)
    assert same_unit(a, b) is same
