"""The register's pressure settings: vented loggers, the barometer and its gap, and their errors."""

import pytest

from qcpipe.config import load_register
from qcpipe.errors import ConfigError

from .test_error_messages import REGISTER, load

PRESSURE = REGISTER.replace('kind = "immersion_probe"', 'kind = "pressure"').replace(
    'probe_reference = { air = 400.0, water = 1200.0 }', 'pressure = { salinity = 34.0 }')


def test_defaults_and_durations(tmp_path):
    reg, _ = load(tmp_path, load_register, PRESSURE, "reg.toml")
    p = reg.deployment[0].pressure
    assert (p.vented, p.use_barometer, p.air_pressure_hpa, p.barometer_max_gap) == (False, True, 1013.25, 7200.0)
    assert p.uses_barometer
    text = PRESSURE.replace("salinity = 34.0", 'salinity = 34.0, barometer_max_gap = "90 min"')
    assert load(tmp_path, load_register, text, "reg.toml")[0].deployment[0].pressure.barometer_max_gap == 5400.0
    vented = load(tmp_path, load_register, PRESSURE.replace("salinity = 34.0", "vented = true"), "reg.toml")[0]
    assert vented.deployment[0].pressure.vented and not vented.deployment[0].pressure.uses_barometer


def test_barometer_kind_is_an_instrument_kind(tmp_path):
    text = REGISTER.replace('kind = "immersion_probe"', 'kind = "barometer"').replace(
        'probe_reference = { air = 400.0, water = 1200.0 }\n', '')
    assert load(tmp_path, load_register, text, "reg.toml")[0].instrument[0].kind == "barometer"


@pytest.mark.parametrize("new, key, words", [
    ("vented = true, air_pressure_hpa = 1010.0", "deployment[0] (id 'd1').pressure", "remove air_pressure_hpa"),
    ('barometer_max_gap = 90', "deployment[0] (id 'd1').pressure.barometer_max_gap", "'2 h'"),
    ('barometer_max_gap = "0 min"', "deployment[0] (id 'd1').pressure.barometer_max_gap", "longer than zero"),
    ('barometer_max_gap = "2 weeks"', "deployment[0] (id 'd1').pressure.barometer_max_gap", "cannot read"),
    ("air_pressure_hpa = 101325.0", "deployment[0] (id 'd1').pressure.air_pressure_hpa", "less than 1100"),
], ids=["vented-with-constant", "number-gap", "zero-gap", "unknown-unit", "pa-not-hpa"])
def test_pressure_errors_are_one_line(tmp_path, new, key, words):
    with pytest.raises(ConfigError) as info:
        load(tmp_path, load_register, PRESSURE.replace("salinity = 34.0", new), "reg.toml")
    msg = str(info.value)
    assert msg.startswith(f"{tmp_path / 'reg.toml'}: key {key}:"), msg
    assert words in msg and "\n" not in msg


def test_pressure_table_only_on_pressure_loggers(tmp_path):
    text = REGISTER.replace('probe_reference = { air = 400.0, water = 1200.0 }',
                            'probe_reference = { air = 400.0, water = 1200.0 }\npressure = { salinity = 34.0 }')
    with pytest.raises(ConfigError) as info:
        load(tmp_path, load_register, text, "reg.toml")
    assert "the pressure table is only for pressure loggers" in str(info.value)
    assert "remove it" in str(info.value) and "\n" not in str(info.value)
