"""A run with nothing to do is decided and recorded without the orchestrator (issue 16, section 1).

The archive is made by the run sequence without the orchestrator (``nightly_run(ctx,
InProcess())``, as in test_run_in_process.py) on a copy of the demo; then ``qcpipe process``
runs in a subprocess, and what it imported is read from the module list it writes when
``QCPIPE_DEBUG_MODULES`` names a file.  Expected counts come from the files on disk; content
hashes are checked against ``hashlib`` (Python's standard library), not against qcpipe.
No timing is asserted here: the wall time is measured by benchmarks/orchestrator_share.py.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3
import subprocess
import sys

import pytest

from qcpipe.errors import ConfigError
from qcpipe.ingest.discover import discover_files
from qcpipe.pipeline.context import load_context
from qcpipe.pipeline.plan import pending_work
from qcpipe.pipeline.run import run_if_nothing_to_do
from tests.conftest import demo_in_process, run_cli

#: modules a nothing-to-do run must not import: the orchestrator, and the QC's heavy libraries
HEAVY = ("prefect", "prefect_dask", "xarray", "pandas", "matplotlib", "distributed")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = demo_in_process(tmp_path_factory.mktemp("nothing-to-do"))
    d.rules = d.root / "qc_rules" / "kelpwhistle-cove.toml"
    return d


def inbox_files(d) -> list:
    return sorted(p for p in d.inbox.rglob("*") if p.is_file() and not p.name.startswith("."))


def test_first_run_did_work(demo):
    assert not demo.first.nothing_new and demo.first.files_seen == len(inbox_files(demo))


def test_nothing_new_process_records_the_run_without_the_orchestrator(demo, tmp_path):
    runs_before = load_context(demo.workspace).catalog.runs()
    modules = tmp_path / "modules.txt"
    r = run_cli("process", "--workspace", str(demo.workspace), cwd=demo.root,
                env={"QCPIPE_DEBUG_MODULES": str(modules), "PREFECT_HOME": str(tmp_path / "prefect-home")})
    assert r.returncode == 0, r.stderr
    assert r.stderr == ""
    n = len(inbox_files(demo))
    line = f"nothing new: {n} file(s) in the inbox, all already in the archive {demo.archive}"
    assert line in r.stdout.splitlines()
    assert "orchestrator not started" in r.stdout
    imported = set(modules.read_text().split())
    assert "qcpipe.pipeline.run" in imported                     # the hook saw the command's own modules
    assert not {m for m in imported if m.split(".")[0] in HEAVY}
    assert not (tmp_path / "prefect-home").exists()             # the orchestrator's folder was not even made
    runs = load_context(demo.workspace).catalog.runs()
    assert len(runs) == len(runs_before) + 1
    last = runs[-1]
    assert (last["kind"], last["outcome"]) == ("nightly", "nothing new") and last["ended"]
    assert last["counts"]["files_seen"] == n and last["counts"]["files_known"] == n
    assert last["counts"]["ingested"] == 0


def test_quiet_nothing_new_prints_only_the_summary_line(demo):
    r = run_cli("process", "--workspace", str(demo.workspace), "--quiet", cwd=demo.root)
    assert r.returncode == 0, r.stderr
    assert r.stdout.splitlines() == [f"nothing new: {len(inbox_files(demo))} file(s) in the inbox, "
                                     f"all already in the archive {demo.archive}"]


def test_rerun_with_nothing_changed_records_a_rerun_without_the_orchestrator(demo, tmp_path):
    modules = tmp_path / "modules.txt"
    r = run_cli("rerun", "--workspace", str(demo.workspace), cwd=demo.root,
                env={"QCPIPE_DEBUG_MODULES": str(modules)})
    assert r.returncode == 0, r.stderr
    # a re-run does not look at the inbox: it says nothing changed, not how many files the inbox holds
    assert "nothing changed" in r.stdout and "nothing written" in r.stdout
    assert "inbox" not in r.stdout
    assert not {m for m in modules.read_text().split() if m.split(".")[0] in HEAVY}
    last = load_context(demo.workspace).catalog.runs()[-1]
    assert (last["kind"], last["outcome"]) == ("rerun", "nothing new")


def test_unchanged_files_are_not_read_again_and_touched_ones_are(demo):
    ctx = load_context(demo.workspace)
    pending_work(ctx)                                # caches every file (the copies have settled by now)
    cached = ctx.catalog.inbox_hashes()
    files = inbox_files(demo)
    assert set(cached) == {str(p) for p in files}             # every file older than the settling time
    for p in files:
        assert cached[str(p)][3] == hashlib.sha256(p.read_bytes()).hexdigest()
    # a cached hash whose size and time stamps still match is taken as it is (the file is not read):
    # a planted wrong hash comes back as a new file
    target = files[0]
    planted = dict(cached)
    planted[str(target)] = (*cached[str(target)][:3], "0" * 64)
    new, counts, _ = discover_files(demo.inbox, ctx.catalog.known_hashes(), planted)
    assert [f.path for f in new] == [target] and counts["known"] == len(files) - 1
    # touched (same content, new modification time): the stamps differ, so it is read and hashed again
    st = target.stat()
    os.utime(target, ns=(st.st_atime_ns, st.st_mtime_ns - 3_600_000_000_000))
    new, counts, hashes = discover_files(demo.inbox, ctx.catalog.known_hashes(), planted)
    assert new == [] and counts["known"] == len(files)
    assert str(target) not in hashes            # its status-change time is now: cached once it has settled
    work = pending_work(ctx)
    assert work.nothing and work.new_files == [] and work.reread == [] and work.stale == {}
    runs_before = len(ctx.catalog.runs())
    summary = run_if_nothing_to_do(ctx)
    assert summary is not None and summary.nothing_new and summary.files_known == len(files)
    assert len(ctx.catalog.runs()) == runs_before + 1


def test_a_new_file_is_work(demo):
    extra = demo.inbox / "2026-10-26_download" / "field-notes-extra.csv"
    extra.write_text("a file whose content the archive does not have\n", encoding="utf-8")
    try:
        ctx = load_context(demo.workspace)
        runs_before = len(ctx.catalog.runs())
        work = pending_work(ctx)
        assert [f.path for f in work.new_files] == [extra] and not work.nothing
        assert run_if_nothing_to_do(ctx) is None                 # the command goes on to the real run
        assert len(ctx.catalog.runs()) == runs_before              # and this check recorded none
    finally:
        extra.unlink()


def test_a_changed_rule_is_work_and_a_rerun_is_too(demo):
    text = demo.rules.read_text(encoding="utf-8")
    old = 'spike = { half_window = "20 min", suspect = 4.0, fail = 7.0 }'
    assert text.count(old) == 1
    demo.rules.write_text(text.replace(old, old.replace("suspect = 4.0", "suspect = 4.5")), encoding="utf-8")
    try:
        ctx = load_context(demo.workspace)
        work = pending_work(ctx)
        assert work.new_files == [] and work.reread == [] and not work.nothing
        # every deployment with a temperature record uses the changed spike rule: all but the probes
        temperature = {d.id for d in ctx.register.deployment if ctx.register.kind_of(d.id) != "immersion_probe"}
        assert set(work.stale) == temperature
        assert all(any("spike" in why for why in work.stale[d]) for d in temperature)
        assert run_if_nothing_to_do(ctx) is None
        assert run_if_nothing_to_do(ctx, kind="rerun") is None
    finally:
        demo.rules.write_text(text, encoding="utf-8")
    assert pending_work(load_context(demo.workspace)).nothing


def test_a_rerun_asked_for_unchanged_deployments_is_work_only_when_forced(demo):
    ctx = load_context(demo.workspace)
    assert run_if_nothing_to_do(ctx, ["kc-mid-probe-2026-09"], kind="rerun", even_if_unchanged=True) is None
    versions = [r["version"] for r in ctx.catalog.dataset_versions("kc-mid-probe-2026-09")]
    idle = run_if_nothing_to_do(ctx, ["kc-mid-probe-2026-09"], kind="rerun")
    assert idle is not None and idle.nothing_new and idle.unchanged == ["kc-mid-probe-2026-09"]
    assert [r["version"] for r in ctx.catalog.dataset_versions("kc-mid-probe-2026-09")] == versions


def test_cache_write_keeps_the_old_cache_or_the_new_one(demo):
    ctx = load_context(demo.workspace)
    before = ctx.catalog.inbox_hashes()
    assert before                                    # the runs above cached the inbox
    bad = {"/nowhere/a": (1, 2, 3, "x"), "/nowhere/b": (1, 2, 3, None)}     # NOT NULL sha256: the insert fails
    with pytest.raises(sqlite3.IntegrityError):
        ctx.catalog.save_inbox_hashes(bad)
    assert ctx.catalog.inbox_hashes() == before      # the delete before the failed insert was rolled back


def test_import_steps_loads_what_steps_import_on_threads():
    # a runner on threads calls import_steps first, so no two task threads import these at once
    # (a first import of dask.distributed from two threads left a half-initialised module)
    code = ("import sys\nfrom qcpipe.pipeline.run import import_steps\n"
            "before = {m for m in ('xarray', 'pandas', 'matplotlib', 'distributed') if m in sys.modules}\n"
            "import_steps()\n"
            "print(sorted(before), all(m in sys.modules for m in ('xarray', 'pandas', 'matplotlib', 'distributed',"
            " 'qcpipe.pipeline.deployment', 'qcpipe.ingest.readers', 'qcpipe.report.html')))\n")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert r.stdout.split() == ["[]", "True"]


def test_a_failed_decision_is_recorded_as_a_failed_run(demo):
    moved = demo.inbox.with_name("inbox-away")
    demo.inbox.rename(moved)
    try:
        ctx = load_context(demo.workspace)
        runs_before = len(ctx.catalog.runs())
        with pytest.raises(ConfigError, match="paths.inbox"):
            run_if_nothing_to_do(ctx)
        runs = ctx.catalog.runs()
        assert len(runs) == runs_before + 1 and (runs[-1]["kind"], runs[-1]["outcome"]) == ("nightly", "failed")
    finally:
        moved.rename(demo.inbox)
