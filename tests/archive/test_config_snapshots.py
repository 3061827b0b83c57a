"""The configuration that made a dataset is kept in the archive by content hash, and a bag encloses
the rule set file that made its dataset, not the workspace's current one (issue 18 section 1, second
bullet): rule set, register and harmonic constants, and audit checks the copies.

The demo is processed without the orchestrator (rule set A), a temperature threshold is changed and
the affected deployments re-run (rule set B, version 2), then a pH threshold is changed without a
re-run (rule set C, the current file). The expected bytes are the files the test itself wrote, not
output of the code under test.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from qcpipe.pipeline.context import load_context
from qcpipe.pipeline.run import InProcess, rerun
from tests.conftest import demo_in_process, run_cli

TEMP = "kc-mid-temp-2026-09"


def edit(path: Path, old: str, new: str) -> bytes:
    text = path.read_text()
    assert text.count(old) == 1, old
    path.write_text(text.replace(old, new))
    return path.read_bytes()


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = demo_in_process(tmp_path_factory.mktemp("snapshots"))
    d.rules = d.root / "qc_rules" / "kelpwhistle-cove.toml"
    d.bytes_a = d.rules.read_bytes()
    d.bytes_b = edit(d.rules, "spike = { half_window = \"20 min\", suspect = 4.0, fail = 7.0 }",
                     "spike = { half_window = \"20 min\", suspect = 4.5, fail = 7.0 }")
    rerun(load_context(d.workspace), InProcess())
    d.bytes_c = edit(d.rules, "spike = { half_window = \"30 min\", suspect = 0.4, fail = 1.0 }",
                     "spike = { half_window = \"30 min\", suspect = 0.45, fail = 1.0 }")
    return d


def test_each_rule_set_used_is_kept_by_its_hash(demo):
    ctx = load_context(demo.workspace)
    v1, v2 = ctx.catalog.dataset_versions(TEMP)
    assert v1["rules_sha256"] != v2["rules_sha256"] != ctx.rules.sha256
    assert ctx.paths.config_snapshot("rules", v1["rules_sha256"]).read_bytes() == demo.bytes_a
    assert ctx.paths.config_snapshot("rules", v2["rules_sha256"]).read_bytes() == demo.bytes_b
    assert not ctx.paths.config_snapshot("rules", ctx.rules.sha256).exists()     # C made no dataset
    assert ctx.paths.config_snapshot("register", v1["register_sha256"]).read_bytes() == \
        (demo.root / "sample_raw" / "register.toml").read_bytes()
    lineage = run_cli("lineage", TEMP, "--version", "1", "--workspace", str(demo.workspace), cwd=demo.root)
    assert lineage.returncode == 0, lineage.stderr
    assert f"rule set: kelpwhistle-cove sha256 {v1['rules_sha256']} (copy as used: config/rules/" \
           f"{v1['rules_sha256']}.toml)" in lineage.stdout


def test_bag_encloses_the_rule_set_that_made_its_dataset(demo):
    ctx = load_context(demo.workspace)
    latest = ctx.catalog.latest_dataset(TEMP)
    assert latest["version"] == 2
    out = demo.root / "bags"
    done = run_cli("package", "--deployment", TEMP, "--out", str(out), "--workspace", str(demo.workspace),
                   cwd=demo.root)
    assert done.returncode == 0, done.stdout + done.stderr
    (bag,) = out.iterdir()
    enclosed = bag / "data" / "config" / "kelpwhistle-cove.toml"
    assert enclosed.read_bytes() == demo.bytes_b != demo.bytes_c
    readme = (bag / "data" / "README.txt").read_text()
    assert f"rule set kelpwhistle-cove (SHA-256 {latest['rules_sha256']})" in readme
    assert "CURRENT" not in readme and ctx.rules.sha256 not in readme


def test_bag_encloses_the_whole_register_and_the_constants_as_used(demo):
    """The register is edited after the datasets were made: the bag holds the bytes used, not the edit."""
    ctx = load_context(demo.workspace)
    reg_file = demo.root / "sample_raw" / "register.toml"
    used = reg_file.read_bytes()
    edit(reg_file, "[[site]]", "# a comment added after the datasets were made\n[[site]]")
    const_file = ctx.register.constituents_path("kelpwhistle-cove")
    out = demo.root / "bags-register"
    try:
        done = run_cli("package", "--deployment", TEMP, "--out", str(out), "--workspace", str(demo.workspace),
                       cwd=demo.root)
    finally:
        reg_file.write_bytes(used)
    assert done.returncode == 0, done.stdout + done.stderr
    (bag,) = out.iterdir()
    assert (bag / "data" / "config" / "register.toml").read_bytes() == used
    assert (bag / "data" / "config" / "harmonic_constants.toml").read_bytes() == const_file.read_bytes()
    readme = (bag / "data" / "README.txt").read_text()
    assert "config/register.toml: the whole station register as used" in readme
    assert "config/harmonic_constants.toml: the site's harmonic constants as used" in readme


def test_audit_checks_the_configuration_copies(demo):
    """A copy whose bytes no longer match its name is a problem; a dataset whose rule set copy is gone
    is listed (archives made before copies were kept have none)."""
    ctx = load_context(demo.workspace)
    v1 = ctx.catalog.dataset_versions(TEMP)[0]
    copy = ctx.paths.config_snapshot("rules", v1["rules_sha256"])
    good = copy.read_bytes()
    ok = run_cli("audit", "--workspace", str(demo.workspace), cwd=demo.root)
    assert ok.returncode == 0 and "configuration copies checked: " in ok.stdout, ok.stdout + ok.stderr
    assert int(ok.stdout.split("configuration copies checked: ")[1].split()[0]) == \
        len(list((demo.archive / "config").glob("*/*.toml")))
    try:
        copy.write_bytes(good.replace(b"suspect = 4.0", b"suspect = 9.0"))
        bad = run_cli("audit", "--workspace", str(demo.workspace), cwd=demo.root)
        assert bad.returncode == 1
        assert f"configuration copy config/rules/{copy.name} does not hold what its name" in bad.stdout
        copy.unlink()
        gone = run_cli("audit", "--workspace", str(demo.workspace), cwd=demo.root)
        assert f"configuration not kept in the archive (datasets made before qcpipe kept copies): rule set " \
               f"{v1['rules_sha256'][:12]}" in gone.stdout
    finally:
        copy.write_bytes(good)
