"""The nightly run sequence without the orchestrator, as a command for the crash tests.

``python tests/robustness/nightly_in_process.py <workspace.toml>`` runs the steps ``qcpipe process``
runs (``qcpipe.pipeline.run.nightly_run``), each called at once in this one process (``InProcess``),
so a test can kill it at a crash point (``QCPIPE_TEST_KILL_AT``, see ``qcpipe/faults.py``) without
paying the orchestrator's start.  Prints the summary's first line; exit status 0, or 2 with one line
on stderr for an expected failure, as the command does.

``python tests/robustness/nightly_in_process.py --serve`` imports qcpipe once, then runs one command
per line of its input in a forked child, so that many killed runs do not each pay Python's imports
(about 2 s of CPU a run): a line is a JSON object ``{"argv": [...], "env": {...}, "log": path}``,
where ``argv`` is ``["nightly", workspace]`` (the run above) or the ``qcpipe`` command's arguments
(``["audit", "-w", workspace]``); the child's output goes to ``log``, and the answer is a line
``{"returncode": n}``, negative for the signal that ended the child (as ``subprocess`` gives it).
"""

from __future__ import annotations

import json
import os
import signal
import sys
import time
import traceback


def main(workspace: str) -> int:
    from qcpipe.errors import QcpipeError
    from qcpipe.pipeline import load_context
    from qcpipe.pipeline.run import InProcess, nightly_run
    from qcpipe.report.summary import summary_lines

    try:
        summary = nightly_run(load_context(workspace), InProcess())
    except QcpipeError as err:
        print(f"qcpipe: error: {err}", file=sys.stderr)
        return 2
    print(summary_lines(summary)[0])
    return 0


def _child(request: dict) -> int:
    """Run one request in this (forked) process: environment, output to the log, the command."""
    for key, value in request.get("env", {}).items():
        if value is None:
            os.environ.pop(key, None)
        else:
            os.environ[key] = value
    fd = os.open(request["log"], os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
    os.dup2(fd, 1)
    os.dup2(fd, 2)
    argv = request["argv"]
    if argv[0] == "nightly":
        return main(argv[1])
    from qcpipe.cli import main as command

    return command(argv)


def serve(timeout_s: float = 600.0) -> None:
    # what every run needs, imported once: the children share it
    import matplotlib  # noqa: F401 - the report's figures
    import netCDF4  # noqa: F401 - xarray's NetCDF engine, loaded on first use otherwise

    import qcpipe.archive.audit  # noqa: F401
    import qcpipe.cli  # noqa: F401
    import qcpipe.pipeline.run  # noqa: F401
    import qcpipe.report  # noqa: F401
    import qcpipe.report.plots  # noqa: F401
    import qcpipe.report.summary  # noqa: F401

    for line in sys.stdin:
        request = json.loads(line)
        pid = os.fork()
        if pid == 0:
            code = 1
            try:
                code = _child(request)
            except BaseException:      # noqa: BLE001 - a bug in the run: its traceback, for the test's message
                traceback.print_exc()
            finally:
                sys.stdout.flush()
                sys.stderr.flush()
                os._exit(code)
        deadline = time.monotonic() + timeout_s
        while True:
            done, status = os.waitpid(pid, os.WNOHANG)
            if done:
                break
            if time.monotonic() > deadline:       # never leave a hung run behind
                os.kill(pid, signal.SIGKILL)
                done, status = os.waitpid(pid, 0)
                break
            time.sleep(0.05)
        code = -os.WTERMSIG(status) if os.WIFSIGNALED(status) else os.WEXITSTATUS(status)
        print(json.dumps({"returncode": code}), flush=True)


if __name__ == "__main__":
    if sys.argv[1] == "--serve":
        serve()
    else:
        sys.exit(main(sys.argv[1]))
