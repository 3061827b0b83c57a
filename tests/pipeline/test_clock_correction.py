"""From a clock verdict to corrected data, through the run sequence without the orchestrator.

An invented shore (one site, one station at 2.6 m above its datum) where an immersion probe
and a temperature logger both run one hour fast (their files are stamped UTC + 1 h while the
register says "+00:00").  The site's tide is an invented set of harmonic constants; the
loggers' wet/dry record is that prediction against the station's elevation, so the injected
error (3600 s) is the answer, known by construction.  The probe's verdict and the
companion's lag must find it; ``apply_clock_correction`` for the station must write the
register entry (nothing else in the file changes) and re-run both from their raw files.
"""

from __future__ import annotations

import datetime as dt
import difflib

import numpy as np
import pytest

from qcpipe import pipeline
from qcpipe.archive.ncio import read_attrs, read_dataset
from qcpipe.config.constituents import load_constituents
from qcpipe.errors import ConfigError
from qcpipe.pipeline.clock_fix import apply_clock_correction, plan_clock_correction
from qcpipe.pipeline.run import InProcess, nightly_run, rerun
from qcpipe.tide.harmonics import predict_tide

START = np.datetime64("2026-05-01T00:00", "ns")
END = np.datetime64("2026-05-15T00:00", "ns")
STEP = np.timedelta64(10, "m")
FAST = np.timedelta64(3600, "s")           # the loggers' clock error
ELEVATION = 2.6
PROBE, TEMP = "sh-probe-2026-05", "sh-temp-2026-05"

TIDE = """# invented constants of a fictional site
[tide]
site = "Sandhollow Point (fictional)"
datum = "test datum"
mean_level_m = 2.0
constituent = [
    { name = "M2", amplitude_m = 1.5, phase_deg = 30.0 },
    { name = "S2", amplitude_m = 0.5, phase_deg = 60.0 },
    { name = "K1", amplitude_m = 0.1, phase_deg = 100.0 },
]
"""

REGISTER = f"""# Station register of an invented test shore.
[register]
name = "clock correction test shore (invented)"

[[site]]
id = "sandhollow"
name = "Sandhollow Point (fictional)"
vertical_datum = "test datum"
tide_constituents = "tide.toml"

# ---- the one station
[[station]]
id = "sh-mid"
site = "sandhollow"
name = "mid shore"
latitude = 47.1
longitude = -30.2
elevation_m = {ELEVATION}

[[instrument]]
serial = "P-1"
kind = "immersion_probe"
layout = "probe"

[[instrument]]
serial = "T-1"
kind = "temperature"
layout = "temp"

# both loggers were set to UTC+1 by mistake
[[deployment]]
id = "{PROBE}"
station = "sh-mid"
instrument = "P-1"
start = 2026-05-01T00:00:00Z
end = 2026-05-15T00:00:00Z
clock_offset = "+00:00"   # what the field sheet said
probe_reference = {{ air = 400.0, water = 1200.0 }}

[[deployment]]
id = "{TEMP}"
station = "sh-mid"
instrument = "T-1"
start = 2026-05-01T00:00:00Z
end = 2026-05-15T00:00:00Z
clock_offset = "+00:00"

# end of the register
"""

LAYOUTS = """
[layout.probe]
file_glob = "*_probe.txt"
delimiter = ","
header_lines = 0
column_names = true
time = { columns = ["when"], format = "%Y-%m-%d %H:%M" }
serial = { source = "filename", pattern = "^([A-Z]-[0-9]+)_probe\\\\.txt$" }
variables = { probe_reading = { column = "counts", units = "count" } }

[layout.temp]
file_glob = "*_temp.txt"
delimiter = ","
header_lines = 0
column_names = true
time = { columns = ["when"], format = "%Y-%m-%d %H:%M" }
serial = { source = "filename", pattern = "^([A-Z]-[0-9]+)_temp\\\\.txt$" }
variables = { temperature = { column = "degc", units = "degC" } }
"""

RULES = """
[rule_set]
name = "clock-test"
[variable.wetness]
units = "1"
[variable.temperature]
units = "degC"
"""


def _stamp(t) -> str:
    return np.datetime_as_string(t, unit="m").replace("T", " ")


class Shore:
    pass


def make_shore(root) -> Shore:
    """The workspace at ``root``, its inbox written and processed once (the loggers still an hour fast)."""
    s = Shore()
    s.root = root
    (root / "inbox").mkdir()
    (root / "tide.toml").write_text(TIDE)
    (root / "register.toml").write_text(REGISTER)
    (root / "layouts.toml").write_text(LAYOUTS)
    (root / "rules.toml").write_text(RULES)
    s.workspace = root / "workspace.toml"
    s.workspace.write_text('[paths]\nregister = "register.toml"\nlayouts = "layouts.toml"\n'
                           'rules = "rules.toml"\ninbox = "inbox"\narchive = "archive"\n')
    # the data generator: the site's prediction against the station elevation gives the true wet state
    s.true_t = np.arange(START, END + STEP, STEP)
    consts = load_constituents(root / "tide.toml")
    wet = predict_tide(s.true_t, consts.constituents, mean_level=consts.mean_level_m) > ELEVATION
    rng = np.random.default_rng(7)
    counts = np.where(wet, 1200.0, 400.0) + rng.normal(0, 8, wet.size)
    # the temperature logger samples 5 min after the probe: its steps fall between the probe's
    s.temp_t = np.arange(START + STEP // 2, END, STEP)
    wet_t = predict_tide(s.temp_t, consts.constituents, mean_level=consts.mean_level_m) > ELEVATION
    hours = (s.temp_t - START) / np.timedelta64(1, "h")
    temp = np.where(wet_t, 12.0, 17.0 + 4.0 * np.sin(2 * np.pi * hours / 24.0)) + rng.normal(0, 0.05, wet_t.size)
    (root / "inbox" / "P-1_probe.txt").write_text(
        "when,counts\n" + "".join(f"{_stamp(t)},{c:.1f}\n" for t, c in zip(s.true_t + FAST, counts)))
    (root / "inbox" / "T-1_temp.txt").write_text(
        "when,degc\n" + "".join(f"{_stamp(t)},{c:.3f}\n" for t, c in zip(s.temp_t + FAST, temp)))
    s.first = nightly_run(pipeline.load_context(s.workspace), InProcess())
    return s


@pytest.fixture(scope="module")
def shore(tmp_path_factory):
    s = make_shore(tmp_path_factory.mktemp("clockfix"))
    root = s.root
    ctx = pipeline.load_context(s.workspace)
    s.probe_v1 = read_attrs(ctx.catalog.latest_dataset(PROBE)["path"])
    s.temp_v1 = read_attrs(ctx.catalog.latest_dataset(TEMP)["path"])
    s.register_before = (root / "register.toml").read_text()
    s.plan = plan_clock_correction(ctx, PROBE, confirmed_by="R. Tester", station=True,
                                   today=dt.date(2026, 6, 1))
    s.second = apply_clock_correction(ctx, s.plan, InProcess())
    s.register_after = (root / "register.toml").read_text()
    s.ctx = pipeline.load_context(s.workspace)
    return s


def test_the_probe_verdict_finds_the_hour(shore):
    a = shore.probe_v1
    assert int(a["clock_error_suspected"]) == 1
    # the injected error is 3600 s; the verdict's tolerance in the trade is minutes (10 min here)
    assert abs(float(a["clock_transition_offset_s"]) - 3600.0) <= 600.0


def test_the_companion_lag_is_estimated_near_60_min(shore):
    a = shore.temp_v1
    assert a["clock_companion_probe"] == f"{PROBE} v001" and int(a["clock_companion_found"]) == 1
    # both loggers share the error: about 0 against the probe's transitions (half a 10-min sample),
    # about 60 min against UTC (that, plus the probe's own estimate error: 10 min)
    assert abs(float(a["clock_companion_step_lag_s"])) <= 300.0
    assert abs(float(a["clock_companion_offset_s"]) - 3600.0) <= 600.0
    assert int(a["clock_companion_shares_probe_error"]) == 1
    assert int(a["clock_companion_steps_matched"]) >= 0.9 * int(a["clock_companion_transitions"])


def test_the_clock_notice_names_the_station_s_other_logger(shore):
    (notice,) = [n for r in shore.first.results for n in r.notices if n.kind == "clock"]
    assert notice.deployment == PROBE
    assert "these loggers at the station may share the error" in notice.text
    assert f"{TEMP} (temperature steps" in notice.text and "shares the error" in notice.text


def test_the_plan_corrects_the_station_by_whole_hours(shore):
    p = shore.plan
    assert p.deployments == [PROBE, TEMP] and p.replaced == {}
    assert p.shift_s == 3600.0 and p.evidence == f"{PROBE} v001"
    assert p.verdict == shore.probe_v1["clock_verdict"]


def test_the_register_changes_only_by_the_added_entries(shore):
    diff = [ln for ln in difflib.unified_diff(shore.register_before.splitlines(), shore.register_after.splitlines(),
                                              lineterm="", n=0) if not ln.startswith(("---", "+++", "@@"))]
    assert len(diff) == 2 and all(ln.startswith("+clock_correction = {") for ln in diff)
    assert 'shift_s = 3600.0' in diff[0] and 'confirmed_by = "R. Tester"' in diff[0]
    assert "confirmed_on = 2026-06-01" in diff[0] and f'evidence = "{PROBE} v001"' in diff[0]
    # each entry sits right after its deployment's last key, before the comments that follow
    lines = shore.register_after.splitlines()
    for i, ln in enumerate(lines):
        if ln.startswith("clock_correction"):
            assert lines[i - 1].startswith(("probe_reference", "clock_offset")) and lines[i + 1] == ""


def test_both_deployments_are_re_run_from_their_raw_files(shore):
    got = sorted((r.deployment, r.version) for r in shore.second.results)
    assert got == [(PROBE, 2), (TEMP, 2)]
    # every sample back on true UTC: the raw files' records exactly, none trimmed any more
    for dep, true_t in ((PROBE, shore.true_t), (TEMP, shore.temp_t)):
        ds = read_dataset(shore.ctx.catalog.latest_dataset(dep)["path"])
        np.testing.assert_array_equal(ds["time"].values, true_t)


def test_the_corrected_probe_transitions_meet_the_prediction(shore):
    ds = read_dataset(shore.ctx.catalog.latest_dataset(PROBE)["path"])
    off = ds["transition_offset"].values
    off = off[np.isfinite(off)]
    assert off.size >= 40
    # a transition is timed at a sampling midpoint: within half a 10-min interval of the crossing,
    # plus the interpolation of the prediction (common practice, no source): a few minutes
    assert abs(float(np.median(off))) <= 120.0 and np.all(np.abs(off) <= 420.0)
    assert int(ds.attrs["clock_error_suspected"]) == 0


def test_history_and_provenance_name_the_correction(shore):
    for dep in (PROBE, TEMP):
        a = read_attrs(shore.ctx.catalog.latest_dataset(dep)["path"])
        last = a["history"].splitlines()[-1]
        assert "times moved back by 3600 s for a confirmed clock error" in last
        assert "confirmed by R. Tester on 2026-06-01" in last and f"clock verdict of {PROBE} v001" in last
        assert float(a["clock_correction_applied_s"]) == 3600.0
        assert a["clock_correction_confirmed_by"] == "R. Tester"
        assert a["clock_correction_confirmed_on"] == "2026-06-01"
        assert a["clock_correction_verdict"] == shore.probe_v1["clock_verdict"]
        assert "clock correction" not in a["history"].splitlines()[0]


def test_a_second_correction_is_refused_and_a_rerun_shifts_nothing_again(shore):
    ctx = pipeline.load_context(shore.workspace)
    with pytest.raises(ConfigError, match=f"deployment {PROBE}: no suspected clock error"):
        plan_clock_correction(ctx, PROBE, confirmed_by="R. Tester")
    with pytest.raises(ConfigError, match="already carry a clock_correction.*give --replace"):
        plan_clock_correction(ctx, PROBE, confirmed_by="R. Tester", seconds=3000)
    # a replacement is the new total, not an addition
    p = plan_clock_correction(ctx, PROBE, confirmed_by="R. Tester", seconds=3000, replace=True)
    assert p.shift_s == 3000.0 and p.replaced == {PROBE: 3600.0}
    assert rerun(ctx, InProcess()).nothing_new          # the correction is applied once, from the raw files
    assert (shore.root / "register.toml").read_text() == shore.register_after


def test_a_logger_without_a_verdict_is_refused_without_seconds(shore):
    ctx = pipeline.load_context(shore.workspace)
    with pytest.raises(ConfigError, match=f"deployment {TEMP}: no suspected clock error in its latest dataset "
                                          f"\\({TEMP} v002: no clock verdict\\)"):
        plan_clock_correction(ctx, TEMP, confirmed_by="R. Tester")
    with pytest.raises(ConfigError, match="--by is empty"):
        plan_clock_correction(ctx, PROBE, confirmed_by="  ", seconds=60)


def test_the_command_asks_and_writes_only_when_confirmed(tmp_path):
    """``qcpipe apply-clock`` in a subprocess, with --register-only so that no orchestrator starts."""
    import subprocess
    import sys

    s = make_shore(tmp_path)
    register = s.root / "register.toml"
    before = register.read_bytes()
    cmd = [sys.executable, "-m", "qcpipe.cli", "apply-clock", "-w", str(s.workspace), PROBE, "--station",
           "--by", "R. Tester", "--register-only"]
    no = subprocess.run(cmd, input="n\n", capture_output=True, text=True, timeout=300)
    assert no.returncode == 1, no.stderr
    assert "shift_s = 3600" in no.stdout and f"    {TEMP}" in no.stdout
    assert "[y/N]" in no.stdout and "not confirmed; nothing written" in no.stdout
    assert register.read_bytes() == before
    yes = subprocess.run(cmd + ["--yes"], capture_output=True, text=True, timeout=300)
    assert yes.returncode == 0, yes.stderr
    assert "[y/N]" not in yes.stdout and f"for {PROBE}, {TEMP}" in yes.stdout
    added = [ln for ln in difflib.unified_diff(before.decode().splitlines(), register.read_text().splitlines(),
                                               lineterm="", n=0) if ln.startswith("+clock_correction")]
    assert len(added) == 2
    # nothing to correct on a logger without a verdict: one line, exit 2
    again = subprocess.run(cmd[:6] + [TEMP, "--by", "R. Tester", "--yes"], capture_output=True, text=True,
                           timeout=300)
    assert again.returncode == 2 and again.stderr.count("\n") == 1
    assert again.stderr.startswith(f"qcpipe: error: deployment {TEMP}: no suspected clock error")
