"""Inboxes as people use them (issue 18): files that vanish, grow or change during a run, and links.

The run is the nightly sequence without the orchestrator (``nightly_run(ctx, InProcess())``) on a
copy of the demo cut down to two temperature loggers' files (cheap).  A file is changed by a real
filesystem action at a defined point of the run: right after the inbox is listed (the listing
function wrapped), right before a file is hashed (the hashing function wrapped), or right before
the read step (a runner that acts, then runs the step).  Nothing of SQLite or Prefect is replaced.
Expected values come from the test's own bookkeeping: which file it moved and its SHA-256 by
``hashlib``; the archive's accounting is checked by ``qcpipe.archive.audit`` (SHA-256 of every
copy against the catalog).
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import pytest

from qcpipe.archive.audit import audit_archive
from qcpipe.ingest import discover
from qcpipe.ingest.discover import list_inbox
from qcpipe.pipeline.context import load_context
from qcpipe.pipeline.run import InProcess, nightly_run
from qcpipe.report.summary import summary_lines
from tests.conftest import copy_demo, run_cli, run_sequence, small_demo

KEEP = ("TL7-20940_temp.csv", "TL7-20934_temp.csv")      # small_demo's inbox, in its folder FIRST
FIRST = "2026-10-05_download"


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def catalog_hashes(ctx) -> set[str]:
    return {r["sha256"] for r in ctx.catalog.raw_files()}


def run(ws) -> tuple:
    ctx = load_context(ws)
    return ctx, nightly_run(ctx, InProcess())


class ActBeforeRead(InProcess):
    """Runs each step at once, but first does ``act(path)`` to the file a read step is about to read."""

    def __init__(self, act):
        self.act = act

    def submit(self, step, *args):
        if step == "read-raw-file":
            self.act(args[1].path)
        return super().submit(step, *args)


def test_file_moved_out_after_listing_is_skipped_and_read_when_back(tmp_path, monkeypatch):
    ws, inbox = small_demo(tmp_path)
    moved = inbox / FIRST / KEEP[0]
    digest = sha(moved)
    aside = tmp_path / "aside.csv"
    real = discover.list_inbox

    def list_then_move(folder):
        listed = real(folder)
        shutil.move(moved, aside)                     # a technician takes the file out during the run
        return listed

    monkeypatch.setattr(discover, "list_inbox", list_then_move)
    ctx, s = run(ws)
    assert s.ingested == 1 and not s.quarantined
    assert len(s.skipped_in_inbox) == 1 and s.skipped_in_inbox[0].startswith(f"{FIRST}/{KEEP[0]}: vanished")
    assert "1 skipped this run" in summary_lines(s)[0]
    assert summary_lines(s)[1 + len(s.quarantined) + len(s.repeated_in_inbox)] == f"  skipped {s.skipped_in_inbox[0]}"
    page = Path(s.report).read_text()
    assert "Inbox files skipped this run" in page and f"{FIRST}/{KEEP[0]}: vanished" in page
    assert digest not in catalog_hashes(ctx)
    monkeypatch.undo()
    shutil.move(aside, moved)                         # back, unchanged
    ctx, s = run(ws)
    assert s.ingested == 1 and s.skipped_in_inbox == [] and digest in catalog_hashes(ctx)
    assert audit_archive(ctx.paths, ctx.catalog).problems == []


def test_file_growing_while_hashed_is_skipped_then_read_once_stable(tmp_path, monkeypatch):
    ws, inbox = small_demo(tmp_path)
    growing = inbox / FIRST / KEEP[1]
    real = discover.sha256_of_file

    def grow_then_hash(path):
        if Path(path) == growing:
            with open(growing, "ab") as fh:           # the copy onto the inbox is still going on
                fh.write(b"\n")
        return real(path)

    monkeypatch.setattr(discover, "sha256_of_file", grow_then_hash)
    ctx, s = run(ws)
    assert s.ingested == 1 and not s.quarantined
    assert len(s.skipped_in_inbox) == 1 and s.skipped_in_inbox[0].startswith(f"{FIRST}/{KEEP[1]}: changed")
    assert ctx.catalog.inbox_hashes().get(str(growing)) is None       # not cached: read again next run
    monkeypatch.undo()
    ctx, s = run(ws)
    assert s.ingested == 1 and s.skipped_in_inbox == [] and sha(growing) in catalog_hashes(ctx)
    assert audit_archive(ctx.paths, ctx.catalog).problems == []


@pytest.mark.parametrize("action", ["vanish", "change"])
def test_file_vanishing_or_changing_before_its_read_is_skipped(tmp_path, action):
    """Between hashing (planning) and the read step: no traceback, nothing quarantined, no copy whose
    content differs from its hash; the next run reads the file as it is then."""
    ws, inbox = small_demo(tmp_path)
    target = inbox / FIRST / KEEP[0]
    listed_digest = sha(target)
    aside = tmp_path / "aside.csv"

    def act(path):
        if path != target:
            return
        if action == "vanish":
            shutil.move(target, aside)
        else:
            with open(target, "ab") as fh:
                fh.write(b"\n")

    ctx = load_context(ws)
    s = nightly_run(ctx, ActBeforeRead(act))
    word = "vanished" if action == "vanish" else "changed"
    assert s.ingested == 1 and not s.quarantined
    assert [x.split(":")[0] for x in s.skipped_in_inbox] == [f"{FIRST}/{KEEP[0]}"]
    assert f": {word} " in s.skipped_in_inbox[0]
    assert listed_digest not in catalog_hashes(ctx)
    assert not any((ctx.paths.root / "quarantine").glob("*"))
    assert audit_archive(ctx.paths, ctx.catalog).problems == []
    if action == "vanish":
        shutil.move(aside, target)
    ctx, s = run(ws)
    assert s.ingested == 1 and s.skipped_in_inbox == [] and sha(target) in catalog_hashes(ctx)
    assert audit_archive(ctx.paths, ctx.catalog).problems == []


# --- the inbox and the archive apart ----------------------------------------------------------------

def _workspace_with(ws: Path, inbox: str, archive: str) -> None:
    text = ws.read_text()
    text = text.replace('inbox = "inbox"', f'inbox = "{inbox}"').replace('archive = "../demo_archive"',
                                                                        f'archive = "{archive}"')
    ws.write_text(text)


@pytest.mark.parametrize("inbox, archive, why", [
    ("inbox", "inbox", "is the archive folder"),
    ("../demo_archive/incoming", "../demo_archive", "lies inside the archive"),
    ("inbox", "inbox/archive", "holds the archive"),
], ids=["same", "inbox-inside-archive", "archive-inside-inbox"])
def test_qcpipe_check_refuses_an_inbox_overlapping_the_archive(tmp_path, inbox, archive, why):
    ws = copy_demo(tmp_path)
    _workspace_with(ws, inbox, archive)
    r = run_cli("check", "--workspace", str(ws))
    assert r.returncode == 2 and r.stdout == ""
    lines = r.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"qcpipe: error: {ws}: key paths.inbox: ") and why in lines[0]


def test_an_inbox_linking_into_the_archive_is_refused_before_anything_is_read(tmp_path):
    """The user's case: a folder link in the inbox into the archive (catalog included).  ``qcpipe check``
    and the run both refuse it in one line; the run reads, quarantines and records nothing."""
    ws, inbox = small_demo(tmp_path)
    ctx, first = run(ws)
    before = {r["sha256"] for r in ctx.catalog.raw_files()}
    (inbox / "shared").symlink_to(ctx.paths.root, target_is_directory=True)
    r = run_cli("check", "--workspace", str(ws))
    assert r.returncode == 2 and len(r.stderr.splitlines()) == 1
    assert "key paths.inbox: " in r.stderr and "shared that leads into the archive" in r.stderr
    shutil.copy(tmp_path / "sample_raw" / "register.toml", inbox / FIRST / "x.csv")   # something new to read
    r = run_sequence("process", ws)
    assert r.returncode == 2 and len(r.stderr.splitlines()) == 1 and "leads into the archive" in r.stderr
    assert {r["sha256"] for r in ctx.catalog.raw_files()} == before
    assert not any((ctx.paths.root / "quarantine").glob("*"))


def test_links_are_followed_only_within_the_inbox(tmp_path):
    inbox, outside = tmp_path / "inbox", tmp_path / "elsewhere"
    (inbox / "a").mkdir(parents=True)
    outside.mkdir()
    (inbox / "a" / "one.csv").write_text("1\n")
    (outside / "two.csv").write_text("2\n")
    (inbox / "one-again.csv").symlink_to(inbox / "a" / "one.csv")            # inside: followed
    (inbox / "a-again").symlink_to(inbox / "a", target_is_directory=True)    # inside folder: not walked twice
    (inbox / "two.csv").symlink_to(outside / "two.csv")                      # outside: not read
    (inbox / "far").symlink_to(outside, target_is_directory=True)            # outside folder: not walked
    (inbox / "broken.csv").symlink_to(tmp_path / "nowhere.csv")              # leads nowhere
    files, links = list_inbox(inbox)
    assert files == [inbox / "a" / "one.csv", inbox / "one-again.csv"]
    assert links == [(inbox / "broken.csv", None), (inbox / "far", outside), (inbox / "two.csv", outside / "two.csv")]
    new, counts, _ = discover.discover_files(inbox, set())
    assert [f.path for f in new] == [inbox / "a" / "one.csv"]
    assert counts["repeated_in_inbox"] == ["one-again.csv (same content as a/one.csv)"]
    assert sorted((s.path, s.why) for s in counts["skipped"]) == [
        ("broken.csv", "link_out"), ("far", "link_out"), ("two.csv", "link_out")]
