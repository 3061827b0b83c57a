"""Prefect artifacts of a run: nothing outside a flow run; inside one, the summary table and
the report link under their keys (a real embedded Prefect server, in a subprocess)."""

from __future__ import annotations

import json
import os
import subprocess
import sys

from qcpipe.report import publish_artifacts, summary_markdown
from qcpipe.report.artifacts import REPORT_KEY, SUMMARY_KEY


def test_keys_are_lowercase_letters_digits_dashes():
    import re

    for key in (SUMMARY_KEY, REPORT_KEY):
        assert re.fullmatch(r"[a-z0-9-]+", key)
    assert (SUMMARY_KEY, REPORT_KEY) == ("qcpipe-run-summary", "qcpipe-run-report")


def test_no_op_outside_a_flow_run(report_case):
    assert publish_artifacts(report_case.run, report_case.index) is None


def test_markdown_has_one_row_per_station_variable(report_case):
    md = summary_markdown(report_case.run)
    rows = [ln for ln in md.splitlines() if ln.startswith("| kc-")]
    expected = [(r["station"], r["deployment"], var, per) for r in report_case.run["results"]
                for var, per in r["flag_counts"].items()]
    assert len(rows) == len(expected)
    for st, dep, var, per in expected:
        want = f"| {st} | {dep} v001 | {var} | " + " | ".join(str(per.get(k, 0)) for k in "12349") + " |"
        assert want in rows


def test_markdown_cells_cannot_break_the_table():
    run = {"run_id": 3, "files_seen": 1, "ingested": 0, "quarantined": [{"name": "a|b.csv", "reason": "x\ny"}],
           "results": []}
    md = summary_markdown(run)
    assert "a\\|b.csv: x y" in md and "nothing new" in md



def test_markdown_lists_notices_with_their_kind_and_place():
    run = {"run_id": 5, "files_seen": 1, "ingested": 1, "quarantined": [], "notices": [
        {"kind": "run", "text": "the report was not written", "station": None, "deployment": None}],
        "results": [{"station": "kc-mid", "deployment": "probe-9", "version": 1, "samples": 3,
                     "flag_counts": {"wetness": {"1": 3}},
                     "notices": [{"kind": "clock", "text": "an hour | late", "station": "kc-mid",
                                  "deployment": "probe-9"}]}]}
    md = summary_markdown(run)
    assert md.endswith("## Needs attention\n\n* Clock looks wrong: kc-mid/probe-9: an hour \\| late\n"
                       "* Run: the report was not written\n")


def test_markdown_says_where_the_air_pressure_came_from():
    baro = {"source": "site barometer ...", "sensor": "absolute", "barometer": "b-1 (v002)",
            "from_barometer": 990, "from_constant": 10, "constant_hpa": 1013.25}
    run = {"run_id": 4, "files_seen": 2, "ingested": 2, "quarantined": [], "results": [
        {"station": "pier", "deployment": "lvl", "version": 1, "samples": 1000,
         "flag_counts": {"water_level": {"1": 990, "3": 10}}, "air_pressure": baro},
        {"station": "quay", "deployment": "vented", "version": 1, "samples": 5,
         "flag_counts": {"water_level": {"1": 5}}, "air_pressure": {"source": "none: vented logger"}}]}
    md = summary_markdown(run)
    assert "## Barometric correction" in md
    assert "* pier/lvl: barometer b-1 (v002) at 990 samples, configured constant at 10 (flagged suspect)" in md
    assert "quay/vented: barometer" not in md


FLOW = r"""
import json, sys
from qcpipe.flows.prefect_settings import configure_prefect
configure_prefect(sys.argv[1])
from prefect import flow
from prefect.artifacts import Artifact
from qcpipe.report import publish_artifacts

run = json.loads(open(sys.argv[2]).read())

@flow(name="report-artifacts-test")
def publish():
    return publish_artifacts(run, sys.argv[3])

ids = publish()
summary = Artifact.get("qcpipe-run-summary")
link = Artifact.get("qcpipe-run-report")
print(json.dumps({"ids": ids, "summary": summary.data, "link": link.data, "types": [summary.type, link.type]}))
"""


def test_artifacts_inside_a_flow_run(report_case, tmp_path):
    run_json = tmp_path / "run.json"
    run_json.write_text(json.dumps(report_case.run))
    env = {k: v for k, v in os.environ.items() if k != "PREFECT_HOME"}
    home = report_case.archive.parent / "prefect-home"     # a Prefect home of this test's own
    done = subprocess.run([sys.executable, "-c", FLOW, str(home), str(run_json), str(report_case.index)],
                          capture_output=True, text=True, timeout=300, env=env)
    assert done.returncode == 0, done.stderr[-3000:]
    out = json.loads(done.stdout.strip().splitlines()[-1])
    assert out["ids"] is not None and len(out["ids"]) == 2
    assert report_case.index.resolve().as_uri() in out["link"]
    first = report_case.run["results"][0]
    var, per = next(iter(sorted(first["flag_counts"].items())))
    assert f"| {first['station']} | {first['deployment']} v001 | {var} | {per.get('1', 0)} |" in out["summary"]
