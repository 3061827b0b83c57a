"""The committed demo (sample_raw/) is what the seeded generator writes, and its config loads."""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np
import pytest

from qcpipe.config import load_workspace

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_raw"
GENERATOR = ROOT / "tools" / "make_demo_data.py"
MAX_BYTES = 3_000_000


def _generator():
    spec = importlib.util.spec_from_file_location("make_demo_data", GENERATOR)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _tree(folder: Path) -> dict[str, bytes]:
    files = {p.relative_to(folder).as_posix(): p.read_bytes()
             for p in sorted((folder / "inbox").rglob("*")) if p.is_file()}
    files["injected.json"] = (folder / "injected.json").read_bytes()
    files["tide/kelpwhistle-cove.toml"] = (folder / "tide" / "kelpwhistle-cove.toml").read_bytes()
    return files


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo")
    assert _generator().main(["--out", str(out)]) == 0
    return out


def test_committed_demo_equals_a_fresh_regeneration(regenerated):
    committed, fresh = _tree(SAMPLE), _tree(regenerated)
    assert sorted(committed) == sorted(fresh), "file lists differ: run python tools/make_demo_data.py"
    differ = [name for name in committed if committed[name] != fresh[name]]
    assert not differ, f"files differ from a fresh regeneration: {differ}; run python tools/make_demo_data.py"


def test_generator_is_deterministic(regenerated, tmp_path):
    assert _generator().main(["--out", str(tmp_path)]) == 0
    assert _tree(tmp_path) == _tree(regenerated)


def test_demo_workspace_loads():
    register, layouts, rules = load_workspace(SAMPLE / "workspace.toml").load()
    kinds = sorted({i.kind for i in register.instrument})
    assert kinds == ["barometer", "immersion_probe", "ph", "pressure", "temperature"]
    assert len(register.deployment) == len(register.instrument)
    for variable in ("temperature", "ph", "pressure", "water_level", "wetness", "air_pressure"):
        assert rules.for_variable(variable) is not None, variable


def test_every_raw_file_matches_exactly_one_layout():
    _, layouts, _ = load_workspace(SAMPLE / "workspace.toml").load()
    for path in sorted((SAMPLE / "inbox").rglob("*")):
        if path.is_file():
            matching = [name for name, lay in layouts.layouts.items() if lay.reads(path.name)]
            assert len(matching) == 1, f"{path.name} is read by {matching}"


def test_answer_key_names_known_deployments():
    register, _, _ = load_workspace(SAMPLE / "workspace.toml").load()
    key = json.loads((SAMPLE / "injected.json").read_text("utf-8"))
    deployments = {d.id for d in register.deployment}
    assert {d["deployment"] for d in key["deployments"]} == deployments
    kinds = {f["kind"] for f in key["faults"]}
    assert {"spike", "stuck_value", "out_of_range", "gap", "clock_drift", "clock_one_hour_off",
            "overlap_conflict", "unparseable_file", "unknown_serial", "barometer_spike", "barometer_gap"} <= kinds
    for fault in key["faults"]:
        assert fault["flag"] in (None, 3, 4)
        if fault["kind"] == "unknown_serial":
            assert register.instrument_by_serial(fault["serial"]) is None
        else:
            assert fault.get("deployment", next(iter(deployments))) in deployments
        if "file" in fault:
            assert (SAMPLE / "inbox" / fault["file"]).is_file()


def test_sample_raw_is_small():
    total = sum(p.stat().st_size for p in SAMPLE.rglob("*") if p.is_file())
    assert total < MAX_BYTES, f"sample_raw/ holds {total} bytes; keep it under {MAX_BYTES}"


def test_answer_key_barometer_fallback_is_consistent():
    # the level logger falls back to the constant before the barometer's first sample, after its last
    # and inside its gap; the three counts add up, and the gap is longer than the level logger's
    # barometer_max_gap (the register's default, 2 h) while the barometer's own step (30 min) is not
    key = json.loads((SAMPLE / "injected.json").read_text("utf-8"))
    fb = key["barometer_fallback"]
    parts = (fb["before_first_barometer_sample"]["n"], fb["after_last_barometer_sample"]["n"],
             fb["in_barometer_gap"]["n"])
    assert all(n > 0 for n in parts) and sum(parts) == fb["total"]
    (gap,) = [f for f in key["faults"] if f["kind"] == "barometer_gap"]
    span = np.datetime64(gap["first_after_utc"].rstrip("Z")) - np.datetime64(gap["last_before_utc"].rstrip("Z"))
    assert span > np.timedelta64(fb["max_gap_s"], "s")
    register, _, _ = load_workspace(SAMPLE / "workspace.toml").load()
    level = register.deployment_by_id(fb["deployment"])
    assert level.pressure.barometer_max_gap == fb["max_gap_s"]
