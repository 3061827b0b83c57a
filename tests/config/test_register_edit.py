"""Clock corrections written into the station register: comments and layout kept, invalid edits refused.

The register edited is a copy of the demo's (sample_raw/register.toml: comments, blank lines,
inline tables, a comment block between two deployments).  Expected texts are worked out here
line by line with difflib and tomllib, not by the code under test.
"""

from __future__ import annotations

import datetime as dt
import difflib
import shutil
import tomllib

import pytest

from qcpipe.config import load_register
from qcpipe.config.register_edit import correction_entry, with_clock_corrections, write_clock_corrections
from qcpipe.errors import ConfigError
from tests.conftest import REPO

ENTRY = correction_entry(shift_s=3600.0, confirmed_by="A. Reviewer", confirmed_on=dt.date(2026, 11, 2),
                         verdict='probe clock about +60 min off; "subtract it"', evidence="kc-mid-probe-2026-09 v001")


@pytest.fixture
def register(tmp_path):
    shutil.copytree(REPO / "sample_raw" / "tide", tmp_path / "tide")
    path = tmp_path / "register.toml"
    shutil.copyfile(REPO / "sample_raw" / "register.toml", path)
    return path


def added_lines(before: str, after: str) -> list[str]:
    diff = list(difflib.unified_diff(before.splitlines(), after.splitlines(), lineterm="", n=0))
    changed = [ln for ln in diff if not ln.startswith(("---", "+++", "@@"))]
    assert all(ln.startswith("+") for ln in changed), changed          # nothing removed or altered
    return [ln[1:] for ln in changed]


def test_round_trip_adds_only_the_entries_after_each_deployment_s_last_key(register):
    before = register.read_text()
    # kc-pier-level is followed by a comment block about the barometer: the entry goes before it
    deps = ["kc-mid-probe-2026-09", "kc-mid-temp-2026-09", "kc-pier-level-2026-09", "kc-deck-baro-2026-09"]
    loaded = write_clock_corrections(register, {d: ENTRY for d in deps})
    after = register.read_text()
    added = added_lines(before, after)
    assert len(added) == 4 and all(ln.startswith("clock_correction = {") for ln in added)
    lines = after.splitlines()
    for i in (i for i, ln in enumerate(lines) if ln.startswith("clock_correction")):
        assert lines[i - 1].split(" = ")[0] in ("probe_reference", "clock_check", "pressure")
        assert i + 1 == len(lines) or lines[i + 1] == ""
    # the values read back as written (tomllib, the standard library's reader)
    data = {d["id"]: d for d in tomllib.loads(after)["deployment"]}
    for d in deps:
        assert data[d]["clock_correction"] == ENTRY
    assert loaded.deployment_by_id("kc-mid-temp-2026-09").correction_seconds == 3600.0
    assert load_register(register).deployment_by_id("kc-high-probe-2026-09").clock_correction is None


def test_a_second_write_replaces_in_place(register):
    write_clock_corrections(register, {"kc-mid-probe-2026-09": ENTRY})
    once = register.read_text()
    write_clock_corrections(register, {"kc-mid-probe-2026-09": dict(ENTRY, shift_s=3000.0)})
    twice = register.read_text()
    diff = [ln for ln in difflib.unified_diff(once.splitlines(), twice.splitlines(), lineterm="", n=0)
            if not ln.startswith(("---", "+++", "@@"))]
    assert len(diff) == 2 and "shift_s = 3600.0" in diff[0] and "shift_s = 3000.0" in diff[1]


@pytest.mark.parametrize("entry, key, why", [
    (dict(ENTRY, shift_s=0.0), "clock_correction.shift_s", "must be non-zero"),
    (dict(ENTRY, shift_s=200000.0), "clock_correction.shift_s", "at most 86400 s"),
    (dict(ENTRY, confirmed_by=" "), "clock_correction.confirmed_by", "name the person"),
    (dict(ENTRY, surprise=1), "clock_correction.surprise", "remove it or check its spelling"),
], ids=["zero", "two days", "nobody", "unknown key"])
def test_an_invalid_edit_is_refused_in_one_line_and_the_file_is_unchanged(register, entry, key, why):
    before = register.read_bytes()
    with pytest.raises(ConfigError) as err:
        write_clock_corrections(register, {"kc-mid-probe-2026-09": entry})
    text = str(err.value)
    assert "\n" not in text and text.startswith(f"{register}: key deployment[2] (id 'kc-mid-probe-2026-09').{key}")
    assert why in text and text.endswith("(the register file was left unchanged)")
    assert register.read_bytes() == before


def test_an_unknown_deployment_is_refused_and_the_file_is_unchanged(register):
    before = register.read_bytes()
    with pytest.raises(ConfigError, match="no \\[\\[deployment\\]\\] table with id 'kc-nowhere'"):
        write_clock_corrections(register, {"kc-nowhere": ENTRY})
    assert register.read_bytes() == before


def test_text_edit_keeps_crlf_line_ends(register):
    text = register.read_text().replace("\n", "\r\n")
    out = with_clock_corrections(text, {"kc-low-ph-2026-09": ENTRY}, path=register)
    assert added_lines(text.replace("\r\n", "\n"), out.replace("\r\n", "\n"))[0].startswith("clock_correction")
    assert out.count("\n") == out.count("\r\n")
