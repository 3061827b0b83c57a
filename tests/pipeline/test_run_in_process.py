"""The demo through the run sequence without the orchestrator: ``nightly_run(ctx, InProcess())``.

Expected counts come from the files on disk and the demo's answer key (sample_raw/injected.json:
the files its faults say must be quarantined, the files it lists per deployment), and the
re-run expectations from DEVELOPERS.md "Order of work in a run".
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from qcpipe import pipeline
from qcpipe.pipeline.run import InProcess, nightly_run, rerun
from tests.conftest import _listing, demo_in_process


def versions(ctx) -> dict[str, int]:
    return {d.id: (ctx.catalog.latest_dataset(d.id) or {}).get("version", 0) for d in ctx.register.deployment}


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = demo_in_process(tmp_path_factory.mktemp("inprocess"))
    d.key = json.loads((d.root / "sample_raw" / "injected.json").read_text())
    ctx = pipeline.load_context(d.workspace)
    d.listing_first = _listing(d.archive)
    d.datasets_first = ctx.catalog.datasets()
    d.second = nightly_run(ctx, InProcess())
    d.listing_second = _listing(d.archive)
    d.datasets_second = ctx.catalog.datasets()
    d.runs_after_second = ctx.catalog.runs()
    return d


def inbox_files(d) -> set[str]:
    return {str(p.relative_to(d.inbox)) for p in d.inbox.rglob("*") if p.is_file()}


def must_be_quarantined(d) -> set[str]:
    """Files the answer key's faults name for quarantine (caught before QC, at discovery or ingest)."""
    return {f["file"] for f in d.key["faults"] if f.get("file") and f.get("caught_by") in ("discover", "ingest")
            and "quarantine" in f.get("note", "")}


def test_archive_is_where_the_workspace_says(demo):
    assert demo.archive == (demo.root / "demo_archive").resolve()


def test_every_inbox_file_archived_or_quarantined(demo):
    ctx = pipeline.load_context(demo.workspace)
    files = inbox_files(demo)
    quarantine = must_be_quarantined(demo)
    assert len(quarantine) == 2 and quarantine <= files        # the unknown spare logger, the cut transfer
    rows = ctx.catalog.raw_files()
    by_status = {s: {r["original_path"] for r in rows if r["status"] == s} for s in ("archived", "quarantined")}
    as_rel = {s: {str(pathlib_rel(p, demo.inbox)) for p in paths} for s, paths in by_status.items()}
    assert as_rel["quarantined"] == quarantine
    assert as_rel["archived"] == files - quarantine
    assert len(rows) == len(files)
    assert demo.first.files_seen == len(files) and demo.first.ingested == len(files) - len(quarantine)
    assert {q.name for q in demo.first.quarantined} == {p.rsplit("/", 1)[-1] for p in quarantine}
    # each quarantined file is copied with its reason beside it; each archived one has its raw copy
    qdir = demo.archive / "quarantine"
    assert len(list(qdir.glob("*.reason.txt"))) == len(quarantine)
    assert len([p for p in qdir.iterdir() if not p.name.endswith(".reason.txt")]) == len(quarantine)
    assert len([p for p in (demo.archive / "raw").rglob("*") if p.is_file()]) == len(files) - len(quarantine)


def pathlib_rel(path: str, inbox) -> str:
    return str(Path(path).resolve().relative_to(inbox.resolve()))


def test_one_dataset_per_deployment_made_from_the_files_the_answer_key_lists(demo):
    ctx = pipeline.load_context(demo.workspace)
    key = {k["deployment"]: k for k in demo.key["deployments"]}
    assert set(key) == {d.id for d in ctx.register.deployment}
    assert sorted((r["deployment"], r["version"]) for r in demo.datasets_first) == sorted((d, 1) for d in key)
    archived = {r["sha256"]: str(pathlib_rel(r["original_path"], demo.inbox))
                for r in ctx.catalog.raw_files(status="archived")}
    for row in demo.datasets_first:
        assert sorted(archived[h] for h in row["raw_sha256"]) == sorted(key[row["deployment"]]["files"])
        dep = ctx.register.deployment_by_id(row["deployment"])
        assert row["path"] == str(ctx.paths.dataset(dep.station, dep.id, 1))
        assert (demo.archive / "datasets" / dep.station / f"qcpipe_{dep.station}_{dep.id}_v001.nc").exists()
        assert row["samples"] == key[row["deployment"]]["samples_in_window"]
    assert len(demo.first.results) == len(key)


def test_second_run_finds_nothing_new_and_writes_nothing(demo):
    assert demo.second.nothing_new and demo.second.results == [] and demo.second.quarantined == []
    assert demo.second.files_seen == demo.first.files_seen
    assert demo.second.files_known == demo.first.files_seen
    assert demo.listing_second == demo.listing_first               # same files, same modification times
    assert demo.datasets_second == demo.datasets_first
    assert [(r["kind"], r["outcome"]) for r in demo.runs_after_second] == [("nightly", "completed"),
                                                                           ("nightly", "nothing new")]


def test_forced_rerun_of_a_probe_writes_the_next_version_of_it_and_its_station(demo):
    # a probe's record is the immersion state of its station's instruments; nothing else depends on it
    ctx = pipeline.load_context(demo.workspace)
    before = versions(ctx)
    listing = _listing(demo.archive)
    assert rerun(ctx, InProcess(), ["kc-mid-probe-2026-09"]).unchanged == ["kc-mid-probe-2026-09"]
    assert versions(ctx) == before                              # nothing changed: nothing written
    summary = rerun(ctx, InProcess(), ["kc-mid-probe-2026-09"], even_if_unchanged=True)
    after = versions(ctx)
    expect = {"kc-mid-probe-2026-09", "kc-mid-temp-2026-09"}
    assert {d for d in after if after[d] != before[d]} == expect
    assert all(after[d] == before[d] + 1 for d in expect)
    assert sorted(r.deployment for r in summary.results) == sorted(expect)
    assert summary.reruns == {
        "kc-mid-probe-2026-09": ["asked for with --even-if-unchanged (no input changed)"],
        "kc-mid-temp-2026-09": ["immersion probe kc-mid-probe-2026-09 of the station is QC'd in this run "
                                "(the station's immersion state)"]}
    # the other stations' datasets were not touched
    now = _listing(demo.archive)
    changed = {p for p in now if listing.get(p) != now[p]}
    assert not any(p.startswith("datasets/kc-high/") or p.startswith("datasets/kc-low/")
                   or p.startswith("datasets/kc-pier/") or p.startswith("datasets/kc-deck/") for p in changed)
    assert rerun(pipeline.load_context(demo.workspace), InProcess()).nothing_new


def test_changed_ph_threshold_re_qcs_exactly_the_ph_deployment(demo):
    # only the low-shore sonde measures pH (answer key: one deployment whose files are low_sonde.tsv),
    # and no other deployment depends on it
    ph_deps = {k["deployment"] for k in demo.key["deployments"]
               if all(f.endswith("low_sonde.tsv") for f in k["files"])}
    assert ph_deps == {"kc-low-ph-2026-09"}
    rules = demo.root / "qc_rules" / "kelpwhistle-cove.toml"
    text = rules.read_text()
    old = 'spike = { half_window = "30 min", suspect = 0.4, fail = 1.0 }'
    assert text.count(old) == 1
    rules.write_text(text.replace(old, old.replace("suspect = 0.4", "suspect = 0.3")))
    ctx = pipeline.load_context(demo.workspace)
    before = versions(ctx)
    summary = rerun(ctx, InProcess())
    after = versions(ctx)
    assert {d for d in after if after[d] != before[d]} == ph_deps
    assert after["kc-low-ph-2026-09"] == before["kc-low-ph-2026-09"] + 1
    assert summary.reruns == {"kc-low-ph-2026-09": ["rules.ph.spike.suspect: 0.4 -> 0.3"]}
    row = ctx.catalog.latest_dataset("kc-low-ph-2026-09")
    assert row["rules_sha256"] == ctx.rules.sha256 and row["qc_inputs"]["rules"]["ph"]["spike"]["suspect"] == 0.3
    assert rerun(pipeline.load_context(demo.workspace), InProcess()).nothing_new


def test_changed_temperature_threshold_at_one_station_re_qcs_its_temperature_series(demo):
    # a station override for temperature at kc-low: its temperature logger and the pH sonde (which also
    # records temperature) change; its probe does not record temperature, so nothing depends on them
    rules = demo.root / "qc_rules" / "kelpwhistle-cove.toml"
    rules.write_text(rules.read_text() + '\n[station.kc-low.variable.temperature]\nspike = { suspect = 3.5 }\n')
    ctx = pipeline.load_context(demo.workspace)
    before = versions(ctx)
    rerun(ctx, InProcess())
    after = versions(ctx)
    assert {d for d in after if after[d] != before[d]} == {"kc-low-temp-2026-09", "kc-low-ph-2026-09"}
