"""A moved or restored archive works unchanged (issue 18 section 1).

The demo is processed once without the orchestrator (``nightly_run(ctx, InProcess())``), a pristine
copy of its archive is kept aside, then the archive is moved and the workspace file pointed at the new
place. Everything after that goes through the real ``qcpipe`` command: audit, a re-run of a probe
deployment (Prefect in embedded local mode; ``--even-if-unchanged``, as nothing changed), diff,
lineage and package. Separately the kept copy is copied once more and deleted (a restore from a
backup), and audit must pass on the restored copy and fail, naming the files, when files the catalog
describes are missing there.

What "the same flags" means is checked against the version written before the move, not against
output of the code under test: every flag variable and the per-sample tide reference of the re-run's
dataset equal those of the dataset made before the move.
"""

from __future__ import annotations

import re
import shutil
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from qcpipe.tide_reference import OBSERVED_GAUGE
from tests.conftest import demo_in_process, run_cli

PROBE = "kc-mid-probe-2026-09"       # a probe at Kelpwhistle Cove, whose QC uses the site's tide gauge


def point_workspace_at(workspace: Path, archive: Path, name: str | None = None) -> Path:
    """The workspace file (or a sibling ``name``) with its archive path set to ``archive``."""
    text = workspace.read_text()
    text, n = re.subn(r'(?m)^archive = .*$', f'archive = "{archive.as_posix()}"', text)
    assert n == 1
    out = workspace.with_name(name) if name else workspace
    out.write_text(text)
    return out


@pytest.fixture(scope="module")
def moved(tmp_path_factory):
    d = demo_in_process(tmp_path_factory.mktemp("reloc"))
    original = d.archive
    # the run closed every catalog connection (the last close checkpoints the WAL and removes it): one left
    # open for the garbage collector loses its locks when copytree closes the files it copied, and reads a
    # "malformed" catalog after the re-run below checkpoints and deletes the WAL under it
    assert sorted(p.name for p in original.glob("catalog.sqlite*")) == ["catalog.sqlite"]
    d.backup = d.root / "backup" / "archive"
    shutil.copytree(original, d.backup, symlinks=True)
    d.moved = d.root / "elsewhere" / "archive"
    d.moved.parent.mkdir()
    shutil.move(original, d.moved)
    assert not original.exists()
    point_workspace_at(d.workspace, d.moved)
    return d


def cli(d, *args):
    return run_cli(*args, "--workspace", str(d.workspace), cwd=d.root)


def test_catalog_stores_paths_relative_to_the_archive(moved):
    con = sqlite3.connect(moved.moved / "catalog.sqlite")
    paths = [r[0] for r in con.execute("SELECT path FROM datasets")]
    copies = [r[0] for r in con.execute("SELECT archived_path FROM raw_files")]
    con.close()
    assert paths and copies
    assert all(not Path(p).is_absolute() and p.startswith("datasets/") for p in paths), paths
    assert all(not Path(p).is_absolute() and p.split("/")[0] in ("raw", "quarantine") for p in copies), copies


def test_moved_archive_audit_rerun_diff_lineage_package(moved):
    d = moved
    audit = cli(d, "audit")
    assert audit.returncode == 0, audit.stdout + audit.stderr
    assert "all accounted for, all hashes match" in audit.stdout and "PROBLEM" not in audit.stdout

    from qcpipe.archive.ncio import read_dataset
    from qcpipe.pipeline.context import load_context

    ctx = load_context(d.workspace)
    assert ctx.paths.root == d.moved.resolve()
    (before,) = ctx.catalog.dataset_versions(PROBE)
    assert Path(before["path"]).parent.parent.parent == d.moved.resolve()

    # nothing changed since the move, so the re-run is asked to write a version anyway (without the option
    # it says "nothing changed" and writes nothing, tests/pipeline/test_counts_reconcile.py)
    rerun = cli(d, "rerun", "--deployment", PROBE, "--even-if-unchanged")
    assert rerun.returncode == 0, rerun.stdout + rerun.stderr
    old, new = ctx.catalog.dataset_versions(PROBE)
    assert (old["version"], new["version"]) == (1, 2)
    assert Path(new["path"]).is_file() and d.moved.resolve() in Path(new["path"]).parents
    a, b = read_dataset(old["path"]), read_dataset(new["path"])
    flags = sorted(v for v in a.data_vars if v.endswith("_qc"))
    assert flags and flags == sorted(v for v in b.data_vars if v.endswith("_qc"))
    for v in flags:
        np.testing.assert_array_equal(a[v].values, b[v].values, err_msg=v)
    # the same tide reference: the site's observed gauge, found through the catalog in the moved archive
    np.testing.assert_array_equal(a["tide_reference_source"].values, b["tide_reference_source"].values)
    assert (b["tide_reference_source"].values == OBSERVED_GAUGE).any()

    diff = cli(d, "diff", PROBE)
    assert diff.returncode == 0, diff.stdout + diff.stderr
    assert "no flag changed" in diff.stdout and "no longer kept" not in diff.stdout

    lineage = cli(d, "lineage", PROBE, "--version", "1")
    assert lineage.returncode == 0, lineage.stdout + lineage.stderr
    assert f"dataset {Path(old['path']).name} (version 1" in lineage.stdout

    bags = d.root / "bags"
    package = cli(d, "package", "--deployment", PROBE, "--out", str(bags))
    assert package.returncode == 0, package.stdout + package.stderr
    (bag,) = bags.iterdir()
    enclosed = bag / "data" / "dataset" / Path(new["path"]).name
    assert enclosed.read_bytes() == Path(new["path"]).read_bytes()
    raws = ctx.catalog.raw_files(deployment=PROBE, status="archived")
    assert raws and {p.name for p in (bag / "data" / "raw").iterdir()} == {Path(r["archived_path"]).name for r in raws}

    again = cli(d, "audit")
    assert again.returncode == 0 and "all accounted for, all hashes match" in again.stdout, again.stdout


def test_restored_copy_is_audited_where_it_is(moved):
    d = moved
    restored = d.root / "restored" / "archive"
    shutil.copytree(d.backup, restored, symlinks=True)
    shutil.rmtree(d.backup)                         # the original of this copy is gone
    ws = point_workspace_at(d.workspace, restored, name="restored.toml")
    ok = run_cli("audit", "--workspace", str(ws), cwd=d.root)
    assert ok.returncode == 0, ok.stdout + ok.stderr
    assert "all accounted for, all hashes match" in ok.stdout

    # audit reads the restored copy's files: a file the catalog describes, missing there, is named
    from qcpipe.archive.catalog import Catalog

    cat = Catalog(restored / "catalog.sqlite")
    raw = cat.raw_files(deployment=PROBE, status="archived")[0]
    dataset = cat.latest_dataset(PROBE)
    Path(raw["archived_path"]).unlink()
    Path(dataset["path"]).unlink()
    bad = run_cli("audit", "--workspace", str(ws), cwd=d.root)
    assert bad.returncode == 1, bad.stdout + bad.stderr
    assert f"archive copy {raw['archived_path']} is missing" in bad.stdout
    assert f"dataset {Path(dataset['path']).name} is missing (expected at {dataset['path']})" in bad.stdout
    assert "2 problem(s)" in bad.stdout
