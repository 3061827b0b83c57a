"""The ``qcpipe`` command as a field technician meets it (issue 19), on an archive made without the orchestrator.

The archive is one nightly run over a copy of the demo (``nightly_run(ctx, InProcess())``,
tests/conftest.py ``demo_in_process``); each command then runs for real, in a subprocess
(``python -m qcpipe.cli``). None of these commands starts the orchestrator (tests/test_cli.py holds those
that do). Expected values are read from the archive independently of the command: flag counts from the
NetCDF files with netCDF4, times from the catalog's text with Python's ``datetime``, quarantined files from
the quarantine folder. The tests run in file order: the last one adds files to the inbox.
"""

from __future__ import annotations

import datetime as dt
import os
import re
import sqlite3
import subprocess
import sys
from collections import Counter

import netCDF4
import numpy as np
import pytest

from qcpipe.cli import EXIT_BROKEN_PIPE
from qcpipe.pipeline.context import load_context
from qcpipe.pipeline.run import InProcess, nightly_run
from tests.conftest import demo_in_process, run_cli

#: the flag words in the order of the IOC primary flag scheme (UNESCO/IOC 2013, Manuals and Guides 54,
#: vol. 3, table 2): pass 1, not evaluated 2, suspect 3, fail 4, missing 9
FLAG_WORDS = {1: "pass", 2: "not evaluated", 3: "suspect", 4: "fail", 9: "missing"}


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return demo_in_process(tmp_path_factory.mktemp("cli-in-process"))


def qcpipe(demo, *args):
    return run_cli(*args[:1], "--workspace", str(demo.workspace), *args[1:], cwd=demo.root)


def catalog_rows(demo, sql):
    con = sqlite3.connect(demo.archive / "catalog.sqlite")
    con.row_factory = sqlite3.Row
    try:
        return [dict(r) for r in con.execute(sql)]
    finally:
        con.close()


# --- output into a pipe closed early -------------------------------------------------------------------

def run_into_closed_pipe(demo, *args, unbuffered: bool):
    """The command with its standard output a pipe whose reading end is closed before it writes a byte;
    Python's output buffered (the default for a pipe) or not (``PYTHONUNBUFFERED``, as under some CI)."""
    env = {k: v for k, v in os.environ.items() if k != "PYTHONUNBUFFERED"}
    if unbuffered:
        env["PYTHONUNBUFFERED"] = "1"
    p = subprocess.Popen([sys.executable, "-m", "qcpipe.cli", *args], cwd=demo.root, stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE, env=env)
    p.stdout.close()                      # the reader goes away at once, as `head` does after its lines
    err = p.stderr.read().decode()
    return p.wait(timeout=120), err


@pytest.mark.parametrize("unbuffered", [False, True], ids=["buffered", "unbuffered"])
@pytest.mark.parametrize("args", [("holdings",), ("holdings", "--what", "raw"), ("--help",), ("holdings", "--help")],
                         ids=["holdings", "holdings-raw", "help", "command-help"])
def test_output_into_a_closed_pipe_ends_quietly(demo, args, unbuffered):
    ws = ("--workspace", str(demo.workspace)) if args[-1] != "--help" else ()
    status, err = run_into_closed_pipe(demo, *args, *ws, unbuffered=unbuffered)
    assert err == "", err                 # no traceback, no "Exception ignored" at exit
    # 141 = 128 + SIGPIPE (13): what a shell reports for a program ended by a broken pipe (POSIX, "Exit Status
    # for Commands"; SIGPIPE is 13 on Linux, signal(7)). Unbuffered, argparse writes --help itself and drops
    # the write's error (Python's argparse, ArgumentParser._print_message): the help then ends with 0.
    expected = {0, 141} if args[-1] == "--help" and unbuffered else {141}
    assert status in expected and EXIT_BROKEN_PIPE == 141


def test_the_same_output_into_an_open_pipe_is_complete(demo):
    r = qcpipe(demo, "holdings")
    assert r.returncode == 0 and r.stderr == "", r.stderr
    assert r.stdout.startswith("datasets (") and "runs (1):" in r.stdout


def test_holdings_head_through_a_shell_pipe(demo):
    """The README's ``qcpipe holdings | head``: head's lines, and no traceback on the terminal."""
    cmd = (f"{sys.executable} -m qcpipe.cli holdings --workspace {demo.workspace} | head -n 2; "
           "echo status ${PIPESTATUS[0]} >&2")
    r = subprocess.run(["bash", "-c", cmd], cwd=demo.root, capture_output=True, text=True, timeout=120)
    assert len(r.stdout.splitlines()) == 2
    # the command may have written everything before head closed the pipe (0) or not (141): never a traceback
    assert re.fullmatch(r"status (0|141)\n", r.stderr), r.stderr


# --- holdings: counts per variable, quarantined files only ---------------------------------------------

def flag_counts_from_netcdf(path) -> dict[str, dict[str, int]]:
    """Aggregate flags per variable, counted from the file's ``<var>_qc`` variables (CF standard name
    aggregate_quality_flag) with netCDF4 and numpy."""
    out = {}
    with netCDF4.Dataset(path) as nc:
        nc.set_auto_mask(False)
        for name, v in nc.variables.items():
            if getattr(v, "standard_name", "") == "aggregate_quality_flag" and name.endswith("_qc"):
                values, counts = np.unique(v[:], return_counts=True)
                out[name.removesuffix("_qc")] = {FLAG_WORDS[int(f)]: int(n) for f, n in zip(values, counts)}
    return out


def holdings_datasets(stdout: str) -> dict[str, dict[str, dict[str, int]]]:
    """file name -> variable -> flag word -> count, as ``holdings`` prints them."""
    out, current = {}, None
    for line in stdout.split("\nraw files")[0].splitlines()[1:]:
        if not line.startswith("      "):
            current = out.setdefault(line.split()[-1], {})
            continue
        var, counts = line.split(None, 1)
        counts = counts.removeprefix("aggregate flags: ")
        current[var] = {m.group(1): int(m.group(2)) for m in re.finditer(r"([a-z ]+?) (\d+)(?:, |$)", counts)}
    return out


def test_holdings_counts_flags_per_variable_as_the_files_hold_them(demo):
    r = qcpipe(demo, "holdings", "--what", "datasets")
    assert r.returncode == 0, r.stderr
    shown = holdings_datasets(r.stdout)
    rows = catalog_rows(demo, "SELECT path, samples FROM datasets")
    assert len(shown) == len(rows) == 9                  # one dataset per deployment of the demo register
    for row in rows:
        from_file = flag_counts_from_netcdf(demo.archive / row["path"])   # catalog paths: relative to the archive
        name = row["path"].rsplit("/", 1)[-1]
        assert shown[name] == from_file, name
        for var, per in shown[name].items():              # each variable counts every sample once
            assert sum(per.values()) == row["samples"], (name, var)
    multi = [n for n, per in shown.items() if len(per) > 1]
    assert multi                                          # the demo has files of several variables


def test_holdings_status_quarantined_lists_only_quarantined_files(demo):
    r = qcpipe(demo, "holdings", "--status", "quarantined")
    assert r.returncode == 0, r.stderr
    lines = r.stdout.splitlines()
    in_folder = sorted(p.name for p in (demo.archive / "quarantine").iterdir() if not p.name.endswith(".reason.txt"))
    assert lines[0] == f"raw files ({len(in_folder)}):"
    assert len(lines) == 1 + len(in_folder) and len(in_folder) == 2
    # the quarantine folder names each copy <first 12 hex digits of its SHA-256>_<original name>
    assert sorted("_".join(ln.split()[0:3:2]) for ln in lines[1:]) == in_folder
    assert all(ln.split()[1] == "quarantined" for ln in lines[1:])
    assert not any(ln.startswith(("datasets", "runs")) for ln in lines)


# --- diff, lineage, rerun -------------------------------------------------------------------------------

def test_diff_of_a_deployment_with_one_version_says_so_and_what_it_holds(demo):
    dep = "kc-mid-temp-2026-09"
    r = qcpipe(demo, "diff", dep)
    assert r.returncode == 0, r.stderr
    row, = catalog_rows(demo, f"SELECT * FROM datasets WHERE deployment = '{dep}'")
    with netCDF4.Dataset(demo.archive / row["path"]) as nc:
        samples = len(nc.dimensions["time"])
    assert f"deployment '{dep}' has one dataset version, v001" in r.stdout
    assert f"{samples} samples" in r.stdout and row["path"].rsplit("/", 1)[-1] in r.stdout
    assert "choose two" not in r.stdout + r.stderr


def test_diff_asking_for_a_version_that_does_not_exist_is_one_line(demo):
    r = qcpipe(demo, "diff", "kc-mid-temp-2026-09", "--from", "1", "--to", "2")
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "has versions [1]" in r.stderr


def test_lineage_prints_iso_utc_times_to_the_second(demo):
    dep = "kc-mid-temp-2026-09"
    r = qcpipe(demo, "lineage", dep)
    assert r.returncode == 0, r.stderr
    raws = catalog_rows(demo, f"SELECT sha256, time_start, time_end FROM raw_files WHERE deployment = '{dep}'")
    assert len(raws) == 2
    for raw in raws:
        line, = [ln for ln in r.stdout.splitlines() if ln.strip().startswith(raw["sha256"][:12])]
        # the catalog's text read by Python's datetime (its 9-digit fraction cut to microseconds), to the second
        want = [dt.datetime.fromisoformat(raw[k][:26]).strftime("%Y-%m-%dT%H:%M:%SZ") for k in ("time_start", "time_end")]
        assert f"{want[0]} .. {want[1]}" in line, line
    assert not re.search(r"\d{2}:\d{2}:\d{2}\.\d", r.stdout)     # no fractions of a second
    assert not re.search(r"\b\d{18,}\b", r.stdout)                 # no integer nanoseconds


def test_rerun_with_nothing_changed_says_nothing_changed(demo):
    r = qcpipe(demo, "rerun")
    assert r.returncode == 0, r.stderr
    assert "nothing changed" in r.stdout and "file(s) in the inbox" not in r.stdout
    assert "qcpipe rerun -d DEPLOYMENT" in r.stdout


# --- help ---------------------------------------------------------------------------------------------

COMMANDS = ["process", "holdings", "rerun", "apply-clock", "diff", "lineage", "audit", "package", "check",
            "inspect", "schedule", "report"]


@pytest.mark.parametrize("command", COMMANDS)
def test_every_help_names_the_demo_workspace_in_its_example(command, tmp_path):
    r = run_cli(command, "--help", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    example = r.stdout.split("example, on the demo")[1]
    assert f"qcpipe {command} --workspace sample_raw/workspace.toml" in example
    assert "(default: workspace.toml in the current folder" in " ".join(r.stdout.split())


def test_the_default_workspace_is_the_one_the_help_names(demo):
    """Run from the demo's own folder without --workspace: the default, workspace.toml, is found."""
    r = run_cli("check", cwd=demo.root / "sample_raw")
    assert r.returncode == 0, r.stderr
    assert r.stdout.startswith("ok: register register.toml")


def test_every_command_has_an_example(demo):
    from qcpipe.cli import EXAMPLES, _parser

    sub = next(a for a in _parser()._actions if a.dest == "command")
    assert sorted(sub.choices) == sorted(EXAMPLES) == sorted(COMMANDS)


# --- a UTF-16 file is quarantined with a reason that says so (last: it adds files to the inbox) ------

def test_a_utf16_file_is_quarantined_saying_it_looks_like_utf16(demo):
    src = demo.inbox / "2026-10-26_download"
    new = demo.inbox / "2026-11-09_download"
    new.mkdir()
    # the encodings made by Python's own codecs: "utf-16" writes a byte-order mark, "utf-16-le" none
    (new / "TL7-20934_temp.csv").write_bytes((src / "TL7-20934_temp.csv").read_text("latin-1").encode("utf-16"))
    (new / "low_sonde.tsv").write_bytes((src / "low_sonde.tsv").read_text("utf-8").encode("utf-16-le"))
    summary = nightly_run(load_context(demo.workspace), InProcess())
    reasons = {q.name: q.reason for q in summary.quarantined}
    assert set(reasons) == {"TL7-20934_temp.csv", "low_sonde.tsv"}
    for name, reason in reasons.items():
        assert reason.startswith(f"{name}: looks like UTF-16 text") and 'encoding = "utf-16"' in reason, reason
        assert "\n" not in reason
    r = qcpipe(demo, "holdings", "--status", "quarantined")
    assert r.returncode == 0, r.stderr
    assert Counter("looks like UTF-16 text" in ln for ln in r.stdout.splitlines()[1:]) == {True: 2, False: 2}
