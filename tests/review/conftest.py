"""One demo archive for the review tests: ``nightly_run(ctx, InProcess())`` on a copy of sample_raw
(no Prefect), as tests/pipeline/test_run_in_process.py builds it."""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from pathlib import Path

import pytest

from qcpipe import pipeline
from qcpipe.pipeline.run import InProcess, nightly_run
from tests.conftest import REPO


@dataclass
class ReviewDemo:
    root: Path
    workspace: Path
    archive: Path


def build_demo(root: Path) -> ReviewDemo:
    shutil.copytree(REPO / "sample_raw", root / "sample_raw", ignore=shutil.ignore_patterns("annotations.toml"))
    shutil.copytree(REPO / "qc_rules", root / "qc_rules")
    workspace = root / "sample_raw" / "workspace.toml"
    ctx = pipeline.load_context(workspace)
    nightly_run(ctx, InProcess())
    return ReviewDemo(root, workspace, ctx.paths.root)


@pytest.fixture(scope="module")
def review_demo(tmp_path_factory) -> ReviewDemo:
    return build_demo(tmp_path_factory.mktemp("review"))
