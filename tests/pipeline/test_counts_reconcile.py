"""Counts that reconcile (issue 19): every count of the run's summary equals the same count made here,
independently, from the archive, and every version a run writes says why it was written.

One nightly run without the orchestrator (``nightly_run(ctx, InProcess())``) over a copy of the demo
whose inbox copy has two faults added here, so that their counts are known by construction: the
last line of ``2026-10-26_download/TL7-20934_temp.csv`` cut short (one truncated last line), and two
neighbouring records of ``2026-10-26_download/TL7-20940_temp.csv`` swapped (one record earlier than
the one before it).  Expected values come from the archive, never from the code under test: the
catalog with ``sqlite3``, flags with ``netCDF4``, conflicts files with ``csv``, the quarantine folder
by listing it, archived raw copies with ``csv`` and ``datetime``, and the demo's answer key
(``sample_raw/injected.json``, written by the generator from its own model). The tests run in
file order: the later ones re-run and edit the configuration.
"""

from __future__ import annotations

import csv
import datetime as dt
import json
import re
import sqlite3
from collections import Counter
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from qcpipe.pipeline.context import load_context
from qcpipe.pipeline.run import InProcess, nightly_run, rerun
from qcpipe.report.summary import summary_lines
from tests.conftest import copy_demo, run_cli

#: the words of the IOC primary flags, as the summary shortens them (UNESCO/IOC 2013, Manuals and Guides 54,
#: vol. 3, table 2): pass 1, not evaluated 2, suspect 3, fail 4, missing 9
SHORT = {1: "pass", 2: "not ", 3: "susp", 4: "fail", 9: "miss"}
#: the stored variable a raw variable's download conflict is flagged on (the layouts' raw names)
FLAGGED_AS = {"temperature": ["temperature"], "probe_reading": ["wetness"], "pressure": ["pressure", "water_level"],
              "ph_mv": ["ph"], "air_pressure": ["air_pressure"], "conductivity": ["conductivity"]}
CUT_FILE = "2026-10-26_download/TL7-20934_temp.csv"          # kc-mid-temp-2026-09
SWAPPED_FILE = "2026-10-26_download/TL7-20940_temp.csv"      # kc-low-temp-2026-09


def _cut_last_line(path: Path) -> None:
    """Append a record cut short after its clock field (two of the three fields, no line end)."""
    text = path.read_bytes()
    assert text.endswith(b"\n")
    path.write_bytes(text + b"26/10/2026,09:50")


def _swap_two_records(path: Path) -> None:
    """Swap the 500th and 501st records (both well inside the deployment window: mid October)."""
    lines = path.read_bytes().split(b"\n")
    i = 3 + 500                                   # three header lines (title, download note, column names)
    lines[i], lines[i + 1] = lines[i + 1], lines[i]
    path.write_bytes(b"\n".join(lines))


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    root = tmp_path_factory.mktemp("counts")
    workspace = copy_demo(root)
    inbox = root / "sample_raw" / "inbox"
    _cut_last_line(inbox / CUT_FILE)
    _swap_two_records(inbox / SWAPPED_FILE)
    ctx = load_context(workspace)
    summary = nightly_run(ctx, InProcess())
    key = json.loads((root / "sample_raw" / "injected.json").read_text())
    return type("Demo", (), dict(root=root, workspace=workspace, inbox=inbox, archive=ctx.paths.root,
                                 summary=summary, lines=summary_lines(summary), key=key))


def rows(demo, sql, *args):
    con = sqlite3.connect(demo.archive / "catalog.sqlite")
    con.row_factory = sqlite3.Row
    try:
        return [dict(r) for r in con.execute(sql, args)]
    finally:
        con.close()


def netcdf(path):
    """Variables (masked arrays turned plain) and global attributes of a NetCDF file, read with netCDF4."""
    with netCDF4.Dataset(path) as ds:
        ds.set_auto_mask(False)
        return {k: np.asarray(v[:]) for k, v in ds.variables.items()}, {k: ds.getncattr(k) for k in ds.ncattrs()}


def datasets(demo) -> dict:
    """deployment -> (variables, attributes) of every dataset file in the archive."""
    out = {}
    for p in sorted((demo.archive / "datasets").rglob("*.nc")):
        dep = re.fullmatch(r"qcpipe_[^_]+_(.+)_v\d{3}", p.stem).group(1)
        out[dep] = netcdf(p)
    return out


def conflict_rows(demo) -> dict:
    """deployment -> rows of its conflicts file."""
    out = {}
    for p in (demo.archive / "conflicts").glob("*.csv"):
        with p.open(newline="", encoding="utf-8") as f:
            out[p.stem] = list(csv.DictReader(f))
    return out


def line(demo, prefix: str) -> str:
    (found,) = [ln for ln in demo.lines if ln.startswith(prefix)]
    return found


def test_files_and_quarantine_reconcile(demo):
    inbox_files = [p for p in demo.inbox.rglob("*") if p.is_file()]
    quarantined = [p for p in (demo.archive / "quarantine").iterdir() if not p.name.endswith(".reason.txt")]
    archived = rows(demo, "SELECT * FROM raw_files WHERE status = 'archived'")
    in_catalog = rows(demo, "SELECT * FROM raw_files WHERE status = 'quarantined'")
    raw_copies = [p for p in (demo.archive / "raw").rglob("*") if p.is_file()]
    assert len(inbox_files) == 20 and len(quarantined) == len(in_catalog) == 2
    assert len(archived) == len(raw_copies) == len(inbox_files) - len(quarantined)
    # every inbox file was archived or quarantined, so none was skipped for changing during the run
    skipped = len(inbox_files) - len(archived) - len(quarantined)
    assert line(demo, "files:") == (f"files: {len(inbox_files)} in inbox, {len(archived)} ingested, {len(quarantined)} "
                                    f"quarantined, 0 already archived, 0 repeated copies skipped, {skipped} skipped "
                                    "this run")
    assert sorted(q.name for q in demo.summary.quarantined) == sorted(p.name.split("_", 1)[1] for p in quarantined)


def test_samples_and_flags_per_variable_reconcile(demo):
    found = datasets(demo)
    catalog = {r["deployment"]: r for r in rows(demo, "SELECT * FROM datasets")}
    assert set(found) == set(catalog) == {r.deployment for r in demo.summary.results}
    total = Counter()
    for r in demo.summary.results:
        variables, _ = found[r.deployment]
        n = variables["time"].size
        assert r.samples == n == catalog[r.deployment]["samples"]
        counted = {}
        for var in r.flag_counts:
            per = Counter(int(x) for x in variables[f"{var}_qc"])
            counted[var] = {str(k): v for k, v in per.items()}
            total.update(per)
        assert r.flag_counts == counted == json.loads(catalog[r.deployment]["flag_counts"]), r.deployment
        parts = "; ".join(f"{var}: " + " ".join(f"{SHORT[int(k)]}={v}" for k, v in sorted(per.items()))
                          for var, per in counted.items())
        assert f"  {r.station}/{r.deployment} v001: {parts}" in demo.lines
    samples = sum(v["time"].size for v, _ in found.values())
    assert line(demo, "samples:").startswith(f"samples: {samples} in {len(found)} dataset(s);")
    assert line(demo, "flags (aggregate") == ("flags (aggregate, all variables): " + ", ".join(
        f"{w} {total.get(k, 0)}" for k, w in ((1, "pass"), (2, "not evaluated"), (3, "suspect"), (4, "fail"),
                                               (9, "missing"))))


def test_conflicts_reconcile_per_variable_with_their_files_and_flags(demo):
    found, csvs = datasets(demo), conflict_rows(demo)
    assert csvs, "the demo has an overlap conflict (answer key: overlap_conflict)"
    for r in demo.summary.results:
        variables, attrs = found[r.deployment]
        listed = csvs.get(r.deployment, [])
        flagged_any = np.zeros(variables["time"].size, bool)
        for raw_var in {row["variable"] for row in listed} | set(FLAGGED_AS):
            times = {row["time_utc"] for row in listed if row["variable"] == raw_var}
            for var in FLAGGED_AS[raw_var]:
                if f"{var}_qc_download_conflict" in variables:
                    flagged = variables[f"{var}_qc_download_conflict"] == 3
                    assert np.count_nonzero(flagged) == len(times), (r.deployment, var)
                    flagged_any |= flagged
                elif var in variables and raw_var == var:
                    assert not times, (r.deployment, var)
        n = len({row["time_utc"] for row in listed})
        assert r.counts["conflicts"] == attrs["download_conflicts"] == np.count_nonzero(flagged_any) == n
    total = sum(len({row["time_utc"] for row in rs}) for rs in csvs.values())
    assert f", {total} conflicting timestamps kept and flagged suspect;" in line(demo, "samples:")


def test_every_overlapping_and_trimmed_record_is_accounted_for(demo):
    # answer key (the generator's own model): rows written per file, repeated rows of overlapping
    # downloads, samples outside the window (as the register declares the one-hour-off probe)
    csvs = conflict_rows(demo)
    found = datasets(demo)
    dup = pre = post = 0
    for k in demo.key["deployments"]:
        d = k["deployment"]
        declared = k.get("as_declared", k)
        r = next(r for r in demo.summary.results if r.deployment == d)
        alternatives = len(csvs.get(d, []))      # the other values of conflicting records, listed not kept
        assert r.counts["duplicates"] + alternatives == k["duplicate_rows"], d
        assert r.counts["pre_deployment"] == found[d][1]["samples_removed_pre_deployment_total"] \
            == declared["removed_pre_deployment"], d
        assert r.counts["post_recovery"] == found[d][1]["samples_removed_post_recovery_total"] \
            == declared["removed_post_deployment"], d
        assert sum(k["rows_per_file"]) == (r.samples + r.counts["duplicates"] + alternatives
                                           + r.counts["pre_deployment"] + r.counts["post_recovery"]), d
        dup, pre, post = dup + r.counts["duplicates"], pre + r.counts["pre_deployment"], post + r.counts["post_recovery"]
    assert (f"; {dup} repeated records from overlapping downloads dropped," in line(demo, "samples:")
            and f"; {pre} pre-deployment and {post} post-recovery samples trimmed" in line(demo, "samples:"))


def _archived_copy(demo, inbox_name: str) -> Path:
    import hashlib

    digest = hashlib.sha256((demo.inbox / inbox_name).read_bytes()).hexdigest()
    (row,) = rows(demo, "SELECT archived_path FROM raw_files WHERE sha256 = ?", digest)
    path = Path(row["archived_path"])
    return path if path.is_absolute() else demo.archive / path


def test_truncated_last_line_is_counted_in_summary_report_and_dataset(demo):
    with _archived_copy(demo, CUT_FILE).open(newline="", encoding="latin-1") as f:
        records = list(csv.reader(f))
    short = [r for r in records[3:] if len(r) < len(records[2])]
    assert short == [records[-1]]                       # counted here: one short record, the last one
    found = datasets(demo)
    per = {d: int(a.get("truncated_last_lines_total", -1)) for d, (_, a) in found.items()}
    assert per == {d: (1 if d == "kc-mid-temp-2026-09" else 0) for d in found}
    assert "; 1 truncated last line(s) not read" in line(demo, "samples:")
    assert any(n.kind == "reading" and n.deployment == "kc-mid-temp-2026-09" and "cut short" in n.text
               for n in demo.summary.all_notices())
    _, attrs = found["kc-mid-temp-2026-09"]
    assert "1 truncated last line(s) not read" in attrs["history"]
    page = Path(demo.summary.report).read_text(encoding="utf-8")
    assert re.search(r"truncated last lines not read</td><td[^>]*>1<", page)


def test_records_out_of_order_are_sorted_counted_and_reported(demo):
    with _archived_copy(demo, SWAPPED_FILE).open(newline="", encoding="latin-1") as f:
        records = list(csv.reader(f))[3:]
    stamps = [dt.datetime.strptime(f"{d} {c}", "%d/%m/%Y %H:%M") for d, c, *_ in records]
    backwards = sum(b < a for a, b in zip(stamps, stamps[1:]))
    assert backwards == 1                                # counted here from the archived copy
    found = datasets(demo)
    per = {d: int(a.get("records_out_of_time_order_total", -1)) for d, (_, a) in found.items()}
    assert per == {d: (backwards if d == "kc-low-temp-2026-09" else 0) for d in found}
    variables, attrs = found["kc-low-temp-2026-09"]
    assert np.all(np.diff(variables["time"]) > 0)        # still sorted
    assert f"{backwards} record(s) out of time order sorted" in attrs["history"]
    assert f"; {backwards} record(s) out of time order sorted" in line(demo, "samples:")
    assert any(n.kind == "reading" and n.deployment == "kc-low-temp-2026-09" and "sorted into time order" in n.text
               for n in demo.summary.all_notices())
    page = Path(demo.summary.report).read_text(encoding="utf-8")
    assert re.search(r"records out of time order \(sorted\)</td><td[^>]*>1<", page)


def test_derived_products_reconcile(demo):
    products = [p for p in (demo.archive / "derived").rglob("*") if p.is_file()]
    assert sum(len(r.products) for r in demo.summary.results) == len(products)
    assert f", {len(products)} derived products in " in line(demo, "outputs:")


def test_every_version_of_the_first_run_says_why(demo):
    assert {r.deployment for r in demo.summary.results} == set(demo.summary.reruns)
    for d, why in demo.summary.reruns.items():
        assert why and why[0].startswith("new raw data:"), d
        # the count and the files named agree with the catalog's raw files of the deployment (downloads of
        # one logger share a file name, so the files are named by their path in the inbox)
        count, named = re.fullmatch(r"new raw data: (\d+) file\(s\) \((.*)\)", why[0]).groups()
        named = named.split(", ")
        in_catalog = rows(demo, "SELECT * FROM raw_files WHERE deployment = ? AND status = 'archived'", d)
        assert int(count) == len(named) == len(set(named)) == len(in_catalog), (d, why[0])
        assert sorted(Path(n).name for n in named) == sorted(r["original_name"] for r in in_catalog), d


def test_the_report_says_its_links_work_in_place_and_exports_with_what_it_links(demo, tmp_path):
    page = Path(demo.summary.report)
    assert "they work only while the page stays in the archive" in page.read_text(encoding="utf-8")
    out = tmp_path / "copy"
    r = run_cli("report", "--workspace", str(demo.workspace), "--out", str(out), cwd=demo.root)
    assert r.returncode == 0, r.stderr
    index = out / "reports" / page.parent.name / "index.html"
    assert r.stdout.strip().endswith(f"open {index}")
    # every relative link of every copied page resolves to a file in the copy, identical to the archive's
    pages = sorted(index.parent.glob("*.html"))
    assert [p.name for p in pages] == sorted(p.name for p in page.parent.glob("*.html"))
    links = 0
    for p in pages:
        for href in re.findall(r'href="([^"#:]+)"', p.read_text(encoding="utf-8")):
            target = (p.parent / href).resolve()
            assert target.is_file() and target.is_relative_to(out.resolve()), (p.name, href)
            original = demo.archive / target.relative_to(out.resolve())
            assert target.read_bytes() == original.read_bytes()
            links += 1
    assert any((out / "conflicts").glob("*.csv")) and any((out / "datasets").rglob("*.nc")) and links > 20
    inside = run_cli("report", "--workspace", str(demo.workspace), "--out", str(demo.archive / "x"), cwd=demo.root)
    assert inside.returncode == 2 and "is inside the archive" in inside.stderr


# --- re-runs: nothing changed, forced, and a change with dependents ---------------------------------

def versions(demo) -> dict:
    return {r["deployment"]: r["v"] for r in rows(demo, "SELECT deployment, MAX(version) AS v FROM datasets "
                                                          "GROUP BY deployment")}


def test_rerun_of_an_unchanged_deployment_writes_nothing_and_says_so(demo):
    before, listing = versions(demo), sorted((demo.archive / "datasets").rglob("*.nc"))
    r = run_cli("rerun", "--workspace", str(demo.workspace), "-d", "kc-mid-temp-2026-09", cwd=demo.root)
    assert r.returncode == 0, r.stderr
    assert "orchestrator not started" in r.stdout
    assert "nothing changed: the latest dataset of kc-mid-temp-2026-09" in r.stdout
    assert "--even-if-unchanged" in r.stdout
    assert versions(demo) == before and sorted((demo.archive / "datasets").rglob("*.nc")) == listing
    bad = run_cli("rerun", "--workspace", str(demo.workspace), "--even-if-unchanged", cwd=demo.root)
    assert bad.returncode == 2 and bad.stderr.strip() == (
        "qcpipe: error: --even-if-unchanged needs the deployments to re-QC: add -d DEPLOYMENT")


def test_rerun_even_if_unchanged_writes_a_version_that_says_so(demo):
    before = versions(demo)
    summary = rerun(load_context(demo.workspace), InProcess(), ["kc-mid-temp-2026-09"], even_if_unchanged=True)
    after = versions(demo)
    assert {d for d in after if after[d] != before[d]} == {"kc-mid-temp-2026-09"}
    assert summary.reruns == {"kc-mid-temp-2026-09": ["asked for with --even-if-unchanged (no input changed)"]}


def test_after_a_gauge_rule_change_every_version_written_names_its_cause(demo):
    rules = demo.root / "qc_rules" / "kelpwhistle-cove.toml"
    rules.write_text(rules.read_text() + '\n[station.kc-pier.variable.water_level]\nspike = { suspect = 0.2 }\n')
    before = versions(demo)
    summary = rerun(load_context(demo.workspace), InProcess())
    after = versions(demo)
    written = {d for d in after if after[d] != before[d]}
    # the gauge, and through the site's tide reference every other instrument of the site but the barometer
    kinds = {r["deployment"] for r in rows(demo, "SELECT DISTINCT deployment FROM datasets")}
    assert written == kinds - {"kc-deck-baro-2026-09"} and len(written) == 8
    assert {r.deployment for r in summary.results} == written == set(summary.reruns)
    assert summary.reruns["kc-pier-level-2026-09"] == ["rules.water_level.spike.suspect: 0.15 -> 0.2"]
    gauge = "gauge kc-pier-level-2026-09 at site kelpwhistle-cove is QC'd in this run (the site's tide reference)"
    for d in written - {"kc-pier-level-2026-09"}:
        station = d.rsplit("-", 3)[0]                 # kc-mid-temp-2026-09 -> kc-mid
        probe = f"{station}-probe-2026-09"
        also = [] if d == probe else [f"immersion probe {probe} of the station is QC'd in this run "
                                      "(the station's immersion state)"]
        assert summary.reruns[d] == [gauge, *also], d
    text = summary_lines(summary)
    assert sum(ln.startswith("  re-QC ") for ln in text) == 8


def test_a_conflict_trimmed_by_a_shorter_window_leaves_the_conflicts_file_and_says_so(demo):
    # the demo's one conflict (answer key: overlap_conflict at 2026-10-04T16:30Z) falls outside a window that
    # now ends at 16:00 that day; the raw files are read again
    (fault,) = [f for f in demo.key["faults"] if f["kind"] == "overlap_conflict"]
    assert fault["time_utc"] == "2026-10-04T16:30:00Z"
    register = demo.root / "sample_raw" / "register.toml"
    text = register.read_text()
    old = 'instrument = "TL7-20931"\nstart = 2026-09-14T09:42:30Z\nend = 2026-10-26T08:05:30Z'
    assert text.count(old) == 1
    register.write_text(text.replace(old, old.replace("end = 2026-10-26T08:05:30Z", "end = 2026-10-04T16:00:00Z")))
    summary = rerun(load_context(demo.workspace), InProcess())
    assert conflict_rows(demo).get("kc-high-temp-2026-09") == []       # header only: nothing listed
    r = next(r for r in summary.results if r.deployment == "kc-high-temp-2026-09")
    variables, attrs = netcdf(r.dataset)
    assert attrs["download_conflicts"] == 0
    assert not np.any(variables.get("temperature_qc_download_conflict", np.zeros(0)) == 3)
    (said,) = [n for n in summary.all_notices() if n.kind == "conflict" and n.deployment == "kc-high-temp-2026-09"]
    assert said.text.startswith("1 conflicting record(s) listed in its conflicts file before are no longer")
    assert "the conflicts file now lists the 0 that remain" in said.text
