"""The messages users see for bad configuration: file, key, what is wrong, what to do."""

import pytest

from qcpipe.config import load_layouts, load_register, load_rules
from qcpipe.errors import ConfigError

REGISTER = """
[register]
name = "test"
[[site]]
id = "s1"
name = "Site one"
vertical_datum = "local datum"
[[station]]
id = "st1"
site = "s1"
name = "Station one"
latitude = 50.0
longitude = -4.0
elevation_m = 1.2
[[instrument]]
serial = "P-1"
kind = "immersion_probe"
layout = "probe"
[[deployment]]
id = "d1"
station = "st1"
instrument = "P-1"
start = 2026-09-01T10:00:00Z
end = 2026-10-01T10:00:00Z
clock_offset = "+01:00"
clock_check = { logger_time = 2026-10-01T11:01:00, reference_time = 2026-10-01T10:00:00Z }
probe_reference = { air = 400.0, water = 1200.0 }
"""

RULES = """
[rule_set]
name = "r1"
[variable.temperature]
units = "degC"
gross_range = { sensor_min = -5, sensor_max = 45, expected_min = -2, expected_max = 35 }
spike = { half_window = "30 min", suspect = 2.0, fail = 5.0 }
flat_line = { tolerance = 0.005, suspect_after = "3 h", fail_after = "6 h" }
"""

LAYOUTS = """
[layout.probe]
file_glob = "*.wet"
delimiter = ";"
header_lines = 1
time = { columns = ["stamp"], format = "%Y-%m-%d %H:%M:%S" }
serial = { source = "header", pattern = "unit (\\\\S+)" }
variables = { probe_reading = { column = "reading", units = "count" } }
"""


def load(tmp_path, loader, text, name):
    p = tmp_path / name
    p.write_text(text)
    return loader(p), p


def test_valid_files_load(tmp_path):
    reg, _ = load(tmp_path, load_register, REGISTER, "reg.toml")
    assert reg.deployment[0].offset_seconds == 3600
    rules, _ = load(tmp_path, load_rules, RULES, "rules.toml")
    assert rules.for_variable("temperature").spike.half_window == 1800.0
    # defaults of the edge and flat-line options: both neighbours, current value, delayed mode
    assert rules.for_variable("temperature").spike.one_sided_edges is False
    flat = rules.for_variable("temperature").flat_line
    assert (flat.reference, flat.mode) == ("current", "delayed")
    lay, _ = load(tmp_path, load_layouts, LAYOUTS, "lay.toml")
    assert lay.layouts["probe"].reads("x.wet")


@pytest.mark.parametrize("old, new, key, words", [
    ('latitude = 50.0', 'latitude = 95.0', "station[0] (id 'st1').latitude", "less than or equal to 90"),
    ('elevation_m = 1.2\n', '', "station[0] (id 'st1').elevation_m", "add this key"),
    ('clock_offset = "+01:00"', 'clock_offset = "1h"', "deployment[0] (id 'd1').clock_offset", "'+01:00'"),
    ('end = 2026-10-01T10:00:00Z', 'end = 2026-08-01T10:00:00Z', "deployment[0] (id 'd1')", "is not after start"),
    ('station = "st1"', 'station = "nowhere"', "(top level)", "names station 'nowhere'"),
    ('id = "st1"', 'id = "../etc"', "station[0] (id '../etc').id", "not a safe identifier"),
    ('kind = "immersion_probe"', 'kind = "sonar"', "instrument[0] (id 'P-1').kind", "immersion_probe"),
    ('start = 2026-09-01T10:00:00Z', 'start = 2026-09-01T10:00:00', "deployment[0] (id 'd1').start", "timezone"),
    ('name = "test"', 'name = "test"\npublisher_email = "data desk"', "register.publisher_email",
     "not an e-mail address"),
    ('name = "test"', 'name = "test"\npublisher_url = "example.org/data"', "register.publisher_url",
     "not a web address"),
], ids=["latitude", "missing-key", "offset", "inverted-window", "unknown-station", "path-escape", "kind", "naive-start",
        "publisher-email", "publisher-url"])
def test_register_errors(tmp_path, old, new, key, words):
    assert old in REGISTER
    with pytest.raises(ConfigError) as info:
        load(tmp_path, load_register, REGISTER.replace(old, new, 1), "reg.toml")
    msg = str(info.value)
    assert msg.startswith(f"{tmp_path / 'reg.toml'}: key {key}:"), msg
    assert words in msg and "\n" not in msg


@pytest.mark.parametrize("old, new, key, words", [
    ('sensor_min = -5', 'sensor_min = 50', "variable.temperature.gross_range", "must be below sensor_max"),
    ('half_window = "30 min"', 'half_window = 30', "variable.temperature.spike.half_window", "'30 min'"),
    ('half_window = "30 min"', 'half_window = "-30 min"', "variable.temperature.spike.half_window", "cannot read"),
    ('suspect = 2.0, fail = 5.0', 'suspect = 6.0, fail = 5.0', "variable.temperature.spike", "must not be below"),
    ('units = "degC"', 'units = "degF"', "variable.temperature.units", "must be in 'degC'"),
    ('[variable.temperature]', '[variable.temprature]', "variable.temprature", "unknown variable"),
    ('spike = {', 'spikes = {', "variable.temperature.spikes", "remove it or check its spelling"),
    # a typo inside a table names the unknown key, the keys the table takes and the one now missing
    ('suspect = 2.0', 'suspct = 2.0', "variable.temperature.spike.suspct",
     "unknown key; this table takes half_window, suspect, fail, min_neighbours, one_sided_edges (suspect missing); "
     "remove it or check its spelling"),
    ('fail = 5.0 }', 'fail = 5.0, one_sided_edges = "yes" }', "variable.temperature.spike.one_sided_edges",
     "valid boolean"),
    ('fail_after = "6 h" }', 'fail_after = "6 h", reference = "successive" }',
     "variable.temperature.flat_line.reference", "'current' or 'previous'"),
    ('fail_after = "6 h" }', 'fail_after = "6 h", mode = "realtime" }', "variable.temperature.flat_line.mode",
     "'delayed' or 'real_time'"),
], ids=["inverted-limits", "number-duration", "negative-duration", "fail-below-suspect", "units", "typo-var",
        "typo-check", "typo-in-table", "one-sided-not-bool", "flat-reference", "flat-mode"])
def test_rule_errors(tmp_path, old, new, key, words):
    assert old in RULES
    with pytest.raises(ConfigError) as info:
        load(tmp_path, load_rules, RULES.replace(old, new, 1), "rules.toml")
    msg = str(info.value)
    assert msg.startswith(f"{tmp_path / 'rules.toml'}: key {key}"), msg
    assert words in msg and "\n" not in msg


@pytest.mark.parametrize("immersion, key, words", [
    ("min_bimodality = 0.9", "immersion", "replaced by min_separation"),
    ("level_band = 0.1\nmax_level_shift = 0.1", "immersion", "must be below level_band"),
    ('health_window = 24', "immersion.health_window", "'24 min'"),
    ("min_window_samples = 0", "immersion.min_window_samples", "greater than or equal to 1"),
], ids=["renamed-key", "shift-beyond-band", "number-duration", "no-samples"])
def test_immersion_errors(tmp_path, immersion, key, words):
    with pytest.raises(ConfigError) as info:
        load(tmp_path, load_rules, RULES + "[immersion]\n" + immersion + "\n", "rules.toml")
    msg = str(info.value)
    assert msg.startswith(f"{tmp_path / 'rules.toml'}: key {key}"), msg
    assert words in msg and "\n" not in msg


@pytest.mark.parametrize("old, new, key, words", [
    ('delimiter = ";"', 'delimiter = ";;"', "layout.probe.delimiter", "one character"),
    ('units = "count"', 'units = "blorps"', "layout.probe.variables.probe_reading.units", "unknown unit 'blorps'"),
    ('units = "count"', 'units = "furlongs"', "layout.probe.variables.probe_reading.units",
     "is not a temperature, pressure"),
    ('probe_reading = { column = "reading", units = "count" }', 'temperature = { column = "reading", units = "hPa" }',
     "layout.probe.variables", "temperature: unit 'hPa' is a pressure, but this variable is a temperature"),
    ('"unit (\\\\S+)"', '"unit \\\\S+"', "layout.probe.serial.pattern", "one (group)"),
    ('format = "%Y-%m-%d %H:%M:%S"', 'format = "YYYY-MM-DD"', "layout.probe.time.format", "strftime"),
], ids=["delimiter", "unknown-unit", "unit-of-no-stored-kind", "incompatible-unit", "serial-group", "time-format"])
def test_layout_errors(tmp_path, old, new, key, words):
    assert old in LAYOUTS
    with pytest.raises(ConfigError) as info:
        load(tmp_path, load_layouts, LAYOUTS.replace(old, new, 1), "lay.toml")
    msg = str(info.value)
    assert msg.startswith(f"{tmp_path / 'lay.toml'}: key {key}"), msg
    assert words in msg and "\n" not in msg


def test_toml_syntax_error_names_line(tmp_path):
    with pytest.raises(ConfigError, match=r"TOML syntax error: .*line 3"):
        load(tmp_path, load_rules, '[rule_set]\nname = "a"\nunits = \n', "rules.toml")


def test_missing_file(tmp_path):
    with pytest.raises(ConfigError, match="file not found"):
        load_rules(tmp_path / "nope.toml")


def test_station_override_merges_and_hashes(tmp_path):
    text = RULES + '[station.st1.variable.temperature]\nspike = { suspect = 3.0 }\n'
    rules, _ = load(tmp_path, load_rules, text, "rules.toml")
    assert rules.for_variable("temperature", "st1").spike.suspect == 3.0
    assert rules.for_variable("temperature", "st1").spike.fail == 5.0          # merged key by key
    assert rules.for_variable("temperature", "other").spike.suspect == 2.0
    assert rules.effective_sha256("temperature", "st1") != rules.effective_sha256("temperature", "other")


def test_rule_hash_ignores_comments_and_order(tmp_path):
    a, _ = load(tmp_path, load_rules, RULES, "a.toml")
    reordered = RULES.replace('spike = { half_window = "30 min", suspect = 2.0, fail = 5.0 }',
                              '# a comment\nspike = { fail = 5.0, suspect = 2.0, half_window = "30 min" }')
    b, _ = load(tmp_path, load_rules, reordered, "b.toml")
    assert a.sha256 == b.sha256
    c, _ = load(tmp_path, load_rules, RULES.replace("fail = 5.0", "fail = 5.5"), "c.toml")
    assert c.sha256 != a.sha256


def test_loaded_register_survives_pickling():
    """A loaded register crosses process boundaries (Dask workers) intact."""
    import pickle

    from qcpipe import pipeline
    from tests.conftest import REPO

    reg = pipeline.load_context(REPO / "sample_raw" / "workspace.toml").register
    back = pickle.loads(pickle.dumps(reg))
    assert back.sha256 == reg.sha256
    assert [d.id for d in back.deployment] == [d.id for d in reg.deployment]


@pytest.mark.parametrize("what", ["rule override", "annotation"])
def test_unknown_station_in_rules_or_annotations_is_named(tmp_path, what):
    """A station id the register does not know, in a rule-set override or a review annotation,
    stops the load with one line naming the file, the key and the id."""
    import shutil

    from qcpipe.config.workspace import load_workspace
    from qcpipe.errors import ConfigError
    from tests.conftest import REPO

    shutil.copytree(REPO / "sample_raw", tmp_path / "sample_raw")
    shutil.copytree(REPO / "qc_rules", tmp_path / "qc_rules")
    ws = load_workspace(tmp_path / "sample_raw" / "workspace.toml")
    if what == "rule override":
        ws.rules_path.write_text(ws.rules_path.read_text()
                                 + "\n[station.kc-nowhere.variable.temperature]\nspike = { suspect = 3.0 }\n")
        target = ws.rules_path
    else:
        target = tmp_path / "sample_raw" / "annotations.toml"
        target.write_text('[[annotation]]\nstation = "kc-nowhere"\nvariables = ["all"]\n'
                          'start = 2026-10-01T00:00:00Z\nend = 2026-10-02T00:00:00Z\nflag = 3\n'
                          'reason = "probe fouled"\nreviewer = "A. Reviewer"\ndate = 2026-10-06\n')
        ws_file = tmp_path / "sample_raw" / "workspace.toml"
        if "\nannotations = " not in ws_file.read_text():        # the demo's workspace names one already
            ws_file.write_text(ws_file.read_text().replace('[paths]\n', '[paths]\nannotations = "annotations.toml"\n'))
        ws = load_workspace(ws_file)
    with pytest.raises(ConfigError) as err:
        ws.load()
    msg = str(err.value)
    assert str(target) in msg and "kc-nowhere" in msg and "not in the register" in msg
    assert "\n" not in msg
