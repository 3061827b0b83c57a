"""What a killed run leaves behind: no orchestrator process, and no notice that no one reads.

``test_no_orchestrator_outlives_a_killed_command`` needs the real command: only ``qcpipe
process`` starts the orchestrator's embedded server (``flows/embedded_server.py``), and it is
that server a SIGKILL of the command used to leave running for minutes.  The notices test runs
the sequence without the orchestrator (``nightly_in_process.py``), killed at a crash point.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

from tests.conftest import copy_demo

#: "no orchestrator process outlives a killed run by more than a few seconds" (issue 18, section 4)
SURVIVAL_LIMIT_S = 5.0


def _processes() -> dict[int, tuple[int, int, str, str]]:
    """Every process on this machine: pid -> (parent pid, process group, state letter, command line)."""
    out = {}
    for d in Path("/proc").iterdir():
        if not d.name.isdigit():
            continue
        try:
            stat = (d / "stat").read_text()
            cmd = (d / "cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace").strip()
        except OSError:
            continue
        fields = stat[stat.rindex(")") + 2:].split()          # after "pid (comm) "
        out[int(d.name)] = (int(fields[1]), int(fields[2]), fields[0], cmd)
    return out


def _descendants(pid: int, procs: dict) -> list[int]:
    children = [p for p, (ppid, *_rest) in procs.items() if ppid == pid]
    return children + [d for c in children for d in _descendants(c, procs)]


def _living(pids, procs: dict) -> list[int]:
    """The ``pids`` still running (a zombie has ended: it only waits to be reaped)."""
    return [p for p in pids if p in procs and procs[p][2] != "Z"]


def _healthy(cmdline: str) -> bool:
    """Whether the orchestrator's server with this command line (uvicorn's arguments) answers on its port."""
    args = cmdline.split()
    port = args[args.index("--port") + 1]
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/health", timeout=2) as r:
            return r.status == 200
    except OSError:
        return False


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_no_orchestrator_outlives_a_killed_command(tmp_path):
    """SIGKILL of ``qcpipe process`` once its orchestrator server answers: within SURVIVAL_LIMIT_S no
    process the command started (its whole process tree, found by parent ids before the kill, and
    anything left in its process group) is still running.  Before the server was tied to the run,
    Prefect's own embedded server (``python -m uvicorn ... prefect.server.api.server:create_app``)
    was left running after this kill; the server is found by that application's name in its command
    line, whoever starts it."""
    ws = copy_demo(tmp_path)
    env = {k: v for k, v in os.environ.items() if k not in ("PREFECT_API_URL", "PREFECT_HOME")}
    with open(tmp_path / "run.log", "w") as log:
        proc = subprocess.Popen([sys.executable, "-m", "qcpipe.cli", "process", "-w", str(ws), "-q"],
                                stdout=log, stderr=subprocess.STDOUT, env=env, start_new_session=True)
    tree: list[int] = []
    try:
        deadline = time.monotonic() + 300
        server = None
        while server is None:
            assert proc.poll() is None, f"the run ended before its server was up: {(tmp_path / 'run.log').read_text()}"
            assert time.monotonic() < deadline, "no orchestrator server answered within 300 s"
            procs = _processes()
            found = [p for p in _descendants(proc.pid, procs)
                     if "prefect.server.api.server:create_app" in procs[p][3]]
            if found and _healthy(procs[found[0]][3]):
                server = found[0]
            else:
                time.sleep(0.2)
        tree = _descendants(proc.pid, _processes())
        assert server in tree
        os.kill(proc.pid, signal.SIGKILL)
        killed = time.monotonic()
        assert proc.wait(30) == -signal.SIGKILL
        while True:
            procs = _processes()
            left = _living(tree, procs) + [p for p, (_pp, pgid, state, _c) in procs.items()
                                           if pgid == proc.pid and state != "Z" and p not in tree]
            if not left or time.monotonic() - killed > SURVIVAL_LIMIT_S:
                break
            time.sleep(0.1)
        took = time.monotonic() - killed
        assert not left, (f"still running {took:.1f} s after the run was killed: "
                          + "; ".join(f"{p}: {procs[p][3][:120]}" for p in left))
    finally:
        for p in [proc.pid, *tree]:               # a failing test leaves nothing behind either
            try:
                os.kill(p, signal.SIGKILL)
            except ProcessLookupError:
                pass
        proc.wait(30)


#: the run sequence without the orchestrator, as a command that can be killed at a crash point
IN_PROCESS = Path(__file__).with_name("nightly_in_process.py")


def test_notices_of_a_killed_run_are_shown_by_the_next(tmp_path, monkeypatch):
    """A run killed after it committed every dataset (and recorded its end) but before its report and
    summary: the next run shows every notice the uninterrupted run shows (clock and quarantine
    among them), each naming the killed run, in its summary and its report; the run after that shows
    them no more.

    Reference: the same run uninterrupted on another copy of the demo, its crash points counted; the kill
    is at the first point of the report (its first page), found by name in that list."""
    import html

    from qcpipe.report.model import Quarantined
    from tests.conftest import demo_in_process, run_sequence

    points = tmp_path / "points.txt"
    monkeypatch.setenv("QCPIPE_TEST_COUNT_POINTS", str(points))
    ref = demo_in_process(tmp_path / "ref")
    monkeypatch.delenv("QCPIPE_TEST_COUNT_POINTS")
    names = [ln.split(" ", 1)[1] for ln in points.read_text().splitlines()]
    first_page = next(i for i, n in enumerate(names) if n.endswith(".html")) + 1        # 1-based
    assert any("catalog" in n for n in names[:first_page - 1])
    expected = ref.first.all_notices() + [Quarantined(q.name, q.reason).notice() for q in ref.first.quarantined]
    # the demo's probe has a clock error and two of its files are quarantined; it has no fouling probe (a
    # fouling notice takes the same way: a deployment's notice recorded with its dataset)
    assert {"clock", "quarantine"} <= {n.kind for n in expected}, [n.kind for n in expected]

    ws = copy_demo(tmp_path / "killed")
    env = dict(os.environ, QCPIPE_TEST_KILL_AT=str(first_page))
    killed = subprocess.run([sys.executable, str(IN_PROCESS), str(ws)], env=env, capture_output=True, text=True,
                            timeout=600)
    assert killed.returncode == -signal.SIGKILL, killed.stderr
    assert not (tmp_path / "killed" / "demo_archive" / "reports").exists() or not any(
        (tmp_path / "killed" / "demo_archive" / "reports").rglob("index.html"))

    nxt = run_sequence("process", ws)
    assert nxt.returncode == 0, nxt.stderr
    lines = nxt.stdout.splitlines()
    assert lines[0].startswith("nothing new"), lines[0]
    report = Path(next(ln.split(": ", 1)[1] for ln in lines if ln.startswith("report: ")))
    page = html.unescape(report.read_text(encoding="utf-8"))
    for n in expected:
        said = f"{n.text} (found by run 1, which stopped before showing it)"
        assert f"  {n.where}: {said}" in lines if n.where else f"  {said}" in lines, (said, lines)
        assert said in page, said

    again = run_sequence("process", ws)
    assert again.returncode == 0 and again.stdout.splitlines() == [lines[0]], again.stdout


START_FAILS = r"""
import sys, time
import qcpipe.flows.embedded_server as es
es.uvicorn_args = lambda port: ["--factory", "no_such_module_here:create_app", "--host", "127.0.0.1",
                                "--port", str(port)]
t0 = time.monotonic()
try:
    es.start_embedded_server(sys.argv[1])
except es.OrchestratorStartError as err:
    print(f"{time.monotonic() - t0:.1f}|{err}")
"""


def test_a_server_that_cannot_start_is_one_line_and_not_retried(tmp_path):
    """uvicorn exits with status 3 both for a taken port (worth another port) and for an app that cannot
    be loaded (a broken install or database: not worth retrying for the whole start-up timeout).  Here
    the app cannot be imported: the start gives up after one try, with the server's own last line."""
    env = {k: v for k, v in os.environ.items() if k not in ("PREFECT_API_URL", "QCPIPE_EMBEDDED_API_URL")}
    env["PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS"] = "60"
    done = subprocess.run([sys.executable, "-c", START_FAILS, str(tmp_path / "home")], capture_output=True,
                          text=True, timeout=120, env=env)
    seconds, message = done.stdout.strip().split("|", 1)
    assert float(seconds) < 30, message          # not retried until the 60 s deadline
    assert message.startswith("the orchestrator's embedded server did not start (exit status 3: ")
    assert "no_such_module_here" in message and str(tmp_path / "home" / "server.log") in message
    assert "\n" not in message


def test_a_prefect_home_with_a_tilde_is_expanded_for_every_reader(tmp_path):
    """``PREFECT_HOME=~/x`` set by the user: the settings hand the expanded folder to the embedded server
    (which opens its log there), not a literal '~' folder under the current one."""
    env = dict(os.environ, HOME=str(tmp_path), PREFECT_HOME="~/orchestrator")
    code = ("import os; from qcpipe.flows.prefect_settings import configure_prefect, orchestrator_home; "
            "configure_prefect(orchestrator_home('/nowhere')); print(os.environ['PREFECT_HOME'])")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, cwd=tmp_path,
                          timeout=60)
    assert done.stdout.strip() == str(tmp_path / "orchestrator"), done.stderr
    assert (tmp_path / "orchestrator").is_dir() and not (tmp_path / "~").exists()


def test_notices_stay_unshown_when_the_report_cannot_be_written(tmp_path):
    """The run's report fails (here its folder is a file): the run still succeeds, its notices (clock,
    quarantine) stay recorded as not shown, and the next run, whose report works, shows them."""
    from qcpipe.pipeline.context import load_context
    from qcpipe.pipeline.run import InProcess, nightly_run
    from tests.conftest import run_sequence

    ws = copy_demo(tmp_path)
    ctx = load_context(ws)
    ctx.paths.root.mkdir(parents=True, exist_ok=True)
    (ctx.paths.root / "reports").write_text("not a folder")
    first = nightly_run(ctx, InProcess())
    assert not first.report and any("report was not written" in n.text for n in first.notices)
    unshown = {n["kind"] for n in load_context(ws).catalog.unreported_notices(10**9)}
    assert {"clock", "quarantine"} <= unshown, unshown
    (ctx.paths.root / "reports").unlink()
    nxt = run_sequence("process", ws)
    assert nxt.returncode == 0, nxt.stderr
    assert any("(found by run 1, which stopped before showing it)" in ln for ln in nxt.stdout.splitlines())
    assert load_context(ws).catalog.unreported_notices(10**9) == []
