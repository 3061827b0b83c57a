"""Shared fixtures: one real run of the nightly flow over a copy of the demo inbox.

The run uses Prefect's embedded local mode exactly as ``make demo`` does (the
``qcpipe process`` command in a subprocess, a fresh orchestrator folder in the session's
state folder, ``state_folder``), twice: the second run must find nothing new.  It is the suite's
one real nightly run of the demo; other tests run the same sequence without the
orchestrator (``run_sequence``).
"""

from __future__ import annotations

import contextlib
import gzip
import hashlib
import json
import os
import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace

import pytest

REPO = Path(__file__).resolve().parents[1]
CF_TABLES = REPO / "tests" / "reference" / "cf"


def pytest_configure(config):
    """One report-figure cache for every run of the session (in this process and the commands it
    starts): figures are keyed by the SHA-256 of the plotting code and their arrays, so the many runs
    over copies of the demo draw each figure once (README, "Reports").  tests/report/test_figure_cache.py
    tests the cache itself with folders of its own."""
    if "QCPIPE_FIGURE_CACHE" not in os.environ:
        import tempfile

        os.environ["QCPIPE_FIGURE_CACHE"] = tempfile.mkdtemp(prefix="qcpipe-test-figures-")
        config._qcpipe_figure_cache = os.environ["QCPIPE_FIGURE_CACHE"]


def pytest_unconfigure(config):
    folder = getattr(config, "_qcpipe_figure_cache", None)
    if folder:
        shutil.rmtree(folder, ignore_errors=True)
        os.environ.pop("QCPIPE_FIGURE_CACHE", None)


@dataclass
class DemoRun:
    root: Path
    workspace: Path
    archive: Path
    inbox: Path
    first: subprocess.CompletedProcess
    second: subprocess.CompletedProcess
    inbox_hashes_before: dict
    archive_listing_after_first: dict
    injected: dict


def _hashes(folder: Path) -> dict:
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _listing(archive: Path) -> dict:
    return {str(p.relative_to(archive)): p.stat().st_mtime_ns for p in sorted(archive.rglob("*"))
            if p.is_file() and ".prefect" not in p.parts and p.name != "catalog.sqlite"
            and not p.name.startswith("catalog.sqlite") and p.name != ".lock"}


@pytest.fixture(scope="session", autouse=True)
def state_folder(tmp_path_factory):
    """qcpipe's state folder (``QCPIPE_STATE_DIR``: the orchestrator's state of every archive) in the
    session's temporary folder, never the user's; commands started by the tests inherit it."""
    with pytest.MonkeyPatch.context() as mp:
        folder = tmp_path_factory.mktemp("qcpipe-state")
        mp.setenv("QCPIPE_STATE_DIR", str(folder))
        yield folder


def copy_demo(root: Path) -> Path:
    """A copy of the demo workspace (sample_raw, qc_rules) in ``root``; its workspace file."""
    shutil.copytree(REPO / "sample_raw", root / "sample_raw")
    shutil.copytree(REPO / "qc_rules", root / "qc_rules")
    return root / "sample_raw" / "workspace.toml"


def small_demo(root: Path, keep=("TL7-20940_temp.csv", "TL7-20934_temp.csv"),
               download: str = "2026-10-05_download") -> tuple[Path, Path]:
    """A copy of the demo workspace whose inbox holds only the files ``keep`` of one ``download`` (by
    default two temperature loggers' first downloads: a run over them takes a few seconds); the
    workspace file and the inbox."""
    ws = copy_demo(root)
    inbox = root / "sample_raw" / "inbox"
    for p in sorted(inbox.rglob("*")):
        if p.is_file() and not (p.parent.name == download and p.name in keep):
            p.unlink()
    return ws, inbox


def demo_in_process(root: Path) -> SimpleNamespace:
    """A copy of the demo in ``root`` after one nightly run without the orchestrator
    (``nightly_run(ctx, InProcess())``): ``root``, ``workspace``, ``inbox``, ``archive`` (paths), ``first``
    (the run's summary); tests add what they keep."""
    from qcpipe.pipeline.context import load_context
    from qcpipe.pipeline.run import InProcess, nightly_run

    workspace = copy_demo(root)
    ctx = load_context(workspace)
    first = nightly_run(ctx, InProcess())
    return SimpleNamespace(root=root, workspace=workspace, inbox=root / "sample_raw" / "inbox",
                           archive=ctx.paths.root, first=first)


@contextlib.contextmanager
def small_tmpfs(mnt: Path, size_mb: int):
    """A tmpfs of ``size_mb`` MB mounted on ``mnt`` (made here) for the block; the test is skipped, with the
    reason, where mounting is not allowed (it needs root or CAP_SYS_ADMIN)."""
    mnt.mkdir(parents=True, exist_ok=True)
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size_mb}m", "tmpfs", str(mnt)],
                       capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot mount a {size_mb} MB tmpfs (needs root or CAP_SYS_ADMIN): {r.stderr.strip()}")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


@contextlib.contextmanager
def read_only_in_place(folder: Path):
    """``folder`` read-only for the block, even for root: bind-mounted on itself, then remounted read-only
    (writes fail with EROFS); skipped, with the reason, where mounting is not allowed."""
    r = subprocess.run(["mount", "--bind", str(folder), str(folder)], capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot bind-mount {folder} read-only (needs root or CAP_SYS_ADMIN): {r.stderr.strip()}")
    try:
        r = subprocess.run(["mount", "-o", "remount,bind,ro", str(folder)], capture_output=True, text=True)
        if r.returncode != 0:
            pytest.skip(f"cannot remount {folder} read-only: {r.stderr.strip()}")
        yield folder
    finally:
        subprocess.run(["umount", "-l", str(folder)], capture_output=True)


def run_cli(*args, cwd=None, env=None):
    full_env = dict(os.environ)
    full_env.update(env or {})
    return subprocess.run([sys.executable, "-m", "qcpipe.cli", *args], cwd=cwd, env=full_env,
                          capture_output=True, text=True, timeout=600)


def run_sequence(command: str, workspace, *, deployments: list[str] | None = None,
                 quiet: bool = False, even_if_unchanged: bool = False) -> subprocess.CompletedProcess:
    """``qcpipe process`` (``command`` "process") or ``qcpipe rerun`` without the orchestrator.

    The same run sequence the commands' flows wrap (``qcpipe.pipeline.run.nightly_run`` / ``rerun``),
    each step called at once in this process (``InProcess``), so no orchestrator start (15-20 s) is
    paid.  Returns what the command gives: exit status 0 with the summary's lines on stdout (the
    first one alone with ``quiet``; then the report's path; ``even_if_unchanged`` as the option), or 2 with the error's one line on
    stderr for an expected failure (a QcpipeError)."""
    from qcpipe.errors import QcpipeError
    from qcpipe.pipeline import load_context
    from qcpipe.pipeline.run import InProcess, nightly_run, rerun
    from qcpipe.report.summary import summary_lines

    args = [command, "--workspace", str(workspace), *(["-q"] if quiet else []),
            *(["--even-if-unchanged"] if even_if_unchanged else [])]
    try:
        ctx = load_context(workspace)
        if command == "process":
            summary = nightly_run(ctx, InProcess())
        else:
            summary = rerun(ctx, InProcess(), deployments or None, even_if_unchanged=even_if_unchanged)
    except QcpipeError as err:
        return subprocess.CompletedProcess(args, 2, "", f"qcpipe: error: {err}\n")
    lines = summary_lines(summary)[:1] if quiet else summary_lines(summary)
    if summary.report and not quiet:
        lines.append(f"report: {summary.report}")
    return subprocess.CompletedProcess(args, 0, "\n".join(lines) + "\n", "")


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory) -> DemoRun:
    root = tmp_path_factory.mktemp("demo")
    ws = copy_demo(root)
    inbox = root / "sample_raw" / "inbox"
    before = _hashes(inbox)
    first = run_cli("process", "--workspace", str(ws), cwd=root)
    archive = root / "demo_archive"
    listing = _listing(archive) if archive.exists() else {}
    second = run_cli("process", "--workspace", str(ws), cwd=root)
    injected = json.loads((root / "sample_raw" / "injected.json").read_text())
    return DemoRun(root, ws, archive, inbox, first, second, before, listing, injected)


@pytest.fixture(scope="session")
def cf_tables(tmp_path_factory) -> dict:
    """The CF tables (see tests/reference/cf/SOURCES.md), unzipped for the CF checker."""
    out = tmp_path_factory.mktemp("cf-tables")
    paths = {}
    for key, name in [("standard_names", "cf-standard-name-table-v83.xml"), ("area_types", "area-type-table.xml"),
                      ("regions", "standardized-region-list.xml")]:
        dest = out / name
        dest.write_bytes(gzip.decompress((CF_TABLES / f"{name}.gz").read_bytes()))
        paths[key] = dest
    return paths


def cf_check(path, cf_tables, *, allow_info: bool = True) -> None:
    """CF Checker (PyPI cfchecker) against CF-1.8 and the CF tables in tests/reference/cf:
    no fatal errors, errors or warnings (and no INFO messages unless ``allow_info``)."""
    from cfchecker.cfchecks import CFChecker

    checker = CFChecker(cfStandardNamesXML=str(cf_tables["standard_names"]),
                        cfAreaTypesXML=str(cf_tables["area_types"]),
                        cfRegionNamesXML=str(cf_tables["regions"]), version="1.8", silent=True)
    checker.checker(str(path))
    totals = checker.get_total_counts()
    assert totals["FATAL"] == 0 and totals["ERROR"] == 0, (Path(path).name, checker.all_messages)
    assert totals["WARN"] == 0, (Path(path).name, checker.all_messages)
    assert allow_info or totals["INFO"] == 0, (Path(path).name, checker.all_messages)
