"""Re-running QC when thresholds, register or annotations change, flag diffs checked against
counts computed here, catalog accounting, fixity, BagIt packages.

The runs are the run sequence without the orchestrator (``run_sequence``: what ``qcpipe
process``/``rerun`` run, without Prefect's start), except one ``qcpipe rerun`` through the real
command and flow (``test_rerun_command_reprocesses_dependents``)."""

from __future__ import annotations

import shutil
import sqlite3

import numpy as np
import pytest
import xarray as xr

from qcpipe.diff import flag_diff_files
from tests.conftest import REPO, run_cli, run_sequence


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    root = tmp_path_factory.mktemp("rerun")
    shutil.copytree(REPO / "sample_raw", root / "sample_raw")
    shutil.copytree(REPO / "qc_rules", root / "qc_rules")
    ws = root / "sample_raw" / "workspace.toml"
    r = run_sequence("process", ws, quiet=True)
    assert r.returncode == 0, r.stderr
    return root


def ws(root):
    return str(root / "sample_raw" / "workspace.toml")


def versions(root) -> dict[str, int]:
    con = sqlite3.connect(root / "demo_archive" / "catalog.sqlite")
    rows = con.execute("SELECT deployment, MAX(version) FROM datasets GROUP BY deployment").fetchall()
    con.close()
    return dict(rows)


def path_of(root, deployment, version):
    con = sqlite3.connect(root / "demo_archive" / "catalog.sqlite")
    (p,) = con.execute("SELECT path FROM datasets WHERE deployment = ? AND version = ?",
                       (deployment, version)).fetchone()
    con.close()
    return root / "demo_archive" / p        # catalog paths are relative to the archive root


def load(path):
    with xr.open_dataset(path) as ds:
        return ds.load()


def spike_deviation(times, values, half_window_s):
    """|x_i - mean of the other samples within +-half_window| by a plain loop (independent of qcpipe);
    NaN where a sample has fewer than 2 neighbours or none on one side (not evaluated)."""
    t = times.astype("datetime64[ns]").astype(np.int64)
    out = np.full(values.size, np.nan)
    for i in range(values.size):
        near = np.abs(t - t[i]) <= half_window_s * 1e9
        near[i] = False
        near &= np.isfinite(values)
        both_sides = near[:i].any() and near[i + 1:].any()
        if near.sum() >= 2 and both_sides and np.isfinite(values[i]):
            out[i] = abs(values[i] - values[near].mean())
    return out


def test_threshold_change_reprocesses_exactly_one_dataset(work):
    before = versions(work)
    rules = work / "qc_rules" / "kelpwhistle-cove.toml"
    rules.write_text(rules.read_text() + '\n[station.kc-high.variable.temperature]\nspike = { suspect = 3.0 }\n')
    r = run_sequence("process", ws(work))
    assert r.returncode == 0, r.stderr
    assert "re-QC kc-high-temp-2026-09: rules.temperature.spike.suspect: 4.0 -> 3.0" in r.stdout
    after = versions(work)
    changed = {d for d in after if after[d] != before[d]}
    assert changed == {"kc-high-temp-2026-09"}
    assert after["kc-high-temp-2026-09"] == before["kc-high-temp-2026-09"] + 1

    old_p = path_of(work, "kc-high-temp-2026-09", before["kc-high-temp-2026-09"])
    new_p = path_of(work, "kc-high-temp-2026-09", after["kc-high-temp-2026-09"])
    old, new = load(old_p), load(new_p)
    # counted here, directly from the two files
    moved = {}
    for name in new.data_vars:
        if "_qc" in name and name in old:
            a, b = old[name].values, new[name].values
            for fa, fb in zip(a[a != b], b[a != b]):
                moved[(name, int(fa), int(fb))] = moved.get((name, int(fa), int(fb)), 0) + 1
    assert moved, "the lower threshold must move some samples"
    # and independently from the definition: spike suspect where 3 < deviation <= 4 (fail is 7)
    emersed = new["immersion"].values == 0          # emersed samples use when_emersed (6 / 10)
    dev = spike_deviation(new["time"].values, new["temperature"].values, 20 * 60)
    expect = (dev > 3.0) & (dev <= 4.0) & ~emersed
    assert moved.get(("temperature_qc_spike", 1, 3), 0) == int(expect.sum())
    d = flag_diff_files(old_p, new_p)
    got = {(f"temperature_qc_{m.check}" if m.check != "aggregate" else "temperature_qc", m.from_flag, m.to_flag):
           m.count for m in d.moves}
    assert got == moved
    assert d.common_samples == new.sizes["time"] and d.only_old == d.only_new == 0
    # the diff command prints the moves and the rule difference that caused them
    r = run_cli("diff", "--workspace", ws(work), "kc-high-temp-2026-09")
    assert r.returncode == 0, r.stderr
    assert "rules.temperature.spike.suspect: 4.0 -> 3.0" in r.stdout
    assert f"temperature spike: {moved[('temperature_qc_spike', 1, 3)]} sample(s) pass -> suspect" in r.stdout
    # new version metadata: id, history, pointer to the previous version
    assert new.attrs["id"].endswith(f"_v{after['kc-high-temp-2026-09']:03d}")
    assert new.attrs["previous_version_id"] == old.attrs["id"]
    assert new.attrs["history"].startswith(old.attrs["history"])
    assert new.attrs["date_created"] == old.attrs["date_created"]
    # nothing left to do
    r = run_sequence("process", ws(work), quiet=True)
    assert "nothing new" in r.stdout


def test_annotations_take_precedence_and_removal_restores(work):
    base_v = versions(work)["kc-high-temp-2026-09"]
    base = load(path_of(work, "kc-high-temp-2026-09", base_v))
    ann = work / "sample_raw" / "annotations.toml"
    ann.write_text('''
[[annotation]]
station = "kc-high"
variables = ["temperature"]
start = 2026-10-01T00:00:00Z
end = 2026-10-02T00:00:00Z
flag = 4
reason = "logger found dislodged at the field visit"
reviewer = "T. Reviewer"
date = 2026-10-05
''')
    wsf = work / "sample_raw" / "workspace.toml"
    if "\nannotations = " not in wsf.read_text():               # the demo's workspace names one already
        wsf.write_text(wsf.read_text().replace('archive = "../demo_archive"',
                                               'archive = "../demo_archive"\nannotations = "annotations.toml"'))
    r = run_sequence("process", ws(work))
    assert r.returncode == 0, r.stderr
    assert versions(work)["kc-high-temp-2026-09"] == base_v + 1
    annotated = load(path_of(work, "kc-high-temp-2026-09", base_v + 1))
    t = annotated["time"].values
    inside = (t >= np.datetime64("2026-10-01T00:00")) & (t <= np.datetime64("2026-10-02T00:00"))
    assert inside.sum() == 145                                    # 24 h at 10 min, both ends included
    np.testing.assert_array_equal(annotated["temperature_qc_manual"].values[inside], 4)
    np.testing.assert_array_equal(annotated["temperature_qc_manual"].values[~inside], 2)
    np.testing.assert_array_equal(annotated["temperature_qc"].values[inside], 4)
    np.testing.assert_array_equal(annotated["temperature_qc"].values[~inside], base["temperature_qc"].values[~inside])
    assert "dislodged" in annotated["temperature_qc_manual"].attrs["comment"]
    # removing the annotation restores the automated flags
    ann.write_text("# no annotations\n")
    r = run_sequence("process", ws(work), quiet=True)
    assert r.returncode == 0, r.stderr
    restored = load(path_of(work, "kc-high-temp-2026-09", base_v + 2))
    np.testing.assert_array_equal(restored["temperature_qc"].values, base["temperature_qc"].values)
    assert "temperature_qc_manual" not in restored


def test_register_clock_correction_rereads_only_that_deployment(work):
    before = versions(work)
    reg = work / "sample_raw" / "register.toml"
    text = reg.read_text()
    old = "clock_check = { logger_time = 2026-10-26T09:43:00, reference_time = 2026-10-26T08:37:00Z }"
    assert old in text                  # the drifting kc-mid temperature logger (6 min fast)
    reg.write_text(text.replace(old, old.replace("09:43:00", "09:41:00")))   # a corrected reading: 4 min
    r = run_sequence("process", ws(work))
    assert r.returncode == 0, r.stderr
    assert "raw files read again" in r.stdout
    after = versions(work)
    assert {d for d in after if after[d] != before[d]} == {"kc-mid-temp-2026-09"}
    old_ds = load(path_of(work, "kc-mid-temp-2026-09", before["kc-mid-temp-2026-09"]))
    new_ds = load(path_of(work, "kc-mid-temp-2026-09", after["kc-mid-temp-2026-09"]))
    assert new_ds.attrs["clock_drift_at_check_s"] == pytest.approx(240.0)
    # the last sample moves by the change in correction, 360 - 240 = 120 s, at the check (almost at the end)
    shift = (new_ds["time"].values[-1] - old_ds["time"].values[-1]).astype("timedelta64[ms]").astype(float) / 1e3
    assert 100 < shift <= 120


def test_rerun_command_reprocesses_dependents(work):
    """The suite's re-run through the real command and flow (an orchestrator start, 15-20 s): the
    re-run flow's tasks in their dependency order; the later re-runs without the orchestrator."""
    before = versions(work)
    r = run_cli("rerun", "--workspace", ws(work), "--deployment", "kc-pier-level-2026-09", "--even-if-unchanged")
    assert r.returncode == 0, r.stderr
    after = versions(work)
    changed = {d for d in after if after[d] != before[d]}
    # a new gauge record changes the reference level of every probe, and so every station; the
    # site's barometer is upstream of the gauge (the gauge subtracts its air pressure), not a dependent
    assert changed == set(after) - {"kc-deck-baro-2026-09"}
    r = run_sequence("rerun", ws(work), deployments=["kc-deck-baro-2026-09"], quiet=True, even_if_unchanged=True)
    assert r.returncode == 0, r.stderr
    again = versions(work)
    # a new barometer record changes the gauge's air pressure, and so everything the gauge feeds
    assert {d for d in again if again[d] != after[d]} == set(after)
    r = run_sequence("rerun", ws(work), quiet=True)
    assert r.stdout.startswith("nothing changed")
    r = run_sequence("rerun", ws(work), deployments=["no-such"])
    assert r.returncode == 2 and "no deployment 'no-such'" in r.stderr


def test_audit_accounts_for_quarantine_and_detects_tampering(work):
    r = run_cli("audit", "--workspace", ws(work))
    assert r.returncode == 0, r.stdout + r.stderr
    assert "18 archived, 2 quarantined" in r.stdout and "all accounted for" in r.stdout
    copies = sorted((work / "demo_archive" / "raw").rglob("*.wet"))
    victim = copies[0]
    original = victim.read_bytes()
    victim.write_bytes(original.replace(b"1", b"2", 1))
    try:
        r = run_cli("audit", "--workspace", ws(work))
        assert r.returncode == 1
        assert "does not match its SHA-256" in r.stdout and victim.name in r.stdout
    finally:
        victim.write_bytes(original)


def test_bags_validate_with_bagit(work, tmp_path):
    import bagit   # PyPI bagit: the Library of Congress BagIt (RFC 8493) implementation

    r = run_cli("package", "--workspace", ws(work), "-d", "kc-low-ph-2026-09", "-d", "kc-pier-level-2026-09",
                "--out", str(tmp_path))
    assert r.returncode == 0, r.stderr
    bags = sorted(tmp_path.glob("*_bag"))
    assert len(bags) == 2
    for b in bags:
        bag = bagit.Bag(str(b))
        bag.validate()                      # raises on any manifest or Payload-Oxum mismatch
        payload = sorted(bag.payload_files())
        assert any(p.startswith("data/raw/") for p in payload)
        assert any(p.startswith("data/dataset/") and p.endswith(".nc") for p in payload)
        assert "data/README.txt" in payload and "data/config/register_excerpt.toml" in payload
    pier = [b for b in bags if "kc-pier" in b.name][0]
    assert any("_tide_events.nc" in p for p in bagit.Bag(str(pier)).payload_files())
