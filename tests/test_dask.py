"""The nightly flow on a real Dask cluster gives exactly what the default thread runner gives.

Real parts only: a ``prefect server start`` subprocess on 127.0.0.1 (its own
Prefect home in the test's temporary folder; the Dask workers report their task
runs to it, see ``flows/runners.py`` for why not embedded mode), and a
``distributed.LocalCluster`` of two single-thread worker processes on loopback.
Both flows run in subprocesses, as ``qcpipe process`` does, on two copies of the
demo.  Every process the test starts is stopped by the fixtures, also when a
test fails.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest
import xarray as xr

pytestmark = pytest.mark.dask

REPO = Path(__file__).resolve().parents[1]

#: global attributes that hold the time of the run (or a path under the run's folder)
#: attributes that differ between two runs of the same data: the run's times, and the SHA-256 of source
#: dataset files (which carry their run's times)
RUN_ATTRS = ("date_created", "date_modified", "history", "source_dataset_sha256")
SHA256 = re.compile(rb"[0-9a-f]{64}")

DRIVER = """
import json, sys, time
from qcpipe.flows.prefect_settings import configure_prefect
configure_prefect(sys.argv[2])
from qcpipe.flows.nightly import nightly_flow_for
address = sys.argv[3] or None
t = time.perf_counter()
summary = nightly_flow_for(address)(sys.argv[1], dask_address=address)
from qcpipe.report.summary import summary_lines
print(json.dumps({"flow_s": round(time.perf_counter() - t, 2), "lines": summary_lines(summary)}))
"""


@pytest.fixture(scope="module")
def prefect_api(tmp_path_factory):
    from qcpipe.flows.runners import local_prefect_server

    with local_prefect_server(tmp_path_factory.mktemp("prefect-server") / "home") as url:
        yield url


@pytest.fixture(scope="module")
def cluster(prefect_api):
    from distributed import Client, LocalCluster

    from qcpipe.flows.runners import env_for_workers

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None, env=env_for_workers(prefect_api)) as cl:
        with Client(cl) as client:
            yield cl, client


def _workspace(root: Path) -> Path:
    root.mkdir()
    shutil.copytree(REPO / "sample_raw", root / "sample_raw")
    shutil.copytree(REPO / "qc_rules", root / "qc_rules")
    return root / "sample_raw" / "workspace.toml"


def _run_nightly(workspace: Path, api_url: str, address: str | None) -> dict:
    env = dict(os.environ, PREFECT_API_URL=api_url)
    home = workspace.parent.parent / "demo_archive" / ".prefect"
    t = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", DRIVER, str(workspace), str(home), address or ""],
                          capture_output=True, text=True, env=env, timeout=300, cwd=workspace.parent)
    assert proc.returncode == 0, proc.stderr[-4000:]
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    out["wall_s"] = round(time.perf_counter() - t, 2)
    out["stderr"] = proc.stderr
    return out


def _clean(ds: xr.Dataset, root: Path) -> xr.Dataset:
    """The dataset without run times and without attributes naming the run's folder."""
    def keep(attrs):
        return {k: v for k, v in attrs.items() if k not in RUN_ATTRS and str(root) not in str(v)}
    ds = ds.copy()
    ds.attrs = keep(ds.attrs)
    for v in ds.variables.values():
        v.attrs = keep(v.attrs)
    return ds


def _open(path: Path) -> xr.Dataset:
    from qcpipe.archive.ncio import read_dataset
    return read_dataset(path)


def _executed_per_worker(client) -> dict:
    return client.run(lambda dask_worker: dask_worker.state.executed_count)


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory, prefect_api, cluster):
    cl, client = cluster
    base = tmp_path_factory.mktemp("dask-vs-default")
    ws_default, ws_dask = _workspace(base / "default"), _workspace(base / "dask")
    before = _executed_per_worker(client)
    default = _run_nightly(ws_default, prefect_api, None)
    after_default = _executed_per_worker(client)
    dask = _run_nightly(ws_dask, prefect_api, cl.scheduler_address)
    after_dask = _executed_per_worker(client)
    print(f"\nnightly flow on the demo: default runner {default['flow_s']} s, "
          f"Dask LocalCluster (2 workers) {dask['flow_s']} s")
    return {"default": (base / "default", default), "dask": (base / "dask", dask),
            "executed": (before, after_default, after_dask)}


def test_tasks_ran_on_both_workers_and_only_with_dask(two_runs):
    before, after_default, after_dask = two_runs["executed"]
    assert after_default == before, "the default runner must not use the cluster"
    ran = {w: after_dask[w] - after_default[w] for w in after_dask}
    assert len(ran) == 2 and all(n >= 3 for n in ran.values()), ran
    # 20 files read, the 2 rejected ones quarantined, 9 deployments merged, 1 barometer, 1 gauge and
    # 3 stations QC'd, the run report's pages of those 5 stations and its index written: every step of
    # the run sequence (qcpipe.pipeline.run.STEPS) is a task on the cluster
    assert sum(ran.values()) == 20 + 2 + 9 + 1 + 1 + 3 + 5 + 1, ran


def test_both_runs_succeed_quietly(two_runs):
    for name in ("default", "dask"):
        out = two_runs[name][1]
        assert "Traceback" not in out["stderr"], out["stderr"][-3000:]
        assert "database is locked" not in out["stderr"]
        assert "18 ingested, 2 quarantined" in out["lines"][0], out["lines"]
    assert two_runs["default"][1]["lines"] == [
        ln.replace(str(two_runs["dask"][0]), str(two_runs["default"][0])) for ln in two_runs["dask"][1]["lines"]]


def test_same_datasets_and_flags(two_runs):
    (root_a, _), (root_b, _) = two_runs["default"], two_runs["dask"]
    a = {p.relative_to(root_a) for p in (root_a / "demo_archive" / "datasets").rglob("*.nc")}
    b = {p.relative_to(root_b) for p in (root_b / "demo_archive" / "datasets").rglob("*.nc")}
    assert a == b and len(a) == 9, (sorted(a), sorted(b))       # names carry station, deployment, version
    for rel in sorted(a):
        da, db = _clean(_open(root_a / rel), root_a), _clean(_open(root_b / rel), root_b)
        assert sorted(da.data_vars) == sorted(db.data_vars)
        assert any(v.endswith("_qc") for v in da.data_vars)
        xr.testing.assert_identical(da, db)


def test_same_derived_products(two_runs):
    (root_a, _), (root_b, _) = two_runs["default"], two_runs["dask"]
    da, db = root_a / "demo_archive" / "derived", root_b / "demo_archive" / "derived"
    a = sorted(p.relative_to(da) for p in da.rglob("*") if p.is_file())
    b = sorted(p.relative_to(db) for p in db.rglob("*") if p.is_file())
    assert a == b and any(p.suffix == ".csv" for p in a), (a, b)
    for rel in a:
        if rel.suffix == ".nc":
            xr.testing.assert_identical(_clean(_open(da / rel), root_a), _clean(_open(db / rel), root_b))
        else:     # a fitted constants file names its source dataset's SHA-256 (see RUN_ATTRS)
            assert SHA256.sub(b"<sha256>", (da / rel).read_bytes()) == SHA256.sub(b"<sha256>", (db / rel).read_bytes()), rel


def test_cluster_listens_on_loopback_only(cluster):
    import psutil

    cl, client = cluster
    pids = set(client.run(os.getpid).values()) | set(client.run(os.getppid).values())   # workers and nannies
    for pid in pids:
        for c in psutil.Process(pid).net_connections(kind="inet"):
            if c.status == psutil.CONN_LISTEN:
                assert c.laddr.ip == "127.0.0.1", (pid, c)


def test_task_arguments_pickle_and_the_runner_needs_a_server(tmp_path):
    import pickle

    import cloudpickle
    from prefect.settings import PREFECT_API_URL, temporary_settings

    from qcpipe import pipeline
    from qcpipe.errors import ConfigError
    from qcpipe.flows.runners import task_runner_for
    from qcpipe.flows.tasks import Job

    ws = _workspace(tmp_path / "ws")
    ctx = pipeline.load_context(ws)
    job = Job.of(ctx)
    assert pickle.loads(cloudpickle.dumps(job)).context().register.sha256 == ctx.register.sha256
    new, _ = pipeline.find_new_files(ctx)
    outcome = pipeline.read_one_file(next(r for r in new if r.name.endswith(".wet")), ctx.register, ctx.layouts)
    back = pickle.loads(cloudpickle.dumps(outcome))
    assert back.ingested.deployment == outcome.ingested.deployment
    assert (back.ingested.time == outcome.ingested.time).all()
    tide = pipeline.site_tide(ctx, ctx.register.site[0].id)
    assert pickle.loads(cloudpickle.dumps(tide)).site_id == tide.site_id

    # a changed configuration is refused on the worker side
    rules = ws.parent.parent / "qc_rules" / "kelpwhistle-cove.toml"
    rules.write_text(rules.read_text().replace("suspect = 4.0", "suspect = 4.5", 1))
    with pytest.raises(ConfigError, match="changed while the run"):
        job.context()

    assert task_runner_for(None) is None
    with temporary_settings(restore_defaults={PREFECT_API_URL}):
        with pytest.raises(ConfigError, match="PREFECT_API_URL"):
            task_runner_for("tcp://127.0.0.1:1")
    with temporary_settings(updates={PREFECT_API_URL: "http://127.0.0.1:1/api"}):
        runner = task_runner_for("tcp://127.0.0.1:1")
    assert type(runner).__name__ == "DaskTaskRunner" and runner.address == "tcp://127.0.0.1:1"
