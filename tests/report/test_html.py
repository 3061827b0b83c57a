"""The HTML report on a real demo archive: self-contained pages, working links, the
numbers the catalog recorded, the faults the demo generator injected, escaping."""

from __future__ import annotations

import base64
import html
import io
import json
import re
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote, urlparse

import matplotlib.image as mpimg
import pytest

from qcpipe.archive.ncio import read_dataset
from qcpipe.report import run_from_catalog, write_run_report
from qcpipe.checks.flags import FLAG_WORDS


class Page(HTMLParser):
    """Collects image sources, links, scripts, headings and table rows of a page."""

    def __init__(self, text: str):
        super().__init__()
        self.imgs, self.links, self.scripts, self.h2 = [], [], 0, []
        self.rows: list[list[str]] = []
        self._cell = None
        self._in_h2 = False
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        elif tag == "a" and "href" in a:
            self.links.append(a["href"])
        elif tag == "script":
            self.scripts += 1
        elif tag == "tr":
            self.rows.append([])
        elif tag in ("td", "th"):
            self._cell = []
        elif tag == "h2":
            self._in_h2 = True
            self.h2.append("")

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None and self.rows:
            self.rows[-1].append("".join(self._cell).strip())
            self._cell = None
        elif tag == "h2":
            self._in_h2 = False

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)
        if self._in_h2:
            self.h2[-1] += data


def pages(case) -> list[Path]:
    return sorted(case.index.parent.glob("*.html"))


def section(text: str, heading: str) -> str:
    """The HTML from the <h2> named ``heading`` to the next <h2>."""
    m = re.search(rf"<h2[^>]*>{re.escape(heading)}</h2>(.*?)(?=<h2|</main>)", text, re.S)
    assert m, f"no section {heading!r}"
    return m.group(1)


def number(cell: str) -> int:
    return int(re.sub(r"\D", "", cell) or 0)


def test_report_is_where_the_brief_says(report_case):
    assert report_case.index == report_case.archive / "reports" / f"run-{report_case.run['run_id']}" / "index.html"
    assert not [p for p in report_case.index.parent.iterdir() if p.name.endswith(".tmp")]


def test_one_page_per_station_with_data(report_case):
    stations = {r["station"] for r in report_case.run["results"]}
    assert len(stations) == 5          # four shore stations and the pier deck's barometer
    names = {p.name for p in pages(report_case)}
    assert names == {"index.html"} | {f"station-{s}.html" for s in stations}


def test_images_are_embedded_pngs(report_case):
    total = 0
    for page in pages(report_case):
        doc = Page(page.read_text(encoding="utf-8"))
        for src in doc.imgs:
            assert src.startswith("data:image/png;base64,"), (page.name, src[:40])
            raw = base64.b64decode(src.split(",", 1)[1], validate=True)
            assert raw[:8] == b"\x89PNG\r\n\x1a\n"
            img = mpimg.imread(io.BytesIO(raw), format="png")
            assert img.shape[0] > 100 and img.shape[1] > 300
            total += 1
        assert doc.scripts == 0, page.name
    assert total >= 4 * 2      # every station has at least a series and the water level


def test_every_link_resolves_to_a_file(report_case):
    checked = 0
    for page in pages(report_case):
        for href in Page(page.read_text(encoding="utf-8")).links:
            url = urlparse(href)
            assert url.scheme == "" and url.netloc == "", (page.name, href)
            if not url.path:
                continue            # an anchor on the same page
            target = (page.parent / unquote(url.path)).resolve()
            assert target.is_file(), (page.name, href)
            checked += 1
    assert checked > 10


def test_sections_in_order(report_case):
    doc = Page(report_case.index.read_text(encoding="utf-8"))
    assert doc.h2[:2] == ["Needs attention", "This run"] and doc.h2[-1] == "Stations"
    assert "What changed" not in doc.h2          # no diff in this run dict


def test_needs_attention_lists_injected_problems(report_case):
    text = section(report_case.index.read_text(encoding="utf-8"), "Needs attention")
    faults = report_case.injected["faults"]
    for f in faults:
        if f["kind"] in ("unknown_serial", "unparseable_file"):
            assert Path(f["file"]).name in text, f
    (clock,) = [f for f in faults if f["kind"] == "clock_one_hour_off"]
    assert re.search(rf"Clock looks wrong</b>\s*<b>{clock['station']}/{clock['deployment']}</b>", text)
    # the station with most failed aggregate flags, from the catalog's counts
    fails = {}
    for r in report_case.run["results"]:
        fails[r["station"]] = fails.get(r["station"], 0) + sum(p.get("4", 0) for p in r["flag_counts"].values())
    worst = max(fails, key=fails.get)
    first_fail = re.search(r"Failed samples</b>\s*<b>([^<]+)</b>", text)
    assert first_fail and first_fail.group(1) == worst


def test_flag_table_matches_catalog(report_case):
    doc = Page(section(report_case.index.read_text(encoding="utf-8"), "This run"))
    header = next(r for r in doc.rows if r and r[0] == "Station")
    cols = {k: header.index(f"{k} {w}") for k, w in FLAG_WORDS.items()}
    table = {(r[1], r[3]): r for r in doc.rows if len(r) == len(header) and r[0] != "Station"}
    expected = [(r["deployment"], var, per) for r in report_case.run["results"] for var, per in r["flag_counts"].items()]
    assert len(table) == len(expected)
    for dep, var, per in expected:
        row = table[(dep, var)]
        for k, col in cols.items():
            assert number(row[col]) == per.get(k, 0), (dep, var, k)


def test_run_counts_match_catalog(report_case):
    doc = Page(section(report_case.index.read_text(encoding="utf-8"), "This run"))
    facts = {r[0]: r[1] for r in doc.rows if len(r) == 2}
    assert number(facts["files in the inbox"]) == report_case.run["files_seen"]
    assert number(facts["files ingested"]) == report_case.run["ingested"]
    assert number(facts["files quarantined"]) == len(report_case.run["quarantined"])
    assert number(facts["samples in them"]) == sum(r["samples"] for r in report_case.run["results"])
    # the catalog keeps no per-deployment ingest counts: the page must not claim zero
    assert facts["repeated records of overlapping downloads dropped"] == "not recorded"


def test_station_page_says_offsets_are_not_stored(report_case):
    (clock,) = [f for f in report_case.injected["faults"] if f["kind"] == "clock_one_hour_off"]
    ds = read_dataset(next(r["dataset"] for r in report_case.run["results"]
                           if r["deployment"] == clock["deployment"]))
    text = (report_case.index.parent / f"station-{clock['station']}.html").read_text(encoding="utf-8")
    assert "Probe clock against the tide" in text
    if "transition_offset" not in ds.data_vars:
        assert "does not store the offset of each wet/dry transition" in text
    rows = {r[0]: r[1] for r in Page(text).rows if len(r) == 2}
    offset_min = float(ds.attrs["clock_transition_offset_s"]) / 60
    assert rows["median offset of observed from predicted transitions"] == f"{offset_min:.1f} min"
    assert rows["clock error suspected"] == "yes"


def test_station_pages_show_exposure_and_tide_caution(report_case):
    for page in pages(report_case):
        if page.name == "index.html":
            continue
        text = page.read_text(encoding="utf-8")
        assert "not for navigation or safety planning" in text, page.name
    probe_stations = {r["station"] for r in report_case.run["results"] if "wetness" in r["flag_counts"]}
    for st in probe_stations:
        text = (report_case.index.parent / f"station-{st}.html").read_text(encoding="utf-8")
        assert "<h3>Time out of water</h3>" in text and f'alt="daily exposure at {st}"' in text


HOSTILE = '<script>alert("x")</script>&'


def test_strings_from_data_are_escaped(report_case, tmp_path):
    run = json.loads(json.dumps(report_case.run))
    run["quarantined"] = [{"name": HOSTILE, "reason": f"reason {HOSTILE}"}]
    run["results"][0]["notices"] = [{"kind": "fouling", "text": HOSTILE, "station": run["results"][0]["station"],
                                     "deployment": f"x{HOSTILE}"}]
    run["diff"] = [{"station": "kc-low", "deployment": "kc-low-temp-2026-09", "variable": HOSTILE, "check": "spike",
                    "from_flag": 1, "to_flag": 3, "count": 12, "first": "2026-09-20T03:10:00Z",
                    "last": "2026-09-21T11:00:00Z", "rule_change": f"spike.suspect 4.0 -> 3.5 {HOSTILE}"},
                   {"station": "kc-low", "deployment": "kc-low-temp-2026-09", "variable": "temperature",
                    "check": "review", "from_flag": None, "to_flag": 4, "count": 5,
                    "ranges": [["2026-09-01T00:00:00Z", "2026-09-01T00:40:00Z"]] * 5}]
    index = write_run_report(report_case.archive, run, out_dir=tmp_path / "hostile")
    for page in index.parent.glob("*.html"):
        text = page.read_text(encoding="utf-8")
        assert "<script" not in text, page.name
    text = index.read_text(encoding="utf-8")
    # escaped (the entity spelling of a quote is the escaper's choice): the text a browser shows
    # holds the string, the markup does not
    assert re.sub(r"<[^>]*>", "", text).count("&lt;script&gt;alert(") >= 5
    assert html.unescape(re.sub(r"<[^>]*>", "", text)).count(HOSTILE) >= 5
    changed = Page(section(text, "What changed"))
    assert ["kc-low", "kc-low-temp-2026-09", HOSTILE, "spike", "1 pass \u2192 3 suspect", "12",
            "2026-09-20T03:10:00Z to 2026-09-21T11:00:00Z", f"spike.suspect 4.0 -> 3.5 {HOSTILE}"] in changed.rows
    absent = next(r for r in changed.rows if r[3] == "review")
    assert absent[4] == "absent \u2192 4 fail" and absent[6].endswith("and 2 more")


def attention_entries(text: str) -> list[tuple[str, str, str]]:
    """(css class, kind words, rest as text) of each entry of "Needs attention"."""
    return [(cls, kind, html.unescape(re.sub(r"<[^>]*>", "", rest)).strip())
            for cls, kind, rest in re.findall(r'<li class="([^"]*)"><b class="kind">([^<]*)</b>(.*?)</li>',
                                              section(text, "Needs attention"), re.S)]


def test_notices_are_grouped_by_kind_not_by_their_words(report_case, tmp_path):
    run = json.loads(json.dumps(report_case.run))
    (clock,) = [f for f in report_case.injected["faults"] if f["kind"] == "clock_one_hour_off"]
    r = next(r for r in run["results"] if r["deployment"] == clock["deployment"])
    r["notices"] = [
        # no word "clock" in the sentence; and a fouling notice that speaks of a clock
        {"kind": "clock", "text": "transitions come an hour late", "station": r["station"],
         "deployment": r["deployment"]},
        {"kind": "fouling", "text": "readings drift like a slow clock", "station": r["station"],
         "deployment": r["deployment"]},
        {"kind": "elevation", "text": "sits 0.2 m lower than the register says", "station": r["station"],
         "deployment": r["deployment"]}]
    run["notices"] = [{"kind": "barometer", "text": "the deck barometer was late", "station": None,
                       "deployment": None}]
    index = write_run_report(report_case.archive, run, out_dir=tmp_path / "kinds")
    where = f"{r['station']}/{r['deployment']}"
    for page in (index, index.parent / f"station-{r['station']}.html"):
        got = attention_entries(page.read_text(encoding="utf-8"))
        assert ("clock", "Clock looks wrong", f"{where}: transitions come an hour late") in got
        assert ("probe", "Probe readings", f"{where}: readings drift like a slow clock") in got
        assert ("probe", "Sensor height", f"{where}: sits 0.2 m lower than the register says") in got
        # the clock notice stands for the dataset's clock_error_suspected: listed once
        assert [g for g in got if g[1] == "Clock looks wrong" and where in g[2]] == [
            ("clock", "Clock looks wrong", f"{where}: transitions come an hour late")]
    got = attention_entries(index.read_text(encoding="utf-8"))
    assert ("other", "Air pressure", "the deck barometer was late") in got
    station_page = attention_entries((index.parent / f"station-{r['station']}.html").read_text(encoding="utf-8"))
    assert not [g for g in station_page if "deck barometer" in g[2]]     # run-level: the overview only


def test_run_dict_must_be_json(report_case, tmp_path):
    import numpy as np

    run = dict(report_case.run, files_seen=np.int64(3))
    with pytest.raises(TypeError):
        write_run_report(report_case.archive, run, out_dir=tmp_path / "x")


def test_run_from_catalog_agrees_with_the_tables(report_case):
    got = run_from_catalog(report_case.archive)
    want = report_case.run
    for key in ("run_id", "started", "ended", "files_seen", "ingested"):
        assert got[key] == want[key], key
    assert sorted(q["name"] for q in got["quarantined"]) == sorted(q["name"] for q in want["quarantined"])
    assert {(r["deployment"], r["version"], r["samples"], json.dumps(r["flag_counts"], sort_keys=True))
            for r in got["results"]} == {(r["deployment"], r["version"], r["samples"],
                                          json.dumps(r["flag_counts"], sort_keys=True)) for r in want["results"]}
    with pytest.raises(ValueError, match=r"has no run 99; known runs: 1"):
        run_from_catalog(report_case.archive, 99)


def test_diff_rows_from_a_flag_diff():
    from qcpipe.diff import FlagDiff, Move

    fd = FlagDiff("a_v001", "a_v002", 10, 0, 0, [Move("temperature", "spike", 1, 3, 2,
                                                      [("2026-09-20T03:10:00Z", "2026-09-20T03:20:00Z")]),
                                                 Move("temperature", "review", None, 4, 1,
                                                      [("2026-09-21T00:00:00Z", "2026-09-21T00:00:00Z")])],
                  ["rules.temperature.spike.suspect: 4.0 -> 3.5"])
    from qcpipe.report import diff_rows

    rows = diff_rows(fd, station="kc-low", deployment="kc-low-temp-2026-09")
    assert rows[0] == {"station": "kc-low", "deployment": "kc-low-temp-2026-09", "variable": "temperature",
                       "check": "spike", "from_flag": 1, "to_flag": 3, "count": 2,
                       "ranges": [["2026-09-20T03:10:00Z", "2026-09-20T03:20:00Z"]],
                       "rule_change": "rules.temperature.spike.suspect: 4.0 -> 3.5"}
    assert rows[1]["from_flag"] is None and json.dumps(rows)


def test_run_from_summary_is_plain_json():
    import numpy as np

    from qcpipe.pipeline import DeploymentResult, RunSummary
    from qcpipe.report import run_from_summary
    from qcpipe.report.model import Notice, Quarantined

    res = DeploymentResult("kc-low", "kc-low-temp-2026-09", Path("/a/x_v002.nc"), np.int64(2), np.int64(7),
                           {"temperature": {"1": np.int64(6), "4": np.int64(1)}}, {"conflicts": np.int64(0)},
                           [Notice("elevation", "note", "kc-low", "kc-low-temp-2026-09")], [Path("/a/p.csv")])
    s = RunSummary(files_seen=3, files_known=1, repeated_in_inbox=["b/x.csv"], ingested=2,
                   quarantined=[Quarantined("q.csv", "why")], results=[res], archive="/a")
    s.notices = [Notice("run", "a plain sentence")]
    s.reruns = {"kc-low-temp-2026-09": ["rule set changed"]}
    run = run_from_summary(s, run_id=4, started="2026-12-01T02:00:00Z", ended="2026-12-01T02:01:00Z")
    back = json.loads(json.dumps(run))
    assert back["results"][0]["flag_counts"] == {"temperature": {"1": 6, "4": 1}}
    assert back["results"][0]["dataset"] == "/a/x_v002.nc" and back["results"][0]["version"] == 2
    assert back["quarantined"] == [{"name": "q.csv", "reason": "why"}]
    assert back["reruns"] == {"kc-low-temp-2026-09": ["rule set changed"]}
    assert back["results"][0]["notices"] == [{"kind": "elevation", "text": "note", "station": "kc-low",
                                              "deployment": "kc-low-temp-2026-09"}]
    assert back["notices"] == [{"kind": "run", "text": "a plain sentence", "station": None, "deployment": None}]
    assert (back["run_id"], back["files_seen"], back["ingested"]) == (4, 3, 2)


def test_run_diff_compares_each_new_version_with_the_one_before(tmp_path):
    import numpy as np
    import xarray as xr

    from qcpipe.archive.catalog import Catalog
    from qcpipe.archive.ncio import write_dataset_atomic
    from qcpipe.report import run_diff

    t = np.datetime64("2026-09-14T00:00", "ns") + np.arange(6) * np.timedelta64(10, "m")
    std = {"standard_name": "spike_test_quality_flag"}
    agg = {"standard_name": "aggregate_quality_flag"}

    def version(n, spike):
        ds = xr.Dataset({"temperature": ("time", np.arange(6.0)),
                         "temperature_qc_spike": ("time", np.array(spike, np.int8), std),
                         "temperature_qc": ("time", np.array(spike, np.int8), agg)}, coords={"time": t},
                        attrs={"id": f"x_v{n:03d}"})
        return write_dataset_atomic(ds, tmp_path / "datasets" / "st" / f"x_v{n:03d}.nc")

    p1, p2 = version(1, [1, 1, 1, 1, 1, 1]), version(2, [1, 3, 3, 1, 1, 3])
    cat = Catalog(tmp_path / "catalog.sqlite")
    with cat.transaction() as con:
        for v, p, sus in ((1, p1, 4.0), (2, p2, 3.5)):
            cat.record_dataset(con, path=str(p), station="st", deployment="dep", version=v, rules_name="r",
                               rules_sha256="0", register_sha256="0", software_version="0", samples=6,
                               flag_counts={}, raw_sha256=[], qc_inputs={"rules": {"spike": {"suspect": sus}}})
    rows = run_diff(tmp_path, {"results": [{"station": "st", "deployment": "dep", "version": 2}]})
    # by hand: samples 1, 2 and 5 move from pass to suspect, in two runs, for the check and the aggregate
    assert sorted((r["check"], r["from_flag"], r["to_flag"], r["count"]) for r in rows) == [
        ("aggregate", 1, 3, 3), ("spike", 1, 3, 3)]
    spike = next(r for r in rows if r["check"] == "spike")
    assert spike["ranges"] == [["2026-09-14T00:10:00Z", "2026-09-14T00:20:00Z"],
                               ["2026-09-14T00:50:00Z", "2026-09-14T00:50:00Z"]]
    assert "4.0 -> 3.5" in spike["rule_change"]
    assert run_diff(tmp_path, {"results": [{"station": "st", "deployment": "dep", "version": 1}]}) == []
