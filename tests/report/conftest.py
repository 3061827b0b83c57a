"""One demo archive for the report tests: the nightly run once over a copy of the demo inbox,
without the orchestrator (``tests.conftest.run_sequence``; the real command's run of the demo is
``tests.conftest.demo_run``).

The ``run`` dict is built here from the catalog tables with plain SQL, not by
the code under test, so the report is checked against what the pipeline
recorded.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
from dataclasses import dataclass
from pathlib import Path

import pytest

from tests.conftest import run_sequence

REPO = Path(__file__).resolve().parents[2]


@dataclass
class ReportCase:
    root: Path
    archive: Path
    run: dict
    index: Path
    injected: dict


def run_dict_from_tables(archive: Path) -> dict:
    """The run dict of the archive's only run, from the runs, datasets and raw_files tables."""
    con = sqlite3.connect(archive / "catalog.sqlite")
    con.row_factory = sqlite3.Row
    try:
        run = dict(con.execute("SELECT * FROM runs ORDER BY id DESC LIMIT 1").fetchone())
        counts = json.loads(run["counts"])
        datasets = [dict(r) for r in con.execute(
            "SELECT station, deployment, path, version, samples, flag_counts FROM datasets "
            "WHERE created >= ? AND created <= ? ORDER BY station, deployment", (run["started"], run["ended"]))]
        quarantined = [dict(r) for r in con.execute(
            "SELECT original_name, reason FROM raw_files WHERE status = 'quarantined' ORDER BY original_name")]
    finally:
        con.close()
    return {
        "run_id": run["id"], "started": run["started"], "ended": run["ended"], "outcome": run["outcome"],
        "files_seen": counts["files_seen"], "files_known": counts["files_known"], "ingested": counts["ingested"],
        "quarantined": [{"name": q["original_name"], "reason": q["reason"]} for q in quarantined],
        "repeated_in_inbox": [],
        # the catalog stores dataset paths relative to the archive root
        "results": [{"station": d["station"], "deployment": d["deployment"], "dataset": str(archive / d["path"]),
                     "version": d["version"], "samples": d["samples"], "flag_counts": json.loads(d["flag_counts"]),
                     "counts": {}, "notices": [], "products": []} for d in datasets],
        "notices": [],
    }


@pytest.fixture(scope="session")
def report_case(tmp_path_factory) -> ReportCase:
    root = tmp_path_factory.mktemp("report-demo")
    shutil.copytree(REPO / "sample_raw", root / "sample_raw")
    shutil.copytree(REPO / "qc_rules", root / "qc_rules")
    ws = root / "sample_raw" / "workspace.toml"
    done = run_sequence("process", ws)
    assert done.returncode == 0, done.stderr
    archive = root / "demo_archive"
    run = run_dict_from_tables(archive)
    from qcpipe.report import write_run_report

    index = write_run_report(archive, run)
    injected = json.loads((root / "sample_raw" / "injected.json").read_text())
    return ReportCase(root, archive, run, index, injected)
