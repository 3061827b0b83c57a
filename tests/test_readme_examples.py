"""Every ``qcpipe`` command line in the README's fenced shell blocks runs on the demo (issue 19).

The lines are taken from README.md's ```` ```sh ```` / ```` ```shell ```` / ```` ```console ```` blocks
(the indented blocks show synopses with placeholders such as ``W``, not commands to run). Each line
starting with ``qcpipe`` runs in bash, as a user types it, from the folder of a copy of the demo that one
nightly run has filled (``nightly_run(ctx, InProcess())``, tests/conftest.py ``demo_in_process``), with
the virtual environment's ``bin`` first on ``PATH`` (what ``. .venv/bin/activate`` does), in README order.
Lines that start a server or the orchestrator are not run (``SKIPPED`` says which and why); the test
checks that it skips only those. Each other line must exit 0 (a pipeline: each of its commands).
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from tests.conftest import REPO, demo_in_process

#: lines not run, and why: each would keep running (a server) or start the orchestrator
SKIPPED = {
    "qcpipe inspect": "serves a web page until stopped (tests/review cover it)",
    "qcpipe schedule": "needs a Prefect server and serves until stopped",
    "--dask": "needs a Dask cluster and a Prefect server",
}


def readme_command_lines(text: str) -> list[str]:
    """The lines starting with ``qcpipe`` inside fenced sh/shell/console blocks, in order (a leading ``$ ``
    prompt removed, a trailing ``# comment`` kept: bash ignores it)."""
    out, fenced = [], False
    for line in text.splitlines():
        if re.match(r"^```(sh|shell|console|bash)\s*$", line):
            fenced = True
        elif line.startswith("```"):
            fenced = False
        elif fenced:
            cmd = line.strip().removeprefix("$ ")
            if cmd.startswith("qcpipe "):
                out.append(cmd)
    return out


def why_skipped(line: str) -> str | None:
    return next((why for key, why in SKIPPED.items() if line.startswith(key) or f" {key} " in f" {line} "), None)


LINES = readme_command_lines((REPO / "README.md").read_text(encoding="utf-8"))


def test_the_readme_has_examples_to_run():
    run = [ln for ln in LINES if why_skipped(ln) is None]
    assert len(run) >= 8 and any("|" in ln for ln in run)
    assert [ln for ln in LINES if why_skipped(ln)] == ["qcpipe inspect --workspace sample_raw/workspace.toml"
                                                       "      # then open http://127.0.0.1:8750/"]


def test_the_extraction_reads_only_fenced_shell_blocks():
    text = "    qcpipe holdings --workspace W\n```toml\nqcpipe = 1\n```\n```sh\n$ qcpipe check -w x\nls\n```\n"
    assert readme_command_lines(text) == ["qcpipe check -w x"]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return demo_in_process(tmp_path_factory.mktemp("readme"))


@pytest.mark.parametrize("line", [ln for ln in LINES if why_skipped(ln) is None])
def test_readme_command_line_runs_on_the_demo(demo, line):
    env = dict(os.environ, PATH=f"{Path(sys.executable).parent}{os.pathsep}{os.environ.get('PATH', '')}")
    r = subprocess.run(["bash", "-c", f"set -o pipefail; {line}"], cwd=demo.root, env=env, capture_output=True,
                       text=True, timeout=300)
    # in a pipeline into `head`, qcpipe may find the pipe closed: its documented status then is 141
    ok = {0, 141} if "| head" in line else {0}
    assert r.returncode in ok, (line, r.returncode, r.stdout[-2000:], r.stderr[-2000:])
    assert "Traceback" not in r.stderr and r.stdout.strip(), (line, r.stderr)
    assert "orchestrator not started" in r.stdout or not line.startswith(("qcpipe process", "qcpipe rerun"))
