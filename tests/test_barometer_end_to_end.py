"""End to end: a small workspace with a barometer, an absolute level logger and a vented one, through
ONE nightly run (the sequence ``qcpipe process`` runs, without the orchestrator:
``tests.conftest.run_sequence``); the archived water levels are checked against levels computed here
directly from TEOS-10 (gsw) and the hand-written air pressure of the barometer."""

from __future__ import annotations

import gsw
import numpy as np
import pytest
import xarray as xr

from qcpipe import lineage, pipeline
from tests.conftest import cf_check, run_sequence

LAT, LON = 50.1, -4.2
SALINITY = 33.0
TEMP_C = 12.0
CONSTANT_HPA = 1010.0
START = np.datetime64("2026-03-01T00:00:00", "ns")
MIN = np.timedelta64(60_000_000_000, "ns")
#: level loggers every 10 min from 00:05 to 23:55; the barometer hourly from 01:00 to 22:00, hours 10-12
#: missing (a 4 h step, longer than the default barometer_max_gap of 2 h), 700 hPa at 05:00 (fails its
#: gross range test and is interpolated across: 04:00 to 06:00 is 2 h, not longer than allowed)
LEVEL_T = START + MIN * np.arange(5, 24 * 60, 10)
BARO_H = np.array([h for h in range(1, 23) if h not in (10, 11, 12)])
BARO_T = START + MIN * 60 * BARO_H


def air_line_pa(t) -> np.ndarray:
    """The air pressure the barometer saw: 1000 hPa at midnight, rising 0.5 hPa per hour (Pa)."""
    hours = (np.asarray(t) - START) / np.timedelta64(3600, "s")
    return 100000.0 + 50.0 * hours


def gauge_pa(t, amplitude_pa, phase) -> np.ndarray:
    """Water above the sensor (Pa): a sinusoid with a 12.42 h period (the demo's own invention)."""
    hours = (np.asarray(t) - START) / np.timedelta64(3600, "s")
    return 30000.0 + amplitude_pa * np.sin(2 * np.pi * hours / 12.42 + phase)


def gsw_level(gauge, z) -> np.ndarray:
    """Hydrostatic level z + p / (rho g), density and gravity from TEOS-10 (gsw) computed here."""
    p_dbar = gauge / 1.0e4
    sa = gsw.SA_from_SP(SALINITY, p_dbar, LON, LAT)
    rho = gsw.rho(sa, gsw.CT_from_t(sa, TEMP_C, p_dbar), p_dbar)
    return z + gauge / (rho * gsw.grav(LAT, 0.0))


#: (station, elevation_m, serial, kind, layout, deployment, pressure table or "")
ENTRIES = [
    ("hut", 5.0, "B-1", "barometer", "air", "hut-baro", ""),
    ("pile", -2.0, "A-1", "pressure", "level", "pile-absolute",
     f"pressure = {{ air_pressure_hpa = {CONSTANT_HPA}, salinity = {SALINITY} }}"),
    ("ladder", -1.0, "V-1", "pressure", "level", "ladder-vented", f"pressure = {{ vented = true, salinity = {SALINITY} }}"),
]


def _register() -> str:
    text = ['[register]\nname = "barometer test shore (invented)"\n'
            '[[site]]\nid = "bay"\nname = "Test bay"\nvertical_datum = "test datum"\n']
    for station, z, serial, kind, layout, dep, pressure in ENTRIES:
        text.append(f'[[station]]\nid = "{station}"\nsite = "bay"\nname = "{station}"\nlatitude = {LAT}\n'
                    f'longitude = {LON}\nelevation_m = {z}\n'
                    f'[[instrument]]\nserial = "{serial}"\nkind = "{kind}"\nlayout = "{layout}"\n'
                    f'[[deployment]]\nid = "{dep}"\nstation = "{station}"\ninstrument = "{serial}"\n'
                    f'start = 2026-03-01T00:00:00Z\nend = 2026-03-02T00:00:00Z\n{pressure}\n')
    return "".join(text)


LAYOUTS = """
[layout.air]
file_glob = "*_air.txt"
delimiter = ";"
header_lines = 0
column_names = true
time = { columns = ["when"], format = "%Y-%m-%d %H:%M" }
serial = { source = "filename", pattern = "^([A-Z]-[0-9]+)_air\\\\.txt$" }
variables = { air_pressure = { column = "mbar", units = "mbar" } }

[layout.level]
file_glob = "*_level.txt"
delimiter = ","
header_lines = 0
column_names = true
time = { columns = ["when"], format = "%Y-%m-%d %H:%M" }
serial = { source = "filename", pattern = "^([A-Z]-[0-9]+)_level\\\\.txt$" }
variables = { pressure = { column = "kpa", units = "kPa" }, temperature = { column = "degc", units = "degC" } }
"""

RULES = """
[rule_set]
name = "barometer-test"
[variable.air_pressure]
units = "Pa"
gross_range = { sensor_min = 80000.0, sensor_max = 110000.0 }
[variable.water_level]
units = "m"
gross_range = { sensor_min = -10.0, sensor_max = 10.0 }
"""


def _stamp(t) -> str:
    return np.datetime_as_string(t, unit="m").replace("T", " ")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    root = tmp_path_factory.mktemp("baro")
    (root / "inbox").mkdir()
    (root / "register.toml").write_text(_register())
    (root / "layouts.toml").write_text(LAYOUTS)
    (root / "rules.toml").write_text(RULES)
    (root / "workspace.toml").write_text('[paths]\nregister = "register.toml"\nlayouts = "layouts.toml"\n'
                                         'rules = "rules.toml"\ninbox = "inbox"\narchive = "archive"\n')
    baro_hpa = air_line_pa(BARO_T) / 100.0
    baro_hpa[BARO_H == 5] = 700.0
    (root / "inbox" / "B-1_air.txt").write_text(
        "when;mbar\n" + "".join(f"{_stamp(t)};{p:.2f}\n" for t, p in zip(BARO_T, baro_hpa)))
    absolute_kpa = (air_line_pa(LEVEL_T) + gauge_pa(LEVEL_T, 15000.0, 0.0)) / 1000.0
    vented_kpa = gauge_pa(LEVEL_T, 12000.0, 1.0) / 1000.0
    for serial, kpa in (("A-1", absolute_kpa), ("V-1", vented_kpa)):
        (root / "inbox" / f"{serial}_level.txt").write_text(
            "when,kpa,degc\n" + "".join(f"{_stamp(t)},{p:.4f},{TEMP_C:.2f}\n" for t, p in zip(LEVEL_T, kpa)))
    result = run_sequence("process", root / "workspace.toml")
    assert result.returncode == 0, result.stderr + result.stdout
    return root, result


def _dataset(root, deployment) -> xr.Dataset:
    (path,) = (root / "archive" / "datasets").rglob(f"*_{deployment}_v001.nc")
    with xr.open_dataset(path) as ds:
        return ds.load()


def _fell_back(t) -> np.ndarray:
    """Level times with no valid barometer value: before 01:00, after 22:00, strictly inside 09:00-13:00."""
    hours = (t - START) / np.timedelta64(3600, "s")
    return (hours < 1) | (hours > 22) | ((hours > 9) & (hours < 13))


def test_absolute_logger_subtracts_the_barometer_and_the_constant_elsewhere(run):
    root, _ = run
    ds = _dataset(root, "pile-absolute")
    t = ds["time"].values
    np.testing.assert_array_equal(t, LEVEL_T)
    fell = _fell_back(t)
    assert fell.sum() == 6 + 12 + 24             # 00:05-00:55, 22:05-23:55, 09:05-12:55 (10-min samples)
    # what the archive says was subtracted: the barometer's straight line (interpolation of a line is
    # exact, also across the failed 05:00 sample) or the register's constant
    air_used = np.where(fell, CONSTANT_HPA * 100.0, air_line_pa(t))
    np.testing.assert_allclose(ds["air_pressure_subtracted"].values, air_used, atol=0.01)
    np.testing.assert_array_equal(ds["air_pressure_source"].values, np.where(fell, 2, 1))
    # the level from the raw absolute pressure (as written to the file, 0.1 Pa resolution) minus that air
    raw_pa = np.round((air_line_pa(t) + gauge_pa(t, 15000.0, 0.0)) / 1000.0, 4) * 1000.0
    np.testing.assert_allclose(ds["water_level"].values, gsw_level(raw_pa - air_used, -2.0), atol=2e-6)
    np.testing.assert_array_equal(ds["water_level_qc_barometer_fallback"].values, np.where(fell, 3, 1))
    np.testing.assert_array_equal(ds["water_level_qc"].values, np.where(fell, 3, 1))
    assert ds["water_level_qc_barometer_fallback"].attrs["standard_name"] == "quality_flag"
    assert ds.attrs["water_level_air_pressure_from_constant"] == fell.sum()
    assert ds.attrs["water_level_air_pressure_barometer"] == "hut-baro (v001)"
    assert ds.attrs["pressure_sensor"] == "absolute"


def test_vented_logger_subtracts_nothing(run):
    root, _ = run
    ds = _dataset(root, "ladder-vented")
    raw_pa = np.round(gauge_pa(LEVEL_T, 12000.0, 1.0) / 1000.0, 4) * 1000.0
    np.testing.assert_allclose(ds["water_level"].values, gsw_level(raw_pa, -1.0), atol=2e-6)
    assert "air_pressure_subtracted" not in ds and "water_level_qc_barometer_fallback" not in ds
    assert ds.attrs["pressure_sensor"] == "vented (gauge pressure)"
    assert ds["pressure"].attrs["standard_name"] == "sea_water_pressure_due_to_sea_water"


def test_barometer_dataset_is_qcd_with_its_own_rules(run):
    root, _ = run
    ds = _dataset(root, "hut-baro")
    assert ds["air_pressure"].attrs["units"] == "Pa" and ds["air_pressure"].attrs["standard_name"] == "air_pressure"
    hours = ((ds["time"].values - START) / np.timedelta64(3600, "s")).astype(int)
    np.testing.assert_array_equal(ds["air_pressure_qc_gross_range"].values, np.where(hours == 5, 4, 1))
    assert "immersion" not in ds


def test_summary_names_the_source_of_the_air_pressure(run):
    _, result = run
    out = result.stdout
    assert "barometric correction (air pressure subtracted for water level):" in out
    assert "pile/pile-absolute: barometer hut-baro (v001) at 102 of 144 samples; configured constant " \
           "1010.00 hPa at 42 (flagged suspect by barometer_fallback)" in out
    assert "ladder/ladder-vented: none: vented logger" in out


def test_barometer_is_planned_first_and_its_record_is_a_qc_input_of_the_level(run):
    # pipeline functions on the run's archive (no orchestrator): the lineage of the level datasets
    root, _ = run
    ctx = pipeline.load_context(root / "workspace.toml")
    assert lineage.barometers_for(ctx.register, "pile-absolute") == ["hut-baro"]
    assert lineage.barometers_for(ctx.register, "ladder-vented") == []
    baro_row = ctx.catalog.latest_dataset("hut-baro")
    inputs = lineage.qc_inputs(ctx, "pile-absolute")
    # what made the barometer's dataset (reproducible), not the file's hash (it carries run timestamps)
    assert inputs["barometer_datasets"] == {"hut-baro": {"qc_key": lineage.qc_key(ctx, "hut-baro"),
                                                         "raw_sha256": baro_row["raw_sha256"]}}
    assert len(baro_row["raw_sha256"]) == 1
    assert ctx.catalog.latest_dataset("pile-absolute")["qc_key"] == lineage.qc_key(ctx, "pile-absolute")
    plan = pipeline.plan_qc(ctx, {"hut-baro"})
    assert plan.barometers == ["hut-baro"] and plan.gauges == ["pile-absolute"]


def test_datasets_pass_the_cf_checker(run, cf_tables):
    root, _ = run
    paths = sorted((root / "archive" / "datasets").rglob("*.nc"))
    assert len(paths) == 3
    for path in paths:
        cf_check(path, cf_tables)
