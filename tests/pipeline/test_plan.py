"""plan_qc on the demo's context with pre-QC stores written by the merge steps (no QC, no orchestrator),
and prune_versions with keep_versions.

Expected plans come from DEVELOPERS.md "Order of work in a run" applied to the demo register by hand:
one site (kelpwhistle-cove); a barometer at kc-deck, an absolute level logger at kc-pier (it subtracts
the barometer), and three shore stations, each with an immersion probe and a temperature logger
(kc-low also a pH sonde).  ``test_register_is_what_the_expectations_assume`` checks those facts
against the register file read with tomllib, so a changed demo fails there first.
"""

from __future__ import annotations

import dataclasses
import shutil
import tomllib
from pathlib import Path

import pytest

from qcpipe import pipeline
from qcpipe.pipeline.deployment import prune_versions, qc_deployment
from qcpipe.pipeline.inbox import find_new_files, group_by_deployment, read_one_file
from qcpipe.pipeline.plan import plan_qc
from qcpipe.pipeline.store import merge_new_files
from tests.conftest import REPO

BARO = "kc-deck-baro-2026-09"
GAUGE = "kc-pier-level-2026-09"
HIGH = ["kc-high-probe-2026-09", "kc-high-temp-2026-09"]
MID = ["kc-mid-probe-2026-09", "kc-mid-temp-2026-09"]
LOW = ["kc-low-probe-2026-09", "kc-low-ph-2026-09", "kc-low-temp-2026-09"]     # probe first, then by id
ALL_STATIONS = {"kc-high": HIGH, "kc-low": LOW, "kc-mid": MID}


@pytest.fixture(scope="module")
def ctx(tmp_path_factory):
    root = tmp_path_factory.mktemp("plan")
    shutil.copytree(REPO / "sample_raw", root / "sample_raw")
    shutil.copytree(REPO / "qc_rules", root / "qc_rules")
    c = pipeline.load_context(root / "sample_raw" / "workspace.toml")
    new, _ = find_new_files(c)
    read = [read_one_file(raw, c.register, c.layouts) for raw in new]
    for dep, files in group_by_deployment([o.ingested for o in read if o.ingested is not None]).items():
        merge_new_files(c, dep, files)
    return c


def as_tuple(plan):
    return plan.barometers, plan.gauges, plan.stations, plan.sites


def test_register_is_what_the_expectations_assume():
    reg = tomllib.loads((REPO / "sample_raw" / "register.toml").read_text())
    kind = {i["serial"]: i["kind"] for i in reg["instrument"]}
    site = {s["id"]: s["site"] for s in reg["station"]}
    deps = {d["id"]: (d["station"], kind[d["instrument"]]) for d in reg["deployment"]}
    assert set(site.values()) == {"kelpwhistle-cove"}
    assert deps[BARO] == ("kc-deck", "barometer")
    assert deps[GAUGE][1] == "pressure"
    assert set(deps) == {BARO, GAUGE, *HIGH, *MID, *LOW}
    for station, ids in ALL_STATIONS.items():
        assert [deps[d] for d in ids][0] == (station, "immersion_probe")
        assert all(deps[d][0] == station and deps[d][1] not in ("barometer", "pressure") for d in ids)
    gauge = next(d for d in reg["deployment"] if d["id"] == GAUGE)
    assert gauge["pressure"].get("use_barometer", True)          # absolute logger: subtracts the barometer


def test_every_deployment_has_a_store_after_the_merge_steps(ctx):
    for d in ctx.register.deployment:
        assert ctx.paths.ingested(d.station, d.id).exists(), d.id


def test_everything_touched_is_ordered_barometer_gauge_stations_probe_first(ctx):
    plan = plan_qc(ctx, {d.id for d in ctx.register.deployment})
    assert as_tuple(plan) == ([BARO], [GAUGE], ALL_STATIONS, ["kelpwhistle-cove"])
    assert list(plan.stations) == sorted(plan.stations)


def test_nothing_touched_plans_nothing(ctx):
    assert as_tuple(plan_qc(ctx, set())) == ([], [], {}, [])


def test_a_new_gauge_record_re_qcs_every_probe_of_the_site_and_their_stations(ctx):
    # the gauge is the site's reference level -> every probe -> every instrument of the probes' stations;
    # the barometer feeds the gauge, it does not depend on it
    assert as_tuple(plan_qc(ctx, {GAUGE})) == ([], [GAUGE], ALL_STATIONS, ["kelpwhistle-cove"])


def test_a_new_probe_record_re_qcs_its_station_only(ctx):
    assert as_tuple(plan_qc(ctx, {"kc-mid-probe-2026-09"})) == ([], [], {"kc-mid": MID}, ["kelpwhistle-cove"])
    assert plan_qc(ctx, {"kc-low-probe-2026-09"}).stations == {"kc-low": LOW}


def test_a_new_barometer_record_re_qcs_the_level_logger_and_what_it_feeds(ctx):
    assert as_tuple(plan_qc(ctx, {BARO})) == ([BARO], [GAUGE], ALL_STATIONS, ["kelpwhistle-cove"])


def test_an_ordinary_instrument_has_no_dependents(ctx):
    assert as_tuple(plan_qc(ctx, {"kc-high-temp-2026-09"})) == ([], [], {"kc-high": ["kc-high-temp-2026-09"]},
                                                                 ["kelpwhistle-cove"])
    # two at one station, no probe among them: the station lists them by id
    assert plan_qc(ctx, {"kc-low-temp-2026-09", "kc-low-ph-2026-09"}).stations == {
        "kc-low": ["kc-low-ph-2026-09", "kc-low-temp-2026-09"]}


def test_dependents_without_a_store_are_not_added(ctx):
    dep = ctx.register.deployment_by_id("kc-high-temp-2026-09")
    store = ctx.paths.ingested(dep.station, dep.id)
    aside = store.with_name(store.name + ".aside")
    store.rename(aside)
    try:
        assert plan_qc(ctx, {"kc-high-probe-2026-09"}).stations == {"kc-high": ["kc-high-probe-2026-09"]}
        # but a deployment asked for by name is planned even without a store
        assert plan_qc(ctx, {dep.id}).stations == {"kc-high": [dep.id]}
    finally:
        aside.rename(store)


def test_prune_versions_keeps_the_newest_n(ctx):
    # three versions of the barometer (QC'd from its store; it needs no tide), keeping two
    keep2 = dataclasses.replace(ctx, keep_versions=2)
    results = [qc_deployment(keep2, BARO) for _ in range(3)]
    assert [r.version for r in results] == [1, 2, 3]
    written = [Path(r.dataset) for r in results]
    rows = ctx.catalog.dataset_versions(BARO)
    assert [(r["version"], r["pruned"]) for r in rows] == [(1, 1), (2, 0), (3, 0)]
    assert not written[0].exists() and written[1].exists() and written[2].exists()
    # keep_versions = 0 keeps everything: nothing to remove
    assert prune_versions(ctx, BARO) == []
    # keep one: only version 2 goes (version 1 is gone already and is not counted again)
    keep1 = dataclasses.replace(ctx, keep_versions=1)
    assert prune_versions(keep1, BARO) == [written[1]]
    assert [(r["version"], r["pruned"]) for r in ctx.catalog.dataset_versions(BARO)] == [(1, 1), (2, 1), (3, 0)]
    assert written[2].exists() and not written[1].exists()
    assert prune_versions(keep1, BARO) == []
    # ACDD date_created is when the dataset was first created (version 1), also for a version written
    # after version 1's file was pruned (a second later, so its own time would differ)
    import time

    from qcpipe.archive.ncio import read_attrs
    time.sleep(1.1)
    v4 = qc_deployment(keep1, BARO)
    assert v4.version == 4 and read_attrs(v4.dataset)["date_created"] == rows[0]["created"]
