"""The orchestrator's share of a demo run's wall time, and the wall time of a run with nothing to do.

    .venv/bin/python benchmarks/orchestrator_share.py

One invocation, four commands, each in its own process and timed from outside
(interpreter start, imports and exit included):

1. ``in process``: the demo's nightly run on a fresh copy of the demo workspace through
   the run sequence without the orchestrator, ``nightly_run(ctx, InProcess())``;
2. ``Prefect, first start``: the same run on a second fresh copy through ``qcpipe
   process`` (the nightly flow); with no ``PREFECT_API_URL`` in the environment this is
   Prefect's embedded mode with a new database in a fresh state folder (``QCPIPE_STATE_DIR``;
   its migrations run);
3. ``Prefect, known database``: the same again on a third fresh copy whose orchestrator
   folder already holds the database the second run left (what every later night pays);
4. ``nothing to do``: ``qcpipe process`` again on the second copy, which has nothing new:
   it decides and records the run without starting the orchestrator (target: under 2 s).

The orchestrator's share of a run is 1 - t(in process) / t(through Prefect): the
two runs do the same work on the same files.  With ``PREFECT_API_URL`` set, runs 2 and 3
use that server (no embedded database) and say so.  The outputs of runs 1 and 2 are
compared (same datasets, same flag counts) so the two sides are known to be the same work.
A measurement, not a test; it writes nothing into the repository.
"""

from __future__ import annotations

import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
NOTHING_TARGET_S = 2.0

IN_PROCESS = """
import json, sys
from qcpipe.pipeline.context import load_context
from qcpipe.pipeline.run import InProcess, nightly_run
ctx = load_context(sys.argv[1])
s = nightly_run(ctx, InProcess())
print(json.dumps(sorted((r.deployment, r.flag_counts) for r in s.results)))
"""


def fresh_copy(dest: Path) -> Path:
    """A copy of the demo workspace (sample_raw, qc_rules) in ``dest``; its archive is ``dest/demo_archive``."""
    shutil.copytree(ROOT / "sample_raw", dest / "sample_raw")
    shutil.copytree(ROOT / "qc_rules", dest / "qc_rules")
    return dest / "sample_raw" / "workspace.toml"


def timed(cmd: list[str], env: dict) -> dict:
    """Run ``cmd``; its wall time and the CPU time of it and its children (Prefect's server subprocess)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t = time.perf_counter()
    r = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=900)
    wall = time.perf_counter() - t
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if r.returncode != 0:
        raise SystemExit(f"{' '.join(cmd)} exited {r.returncode}:\n{r.stdout}\n{r.stderr}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return {"wall_s": wall, "cpu_s": cpu, "stdout": r.stdout}


def datasets(archive: Path) -> list:
    """(deployment, flag counts) of every dataset in an archive's catalog, sorted."""
    from qcpipe.archive.catalog import Catalog

    return sorted((r["deployment"], r["flag_counts"]) for r in Catalog(archive / "catalog.sqlite").datasets())


def _orchestrator_home(workspace: Path, env: dict) -> Path:
    """The orchestrator folder ``qcpipe process`` uses for the demo archive of ``workspace`` under ``env``."""
    code = ("import sys; from qcpipe.flows.prefect_settings import orchestrator_home; "
            "print(orchestrator_home(sys.argv[1]))")
    out = subprocess.run([sys.executable, "-c", code, str(workspace.parent.parent / "demo_archive")], env=env,
                         cwd=ROOT, capture_output=True, text=True, check=True)
    return Path(out.stdout.strip())


def main() -> int:
    python = sys.executable
    qcpipe = [python, "-m", "qcpipe.cli"]
    env = {k: v for k, v in os.environ.items() if k != "PREFECT_HOME"}    # embedded: each archive's own folder
    server = env.get("PREFECT_API_URL")
    mode = f"Prefect server {server}" if server else "Prefect embedded mode"
    rows = []
    with tempfile.TemporaryDirectory(prefix="qcpipe-orchestrator-") as tmp:
        tmp = Path(tmp)
        env["QCPIPE_STATE_DIR"] = str(tmp / "state")                      # the user's own state folder untouched
        ws_a, ws_b, ws_c = (fresh_copy(tmp / name) for name in ("inprocess", "prefect", "prefect-known"))
        a = timed([python, "-c", IN_PROCESS, str(ws_a)], env)
        rows.append(("in process: nightly_run(ctx, InProcess())", a))
        b = timed([*qcpipe, "process", "--workspace", str(ws_b), "--quiet"], env)
        rows.append((f"through Prefect, first start ({mode})", b))
        if not server:
            home = {ws: _orchestrator_home(ws, env) for ws in (ws_b, ws_c)}
            shutil.copytree(home[ws_b], home[ws_c], ignore=shutil.ignore_patterns("*.lock", "server.pid"))
        c = timed([*qcpipe, "process", "--workspace", str(ws_c), "--quiet"], env)
        rows.append((f"through Prefect, known database ({mode})", c))
        nothing = [timed([*qcpipe, "process", "--workspace", str(ws_b), "--quiet"], env) for _ in range(3)]
        best = min(nothing, key=lambda r: r["wall_s"])
        rows.append(("nothing to do: qcpipe process again (best of 3)", best))
        same = datasets(tmp / "inprocess" / "demo_archive") == datasets(tmp / "prefect" / "demo_archive") \
            == datasets(tmp / "prefect-known" / "demo_archive")
        if "nothing new" not in best["stdout"]:
            raise SystemExit(f"the last run was expected to find nothing new: {best['stdout']}")
    print(f"{'run':<58} {'wall s':>7} {'CPU s':>7}")
    for name, r in rows:
        print(f"{name:<58} {r['wall_s']:7.2f} {r['cpu_s']:7.2f}")
    for label, r in (("first start", b), ("known database", c)):
        share = 1 - a["wall_s"] / r["wall_s"]
        print(f"orchestrator's share of the run's wall time, {label}: {share:.0%} "
              f"({r['wall_s'] - a['wall_s']:.1f} s of {r['wall_s']:.1f} s)")
    verdict = "PASS" if best["wall_s"] < NOTHING_TARGET_S else "MISS"
    walls = ", ".join(f"{r['wall_s']:.2f}" for r in nothing)
    print(f"nothing to do: {best['wall_s']:.2f} s wall, target < {NOTHING_TARGET_S:.0f} s: {verdict} "
          f"(all three: {walls} s)")
    print(f"same datasets and flag counts in process and through Prefect: {'yes' if same else 'NO'}")
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
