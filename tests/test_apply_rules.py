"""Rule sets applied (qcpipe/apply_rules.py), and their bounds (issue 18, section 4).

A flat-line test whose window is longer than the record could flag nothing: it flags 2 (not
evaluated) and the run says why.  The spike and rate-of-change tests still run on such a record (their
windows cut at its ends, as at the ends of every record; each flags 2 itself where a sample has too few
neighbours), and the run says their windows are longer than the record.  The record spans below are set by construction (a 6-hour record of 10-minute samples
spans 6 h = 21600 s from first to last value); the flag values are the IOC primary flag scheme's
(UNESCO/IOC 2013, Manuals and Guides 54, vol. 3, table 2: 2 not evaluated, 9 missing).  Rule
bounds are read through the real ``qcpipe check`` command.
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest

from qcpipe.apply_rules import apply_rule_set, unevaluated_checks
from qcpipe.config.rules import load_rules
from qcpipe.pipeline.context import load_context
from qcpipe.pipeline.run import InProcess, nightly_run
from tests.conftest import REPO, run_cli, small_demo

RULES = """
[rule_set]
name = "window-test"
[variable.temperature]
units = "degC"
gross_range = { sensor_min = -5.0, sensor_max = 45.0 }
spike = { half_window = "20 min", suspect = 2.0, fail = 5.0 }
rate_of_change = { window = "25 h", n_sigma = 4.0 }
flat_line = { tolerance = 0.001, suspect_after = "2 h", fail_after = "6 h" }
"""


def record(hours: float, step_min: int = 10):
    n = int(hours * 60 / step_min) + 1
    t = np.datetime64("2026-10-01T00:00", "ns") + np.arange(n) * np.timedelta64(step_min, "m")
    v = 12.0 + np.sin(np.arange(n) / 5.0)
    return t, v


@pytest.fixture
def rules(tmp_path):
    path = tmp_path / "rules.toml"
    path.write_text(RULES)
    return load_rules(path)


def test_a_window_longer_than_the_record_flags_not_evaluated(rules):
    t, v = record(6)
    v[3] = np.nan
    flags = apply_rule_set({"temperature": v}, t, rules, "st")["temperature"]
    roc = flags["rate_of_change"]
    assert roc.dtype == np.int8 and 1 in set(roc[~np.isnan(v)]) and roc[3] == 9   # 25 h on 6 h: it ran
    assert set(flags["spike"][~np.isnan(v)]) != {2}           # 40 min window inside 6 h: it ran
    assert set(flags["flat_line"]) <= {1, 9}                   # 2 h inside 6 h: it ran, nothing stuck
    assert list(flags) == ["gross_range", "spike", "rate_of_change", "flat_line", "aggregate"]
    assert unevaluated_checks({"temperature": v}, t, rules, "st") == {("temperature", "rate_of_change"):
                                                                      (25 * 3600.0, 6 * 3600.0)}


@pytest.mark.parametrize("hours, longer, all_two", [
    (1.5, {"rate_of_change", "flat_line"}, {"flat_line"}),                 # 90 min: shorter than 2 h and 25 h
    (0.5, {"spike", "rate_of_change", "flat_line"}, {"flat_line"}),        # 30 min: shorter than 40 min too
    (0, {"spike", "rate_of_change", "flat_line"}, {"spike", "rate_of_change", "flat_line"}),   # one sample
], ids=["90-min", "30-min", "one-sample"])
def test_only_the_flat_line_is_not_evaluated_when_its_window_does_not_fit(rules, hours, longer, all_two):
    """``longer``: the checks whose window is longer than the record (the run names them); ``all_two``:
    those whose flags are all 2: the flat line, and the others only where no sample has a neighbour
    (one sample: the spike test needs one on each side, the rate of change a previous value)."""
    t, v = record(hours)
    flags = apply_rule_set({"temperature": v}, t, rules, "st")["temperature"]
    assert {c for c in ("spike", "rate_of_change", "flat_line") if set(flags[c]) == {2}} == all_two
    assert set(flags["gross_range"]) == {1}
    assert {c for _, c in unevaluated_checks({"temperature": v}, t, rules, "st")} == longer


def test_a_spike_in_a_record_shorter_than_the_spike_window_is_still_found(tmp_path):
    """A 50-minute record with a 20 degC spike and a 30-minute half window (60 min in all): the test runs
    with its windows cut at the record's ends and fails the spike (5 degC fail threshold of RULES)."""
    t, v = record(50 / 60, step_min=1)
    v[25] += 20.0
    path = tmp_path / "rules.toml"
    path.write_text(RULES.replace('half_window = "20 min"', 'half_window = "30 min"'))
    long_spike = load_rules(path)
    flags = apply_rule_set({"temperature": v}, t, long_spike, "st")["temperature"]
    assert flags["spike"][25] == 4 and flags["aggregate"][25] == 4


def test_the_run_says_which_check_was_not_evaluated_and_why(tmp_path):
    """In-process run over two temperature loggers (records of a few weeks) with a 300-day flat-line
    duration and a 300-day rate-of-change window: the flat line's flags are 2/9, the rate of change ran;
    each flag variable's comment and the run's notices say so; nothing raises."""
    ws, _ = small_demo(tmp_path)
    rules = tmp_path / "qc_rules" / "kelpwhistle-cove.toml"
    text = rules.read_text()
    for old, new in (('rate_of_change = { window = "25 h", n_sigma = 4.0 }',
                      'rate_of_change = { window = "300 d", n_sigma = 4.0 }'),
                     ('suspect_after = "3 h", fail_after = "6 h"', 'suspect_after = "300 d", fail_after = "301 d"')):
        assert old in text, old
        text = text.replace(old, new, 1)
    rules.write_text(text)
    s = nightly_run(load_context(ws), InProcess())
    assert len(s.results) == 2
    for r in s.results:
        notes = sorted(n.text for n in r.notices if n.kind == "rules")
        assert len(notes) == 2
        assert notes[0].startswith("temperature: the flat_line check was not evaluated (flag 2): its window, "
                                   "300 d, is longer than the record")
        assert notes[1].startswith("temperature: the rate_of_change check's window, 300 d, is longer than the "
                                   "record") and "it ran on the samples the record has" in notes[1]
        with netCDF4.Dataset(r.dataset) as nc:
            flat = nc["temperature_qc_flat_line"]
            assert set(np.unique(flat[:].filled(9))) <= {2, 9} and flat.comment == notes[0]
            roc = nc["temperature_qc_rate_of_change"]
            assert 1 in set(np.unique(roc[:].filled(9))) and roc.comment == notes[1]


# --- bounds, through the command -----------------------------------------------------------------

@pytest.mark.parametrize("old, new, key, words", [
    ('window = "25 h", n_sigma = 4.0', 'window = "9999999 d", n_sigma = 4.0',
     "variable.temperature.rate_of_change.window", "longer than a year"),
    ('half_window = "20 min", suspect = 4.0', 'half_window = "367 d", suspect = 4.0',
     "variable.temperature.spike.half_window", "longer than a year"),
    ('window = "25 h", n_sigma = 4.0', 'window = "25 h", n_sigma = 400.0',
     "variable.temperature.rate_of_change.n_sigma", "less than or equal to 100"),
    ('window = "25 h", n_sigma = 4.0', 'window = "25 h", n_sigma = 4.0, min_samples = 10000000',
     "variable.temperature.rate_of_change.min_samples", "less than or equal to 100000"),
    ('max_gap = "25 min"', 'max_gap = "400 d"', "variable.temperature.gap.max_gap", "longer than a year"),
], ids=["window-9999999-d", "half-window-367-d", "n-sigma-400", "min-samples-1e7", "max-gap-400-d"])
def test_qcpipe_check_names_file_and_key_of_an_out_of_range_value(tmp_path, old, new, key, words):
    path = tmp_path / "rules.toml"
    text = (REPO / "qc_rules" / "kelpwhistle-cove.toml").read_text()
    assert old in text
    path.write_text(text.replace(old, new, 1))
    r = run_cli("check", "--rules", str(path))
    assert r.returncode == 2 and r.stdout == ""
    lines = r.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"qcpipe: error: {path}: key {key}: ") and words in lines[0]


@pytest.mark.parametrize("table, words", [
    ('[tide_timing]\nmax_offset = "400 d"\n', "tide_timing.max_offset"),
    ('[immersion]\nhealth_window = "500 d"\n', "immersion.health_window"),
], ids=["tide-timing", "immersion"])
def test_qcpipe_check_bounds_the_global_durations(tmp_path, table, words):
    path = tmp_path / "rules.toml"
    path.write_text('[rule_set]\nname = "bounds"\n' + table)
    r = run_cli("check", "--rules", str(path))
    assert r.returncode == 2 and f"{path}: key {words}: " in r.stderr and "longer than a year" in r.stderr
