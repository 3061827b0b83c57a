"""End to end: the nightly flow over the demo inbox, checked against the faults the
generator injected (sample_raw/injected.json, written by tools/make_demo_data.py) and
against the CF checker, cf_xarray and the CF Standard Name Table."""

from __future__ import annotations

import hashlib
import re
import sqlite3
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from qcpipe.config import load_rules


def open_nc(path) -> xr.Dataset:
    with xr.open_dataset(path) as ds:
        return ds.load()


def datasets(run) -> dict[str, Path]:
    return {p.name.split("_")[2]: p for p in sorted((run.archive / "datasets").rglob("*.nc"))}


def dataset_of(run, deployment) -> xr.Dataset:
    return open_nc(datasets(run)[deployment])


def at(ds, iso):
    t = np.datetime64(iso.rstrip("Z"), "ns")
    i = int(np.argmin(np.abs(ds["time"].values - t)))
    assert abs(ds["time"].values[i] - t) < np.timedelta64(1, "s"), f"no sample at {iso}"
    return i


# --- the run itself -------------------------------------------------------------

def test_first_run_succeeds_quietly(demo_run):
    assert demo_run.first.returncode == 0, demo_run.first.stderr
    assert "Traceback" not in demo_run.first.stderr + demo_run.first.stdout
    assert not re.search(r"\b(ERROR|CRITICAL)\b", demo_run.first.stderr), demo_run.first.stderr
    assert "telemetry" not in demo_run.first.stderr.lower()
    out = demo_run.first.stdout
    assert "18 ingested, 2 quarantined" in out
    assert "flags (aggregate, all variables): pass" in out
    assert "outputs:" in out


def test_second_run_writes_nothing_new(demo_run):
    assert demo_run.second.returncode == 0, demo_run.second.stderr
    assert "nothing new" in demo_run.second.stdout
    from tests.conftest import _listing
    assert _listing(demo_run.archive) == demo_run.archive_listing_after_first


def test_raw_files_never_modified(demo_run):
    from tests.conftest import _hashes
    assert _hashes(demo_run.inbox) == demo_run.inbox_hashes_before


def test_every_raw_file_accounted_for(demo_run):
    con = sqlite3.connect(demo_run.archive / "catalog.sqlite")
    rows = dict(con.execute("SELECT sha256, status FROM raw_files").fetchall())
    con.close()
    for name, digest in demo_run.inbox_hashes_before.items():
        assert rows.get(digest) in ("archived", "quarantined"), name
    assert sorted(rows.values()).count("quarantined") == 2


def test_one_dataset_per_deployment_with_expected_samples(demo_run):
    # counts computed by the generator from its own clock model (injected.json)
    found = datasets(demo_run)
    for dep in demo_run.injected["deployments"]:
        counts = dep.get("as_declared", dep)   # the one-hour-off probe is trimmed as its register says
        ds = open_nc(found[dep["deployment"]])
        assert ds.sizes["time"] == counts["samples_in_window"], dep["deployment"]
        assert ds.attrs["samples_removed_pre_deployment_total"] == counts["removed_pre_deployment"]
        assert ds.attrs["samples_removed_post_recovery_total"] == counts["removed_post_deployment"]


# --- injected faults ---------------------------------------------------------------

def faults(run, kind):
    return [f for f in run.injected["faults"] if f["kind"] == kind]


def test_spikes_flagged(demo_run):
    for f in faults(demo_run, "spike"):
        ds = dataset_of(demo_run, f["deployment"])
        i = at(ds, f["time_utc"])
        assert ds["temperature_qc_spike"].values[i] == f["flag"]
        assert ds["temperature_qc"].values[i] >= f["flag"]


def test_stuck_value_flagged(demo_run):
    (f,) = faults(demo_run, "stuck_value")
    ds = dataset_of(demo_run, f["deployment"])
    i0, i1 = at(ds, f["start_utc"]), at(ds, f["end_utc"])
    flags = ds["temperature_qc_flat_line"].values[i0:i1 + 1]
    assert flags.size == f["n_samples"]
    # delayed mode (the rule set's default): the run lasts longer than fail_after, so every
    # sample of it fails, the first one included (recall 1.0)
    rules = load_rules(demo_run.root / "qc_rules" / "kelpwhistle-cove.toml")
    fl = rules.for_variable("temperature", f["station"]).flat_line
    assert fl.mode == "delayed"
    secs = (ds["time"].values[i1] - ds["time"].values[i0]).astype("timedelta64[s]").astype(float)
    assert secs >= fl.fail_after
    np.testing.assert_array_equal(flags, 4)
    np.testing.assert_array_equal(ds["temperature_qc"].values[i0:i1 + 1], 4)


def test_out_of_range_burst_fails(demo_run):
    (f,) = faults(demo_run, "out_of_range")
    ds = dataset_of(demo_run, f["deployment"])
    i0, i1 = at(ds, f["start_utc"]), at(ds, f["end_utc"])
    np.testing.assert_array_equal(ds[f"{f['variable']}_qc_gross_range"].values[i0:i1 + 1], [4] * f["n_samples"])
    np.testing.assert_array_equal(ds[f"{f['variable']}_qc"].values[i0:i1 + 1], [4] * f["n_samples"])


def test_gap_flagged_at_next_sample(demo_run):
    (f,) = faults(demo_run, "gap")
    ds = dataset_of(demo_run, f["deployment"])
    i = at(ds, f["first_after_utc"])
    assert ds["time"].values[i - 1] == np.datetime64(f["last_before_utc"].rstrip("Z"), "ns")
    assert ds["wetness_qc_gap"].values[i] == 3
    assert np.count_nonzero(ds["wetness_qc_gap"].values == 3) == 1


def test_overlap_conflict_kept_flagged_and_reported(demo_run):
    (f,) = faults(demo_run, "overlap_conflict")
    ds = dataset_of(demo_run, f["deployment"])
    i = at(ds, f["time_utc"])
    assert ds["temperature"].values[i] == pytest.approx(f["values"][0])         # first download kept
    assert ds["temperature_qc_download_conflict"].values[i] == 3
    assert np.count_nonzero(ds["temperature_qc_download_conflict"].values == 3) == 1
    assert ds["temperature_qc"].values[i] >= 3
    csv_text = (demo_run.archive / "conflicts" / f"{f['deployment']}.csv").read_text()
    assert f["time_utc"].rstrip("Z").replace("T", "T")[:16] in csv_text and str(f["values"][1]) in csv_text


def test_clock_drift_removed(demo_run):
    (f,) = faults(demo_run, "clock_drift")
    ds = dataset_of(demo_run, f["deployment"])
    assert ds.attrs["clock_drift_at_check_s"] == pytest.approx(f["drift_at_check_s"], abs=0.5)
    # The logger sampled on whole 10-minute steps of its own (drifting) clock.  Map each corrected
    # time back to the logger clock with the generator's model (injected.json "formula"):
    #   logger = utc + offset + drift * (utc - clock_set) / (check_reference - clock_set)
    # and it must land on that grid within 0.1 s (our correction is linear in logger time, the
    # generator's in UTC: they differ by about drift**2 / span, 0.04 s here).
    def secs(iso):
        return np.datetime64(iso.rstrip("Z"), "ns").astype(np.int64) / 1e9
    utc = ds["time"].values.astype("datetime64[ns]").astype(np.int64) / 1e9
    t_set, t_ref = secs(f["clock_set_utc"]), secs(f["check_reference_utc"])
    sign, hh, mm = f["clock_offset"][0], int(f["clock_offset"][1:3]), int(f["clock_offset"][4:6])
    offset = (1 if sign == "+" else -1) * (hh * 3600 + mm * 60)
    logger = utc + offset + f["drift_at_check_s"] * (utc - t_set) / (t_ref - t_set)
    off = (logger + 300) % 600 - 300
    assert np.max(np.abs(off)) < 0.1
    # and without the correction the last samples would be minutes off
    assert np.max(np.abs(((utc + offset + 300) % 600) - 300)) > 300 - 1


def test_rejected_files_quarantined_with_reason(demo_run):
    q = demo_run.archive / "quarantine"
    reasons = {p.name: p.read_text() for p in q.glob("*.reason.txt")}
    for kind, words in [("unknown_serial", "is not in the station register"),
                        ("unparseable_file", "line 43")]:
        (f,) = faults(demo_run, kind)
        name = Path(f["file"]).name
        match = [text for fname, text in reasons.items() if fname.endswith(name + ".reason.txt")]
        assert match and words in match[0], (name, reasons)
        assert match[0].splitlines()[0].startswith(name + ": ")
        assert name in demo_run.first.stdout


# --- standards: CF checker, cf_xarray, standard names, flag scheme --------------------

def test_cf_checker_reports_no_errors(demo_run, cf_tables):
    from tests.conftest import cf_check

    for path in datasets(demo_run).values():
        cf_check(path, cf_tables)


def _standard_name_table(cf_tables):
    root = ET.parse(cf_tables["standard_names"]).getroot()
    return {e.get("id"): (e.findtext("canonical_units") or "").strip() for e in root.iter("entry")}


def test_standard_names_in_table_with_compatible_units(demo_run, cf_tables):
    # CF Standard Name Table v83; unit compatibility by UDUNITS through cfunits (ships with cfchecker)
    from cfunits import Units

    table = _standard_name_table(cf_tables)
    seen = set()
    for path in datasets(demo_run).values():
        ds = open_nc(path)
        for name, var in ds.variables.items():
            std = var.attrs.get("standard_name")
            if std is None:
                continue
            seen.add(std)
            assert std in table, f"{path.name}:{name}: {std!r} not in the CF Standard Name Table v83"
            units = var.attrs.get("units", var.encoding.get("units"))
            canonical = table[std]
            if canonical and units and std != "time":
                assert Units(units).equivalent(Units(canonical)), (name, units, canonical)
    assert {"gross_range_test_quality_flag", "spike_test_quality_flag", "rate_of_change_test_quality_flag",
            "flat_line_test_quality_flag", "gap_test_quality_flag", "aggregate_quality_flag",
            "water_surface_height_above_reference_datum", "air_pressure"} <= seen


def test_flags_follow_ioc_scheme_and_decode_with_cf_xarray(demo_run):
    # IOC Manuals and Guides 54, Vol. 3 (2013) primary flags (from memory):
    # 1 good/pass, 2 not evaluated, 3 questionable/suspect, 4 bad/fail, 9 missing.
    import cf_xarray  # noqa: F401  (PyPI cf_xarray: reads flag_values / flag_meanings)

    n_flag_vars = 0
    for path in datasets(demo_run).values():
        ds = open_nc(path)
        for name in ds.data_vars:
            if not name.endswith("_qc") and "_qc_" not in name:
                continue
            da = ds[name]
            n_flag_vars += 1
            assert da.dtype == np.int8
            np.testing.assert_array_equal(da.attrs["flag_values"], [1, 2, 3, 4, 9])
            assert da.attrs["flag_meanings"].split() == ["pass", "not_evaluated", "suspect", "fail", "missing"]
            assert da.cf.is_flag_variable
            for word, value in [("pass", 1), ("suspect", 3), ("fail", 4), ("missing", 9)]:
                assert int((da.cf == word).sum()) == int((da.values == value).sum())
            assert set(np.unique(da.values)) <= {1, 2, 3, 4, 9}
    assert n_flag_vars > 20


def test_each_data_variable_names_its_flags(demo_run):
    for path in datasets(demo_run).values():
        ds = open_nc(path)
        for name in ("temperature", "ph", "wetness", "water_level", "pressure", "air_pressure"):
            if name in ds:
                anc = ds[name].attrs["ancillary_variables"].split()
                assert f"{name}_qc" in anc and all(a in ds for a in anc)


def test_acdd_attributes_and_provenance(demo_run):
    # ACDD-1.3 highly recommended and recommended attributes that apply
    required = ["title", "summary", "keywords", "Conventions", "id", "naming_authority", "history", "source",
                "processing_level", "license", "standard_name_vocabulary", "date_created", "creator_name",
                "creator_email", "institution", "geospatial_lat_min", "geospatial_lat_max", "geospatial_lon_min",
                "geospatial_lon_max", "time_coverage_start", "time_coverage_end", "time_coverage_duration"]
    rules = load_rules(demo_run.root / "qc_rules" / "kelpwhistle-cove.toml")
    inbox_by_hash = {v: k for k, v in demo_run.inbox_hashes_before.items()}
    for path in datasets(demo_run).values():
        ds = open_nc(path)
        for key in required:
            assert str(ds.attrs.get(key, "")).strip(), f"{path.name}: ACDD {key} missing"
        assert "ACDD-1.3" in ds.attrs["Conventions"] and "CF-1.8" in ds.attrs["Conventions"]
        assert ds.attrs["qc_rule_set_sha256"] == rules.sha256
        for digest in ds.attrs["raw_file_sha256"].split():
            assert digest in inbox_by_hash          # every raw file named exists, byte for byte
        t0 = np.datetime_as_string(ds["time"].values[0], unit="s") + "Z"
        assert ds.attrs["time_coverage_start"] == t0
        assert ds["time"].encoding["units"] == "seconds since 1970-01-01T00:00:00Z"


def test_archive_has_no_temporary_files(demo_run):
    leftovers = [p for p in demo_run.archive.rglob("*.tmp") if ".prefect" not in p.parts]
    assert leftovers == []


def test_raw_copies_match_their_hashes(demo_run):
    for p in (demo_run.archive / "raw").rglob("*"):
        if p.is_file():
            assert hashlib.sha256(p.read_bytes()).hexdigest().startswith(p.name[:12])


# --- the tide: immersion, clock error, gating, products ----------------------------------

def test_every_dataset_carries_immersion_state(demo_run):
    # (a barometer measures air pressure: immersion does not apply to it)
    for path in datasets(demo_run).values():
        ds = open_nc(path)
        if "air_pressure" in ds:
            assert "immersion" not in ds
            continue
        assert "immersion" in ds and ds["immersion"].dtype == np.int8
        assert ds["immersion"].attrs["flag_meanings"] == "emersed immersed unknown"
        assert set(np.unique(ds["immersion"].values)) <= {0, 1, 2}


def test_one_hour_clock_error_reported(demo_run):
    (f,) = faults(demo_run, "clock_one_hour_off")
    ds = dataset_of(demo_run, f["deployment"])
    # the generator wrote this probe's times in UTC+1 while the register declares +00:00:
    # its transitions come 60 min late (injected.json correction_s = -3600)
    assert ds.attrs["clock_error_suspected"] == 1
    assert ds.attrs["clock_transition_offset_s"] == pytest.approx(-f["correction_s"], abs=300)
    assert ds.attrs["clock_xcorr_lag_s"] == pytest.approx(-f["correction_s"], abs=300)
    assert "daylight-saving" in ds.attrs["clock_verdict"]
    assert np.all(ds["wetness_qc_immersion_quality"].values[np.isfinite(ds["wetness"].values)] == f["flag"])
    assert f"{f['station']}/{f['deployment']}: probe clock about +60 min off" in demo_run.first.stdout
    # and no other probe is reported
    for dep in demo_run.injected["deployments"]:
        if dep["deployment"] != f["deployment"] and dep["deployment"].endswith(("probe-2026-09",)):
            other = dataset_of(demo_run, dep["deployment"])
            assert other.attrs["clock_error_suspected"] == 0
            assert abs(other.attrs["clock_transition_offset_s"]) < 300


def test_probe_immersion_agrees_with_the_tide_where_the_clock_is_right(demo_run):
    # the shore probes with correct clocks agree with the site's water level outside the swash band
    for dep in ("kc-high-probe-2026-09", "kc-low-probe-2026-09"):
        ds = dataset_of(demo_run, dep)
        fl = ds["wetness_qc_immersion_consistency"].values
        evaluated = np.isin(fl, (1, 3, 4))
        assert evaluated.mean() > 0.8
        assert np.count_nonzero(fl == 4) == 0
        assert np.count_nonzero(fl == 3) / evaluated.sum() < 0.01
        assert abs(ds.attrs["effective_elevation_m"] - ds["sensor_height"].item()) < 0.15


def test_ph_fails_while_emersed(demo_run):
    ds = dataset_of(demo_run, "kc-low-ph-2026-09")
    gate = ds["ph_qc_immersion_gating"].values
    emersed = ds["immersion"].values == 0
    assert emersed.sum() > 100
    np.testing.assert_array_equal(gate[emersed], 4)
    assert np.all(ds["ph_qc"].values[emersed] == 4)
    assert "immersion probe deployment kc-low-probe-2026-09" in ds.attrs["immersion_source"]


def test_water_level_checked_against_prediction(demo_run):
    ds = dataset_of(demo_run, "kc-pier-level-2026-09")
    res = ds["water_level"].values - ds["water_level_predicted"].values
    # the demo's gauge differs from the prediction only by weather (about +-15 hPa, i.e. +-0.15 m)
    assert np.nanstd(res) < 0.15
    assert np.all(ds["water_level_qc_tide_residual"].values[np.abs(res) <= 0.3] == 1)


def derived_files(run, pattern):
    return sorted((run.archive / "derived").rglob(pattern))


def test_derived_products_written_and_cf_clean(demo_run, cf_tables):
    from tests.conftest import cf_check

    names = [p.name for p in derived_files(demo_run, "*")]
    for product in ("_tide_events.nc", "_tide_events.csv", "_datums.csv", "_constituents.toml",
                    "_emersion_periods.nc", "_emersion_periods.csv", "_daily_exposure.nc", "_daily_exposure.csv"):
        assert any(n.endswith(product) for n in names), product
    for path in derived_files(demo_run, "*.nc"):
        cf_check(path, cf_tables)


def test_gauge_fit_recovers_the_site_constants(demo_run):
    # the demo's truth is the site's own constants file; a fit to 6 weeks of the gauge (with
    # weather) must give M2 back within 2 cm and 2 degrees
    from qcpipe.config.constituents import load_constituents

    truth = {c.name: c for c in load_constituents(demo_run.root / "sample_raw" / "tide" /
                                                  "kelpwhistle-cove.toml").constituents}
    (fitted_file,) = derived_files(demo_run, "*_constituents.toml")
    fit = {c.name: c for c in load_constituents(fitted_file).constituents}
    assert fit["M2"].amplitude_m == pytest.approx(truth["M2"].amplitude_m, abs=0.02)
    assert abs((fit["M2"].phase_deg - truth["M2"].phase_deg + 180) % 360 - 180) < 2.0


def test_daily_exposure_consistent_with_emersion_periods(demo_run):
    import csv

    (daily_csv,) = [p for p in derived_files(demo_run, "*_daily_exposure.csv") if "kc-high" in p.name]
    (periods_csv,) = [p for p in derived_files(demo_run, "*_emersion_periods.csv") if "kc-high" in p.name]
    daily = list(csv.DictReader(daily_csv.open()))
    periods = list(csv.DictReader(periods_csv.open()))
    total_daily = sum(float(r["hours_emersed"]) for r in daily)
    total_periods = sum(float(r["duration_h"]) for r in periods)
    assert total_daily == pytest.approx(total_periods, rel=1e-6)
    # the high-shore station is emersed for most of each day (2.4 m above datum, mean level 2.0 m)
    assert 10 < total_daily / len(daily) < 20


def test_run_writes_a_report_and_says_where(demo_run):
    line = [ln for ln in demo_run.first.stdout.splitlines() if ln.startswith("report: ")]
    assert len(line) == 1
    from pathlib import Path
    index = Path(line[0].split(": ", 1)[1])
    assert index.is_file() and index.name == "index.html"
    html = index.read_text()
    assert "Needs attention" in html and "kc-mid" in html
    assert "report: " not in demo_run.second.stdout          # nothing new, no report


# --- the barometric correction (issue 14, section 3) ------------------------------------

def test_barometer_spike_fails_and_is_not_subtracted(demo_run):
    (f,) = faults(demo_run, "barometer_spike")
    baro = dataset_of(demo_run, f["deployment"])
    i = at(baro, f["time_utc"])
    assert baro["air_pressure"].values[i] == pytest.approx(f["value"] * 100.0)      # hPa in the file, Pa stored
    assert baro["air_pressure_qc_spike"].values[i] == 4 and baro["air_pressure_qc"].values[i] == 4
    level = dataset_of(demo_run, demo_run.injected["barometer_fallback"]["deployment"])
    j = at(level, f["time_utc"])
    # the level logger interpolates across the failed sample from the samples 30 min either side
    # (straight line: their mean at the midpoint), and does not fall back
    expected = (baro["air_pressure"].values[i - 1] + baro["air_pressure"].values[i + 1]) / 2.0
    assert level["air_pressure_subtracted"].values[j] == pytest.approx(expected, abs=1e-6)
    assert level["air_pressure_source"].values[j] == 1
    assert level["water_level_qc_barometer_fallback"].values[j] == 1


def test_level_falls_back_to_the_constant_exactly_where_the_answer_key_says(demo_run):
    fb = demo_run.injected["barometer_fallback"]
    ds = dataset_of(demo_run, fb["deployment"])
    t = ds["time"].values
    flags = ds["water_level_qc_barometer_fallback"].values

    def utc(iso):
        return np.datetime64(iso.rstrip("Z"), "ns")

    expected = ((t <= utc(fb["before_first_barometer_sample"]["last_utc"]))
                | (t >= utc(fb["after_last_barometer_sample"]["first_utc"]))
                | ((t > utc(fb["in_barometer_gap"]["after_utc"])) & (t < utc(fb["in_barometer_gap"]["before_utc"]))))
    assert int(expected.sum()) == fb["total"]
    np.testing.assert_array_equal(flags, np.where(expected, 3, 1))
    np.testing.assert_array_equal(ds["air_pressure_source"].values, np.where(expected, 2, 1))
    assert np.all(ds["water_level_qc"].values[expected] >= 3)
    # the register's constant, 1013.25 hPa, where it fell back
    np.testing.assert_array_equal(ds["air_pressure_subtracted"].values[expected], 101325.0)
    assert ds.attrs["water_level_air_pressure_from_constant"] == fb["total"]
    assert "barometer_fallback" in ds["water_level"].attrs["ancillary_variables"]


def test_barometric_correction_removes_the_passing_low(demo_run):
    # The demo's sea follows the site's harmonic prediction (no inverse-barometer response,
    # injected.json "not_faults"), so with the barometer subtracted the level stays near the
    # prediction through the low, while the constant would put it off by about 1 cm per hPa:
    # 100 Pa / (1025 kg m-3 * 9.81 m s-2) = 9.9 mm (hand-worked), i.e. over 0.25 m at the low.
    low = demo_run.injected["passing_low"]
    ds = dataset_of(demo_run, demo_run.injected["barometer_fallback"]["deployment"])
    t = ds["time"].values
    near = np.abs(t - np.datetime64(low["deepest_utc"].rstrip("Z"), "ns")) < np.timedelta64(3, "h")
    residual = ds["water_level"].values[near] - ds["water_level_predicted"].values[near]
    assert np.sqrt(np.mean(residual ** 2)) < 0.03                  # 12 mm sensor noise in the generator
    on_constant = residual - (101325.0 - ds["air_pressure_subtracted"].values[near]) / (1025.0 * 9.81)
    assert np.mean(on_constant) < -0.25
    assert np.all(ds["water_level_qc_tide_residual"].values[near] == 1)


def test_summary_and_report_show_the_barometric_correction(demo_run):
    fb = demo_run.injected["barometer_fallback"]
    out = demo_run.first.stdout
    assert "barometric correction (air pressure subtracted for water level):" in out
    line = next(ln for ln in out.splitlines() if ln.strip().startswith(f"kc-pier/{fb['deployment']}: barometer"))
    assert f"{fb['barometer']} (v001)" in line and f"at {fb['total']} (flagged suspect" in line
    index = Path(next(ln for ln in out.splitlines() if ln.startswith("report: ")).split(": ", 1)[1])
    html = index.read_text()
    assert "Barometric correction" in html and fb["barometer"] in html
    page = (index.parent / "station-kc-pier.html").read_text()
    assert "Barometric correction" in page and "samples on the constant" in page


# --- regression: the demo's outputs do not change by accident -----------------------------

def test_demo_outputs_match_the_recorded_digest(demo_run):
    # A regression pin, not a check of correctness: tests/reference/demo_outputs_digest.json was
    # recorded from the demo's outputs before the package was restructured (issue of the layered
    # layout) and holds the SHA-256 of every variable, flag and attribute except the run's own
    # times and history (tools/output_digest.py).  A change meant to alter outputs refreshes it
    # with `make digest` and says so in its commit message; any other difference is a regression.
    import subprocess
    import sys

    from tests.conftest import REPO

    done = subprocess.run([sys.executable, str(REPO / "tools" / "output_digest.py"), str(demo_run.archive),
                           "--against", str(REPO / "tests" / "reference" / "demo_outputs_digest.json")],
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr
