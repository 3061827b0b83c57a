"""The qcpipe command: one-line errors, no tracebacks, checks that process nothing."""

from __future__ import annotations

import shutil

import pytest

from tests.conftest import REPO, run_cli


@pytest.fixture()
def demo_copy(tmp_path):
    shutil.copytree(REPO / "sample_raw", tmp_path / "sample_raw", ignore=shutil.ignore_patterns("inbox"))
    shutil.copytree(REPO / "qc_rules", tmp_path / "qc_rules")
    (tmp_path / "sample_raw" / "inbox").mkdir()
    return tmp_path


def test_check_workspace_ok_and_processes_nothing(demo_copy):
    r = run_cli("check", "--workspace", str(demo_copy / "sample_raw" / "workspace.toml"))
    assert r.returncode == 0, r.stderr
    assert r.stdout.count("ok:") == 3
    assert not (demo_copy / "demo_archive").exists()


def test_check_single_files(demo_copy):
    r = run_cli("check", "--rules", str(demo_copy / "qc_rules" / "kelpwhistle-cove.toml"),
                "--layouts", str(demo_copy / "sample_raw" / "layouts.toml"))
    assert r.returncode == 0 and r.stdout.count("ok:") == 2


@pytest.mark.parametrize("command", ["check", "process", "holdings"])
def test_bad_register_is_one_line_exit_2(demo_copy, command):
    reg = demo_copy / "sample_raw" / "register.toml"
    reg.write_text(reg.read_text().replace("elevation_m = 2.4", "elevation_m = \"high\"", 1))
    r = run_cli(command, "--workspace", str(demo_copy / "sample_raw" / "workspace.toml"))
    if command == "holdings":      # listing does not need the register
        assert r.returncode == 0
        return
    assert r.returncode == 2
    assert "Traceback" not in r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith(f"qcpipe: error: {reg}: key station[0] (id 'kc-high').elevation_m:")


def test_missing_workspace_file(tmp_path):
    r = run_cli("check", "--workspace", str(tmp_path / "nope.toml"))
    assert r.returncode == 2 and "file not found" in r.stderr and "Traceback" not in r.stderr


def test_unknown_layout_named_by_register(demo_copy):
    reg = demo_copy / "sample_raw" / "register.toml"
    text = reg.read_text()
    first = text.index('layout = "')
    end = text.index('"', first + len('layout = "'))
    reg.write_text(text[:first] + 'layout = "no-such-layout' + text[end:])
    r = run_cli("check", "--workspace", str(demo_copy / "sample_raw" / "workspace.toml"))
    assert r.returncode == 2 and "layout 'no-such-layout' is not in" in r.stderr


def test_holdings_on_empty_archive(demo_copy):
    r = run_cli("holdings", "--workspace", str(demo_copy / "sample_raw" / "workspace.toml"))
    assert r.returncode == 0 and "empty" in r.stdout


def test_holdings_lists_demo_run(demo_run):
    r = run_cli("holdings", "--workspace", str(demo_run.workspace))
    assert r.returncode == 0, r.stderr
    assert "datasets (9):" in r.stdout and "quarantined" in r.stdout and "runs (2):" in r.stdout
    assert "nothing new" in r.stdout


def test_schedule_without_server_is_one_line(demo_copy):
    r = run_cli("schedule", "--workspace", str(demo_copy / "sample_raw" / "workspace.toml"),
                env={"PREFECT_API_URL": ""})
    assert r.returncode == 2 and "need a running Prefect server" in r.stderr


def test_every_command_has_help():
    for cmd in ["process", "holdings", "check", "schedule", "apply-clock"]:
        r = run_cli(cmd, "--help")
        assert r.returncode == 0 and "--workspace" in r.stdout
