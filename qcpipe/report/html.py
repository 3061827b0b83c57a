"""A static HTML report of one run: an overview page and one page per station.

``write_run_report(archive_root, run)`` writes::

    <archive>/reports/run-<id>/index.html          what needs attention, this run, what changed, stations
    <archive>/reports/run-<id>/station-<id>.html   one page per station with data in the archive

(``run-<started, compact>`` when the run has no id).  Pages are
self-contained: figures are PNG images embedded as base64 ``data:`` URIs, the
style sheet is inline, there is no script, and they open from disk without a
server.  Links to datasets and derived products are relative paths into the
archive.  Every page is written atomically (temporary file, then
``os.replace``); the overview is written last, so it never links to a page
that is not there yet.  Every string taken from data is HTML-escaped.

The ``run`` dict
----------------
Plain, JSON-able values only (``run_from_summary`` builds it from the
pipeline's run summary, ``run_from_catalog`` from the catalog)::

    {
      "run_id": 7,                          # catalog runs.id, or None
      "started": "2026-12-02T10:14:46Z",    # UTC, ISO 8601 (optional)
      "ended": "2026-12-02T10:14:50Z",      # (optional)
      "outcome": "completed",               # (optional)
      "files_seen": 18,                     # files in the inbox
      "files_known": 0,                     # already in the archive (optional)
      "ingested": 16,
      "quarantined": [{"name": "x.csv", "reason": "one line"}],
      "repeated_in_inbox": ["copy/of/x.csv"],          # repeated copies skipped
      "results": [{                         # one per dataset version written
          "station": "kc-mid", "deployment": "kc-mid-temp-2026-09",
          "dataset": "/abs/path/qcpipe_..._v001.nc", "version": 1, "samples": 6039,
          "flag_counts": {"temperature": {"1": 6038, "3": 1}},   # aggregate flag -> count
          "counts": {"duplicates": 0, "conflicts": 0, "pre_deployment": 0, "post_recovery": 0},
          "notices": ["kc-mid/kc-mid-probe-2026-09: probe clock about +60 min off ..."],
          "products": ["/abs/path/derived/..."],
          "air_pressure": {"source": "...", "sensor": "absolute", "barometer": "kc-baro-2026-09 (v001)",
                           "from_barometer": 9980, "from_constant": 60, "constant_hpa": 1013.25},
                                            # (optional) level loggers: the air pressure subtracted
      }],
      "notices": ["run-level notices"],     # (optional)
      "kind": "nightly",                    # (optional) catalog runs.kind: nightly, rerun
      "reruns": {"kc-mid-temp-2026-09": ["rule set changed"]},   # (optional) re-QC'd deployments and why
      "diff": [{                            # (optional) flags that changed from the previous version
          "station": "kc-mid", "deployment": "kc-mid-temp-2026-09", "variable": "temperature",
          "check": "spike",                 # or "aggregate"
          "from_flag": 1, "to_flag": 3,     # None: the check did not exist in that version ("absent")
          "count": 12,
          "ranges": [["2026-09-20T03:10:00Z", "2026-09-20T04:00:00Z"]],   # UTC runs of moved samples
          "rule_change": "rules.temperature.spike.suspect: 4.0 -> 3.5",  # (optional) input differences
      }],
    }

``run_diff(archive_root, run)`` computes them for the run's new versions;
``diff_rows(flag_diff, station=..., deployment=...)`` turns one
``qcpipe.diff.FlagDiff`` into these rows (``"first"`` and ``"last"`` are
accepted instead of ``"ranges"``).

Notices are sorted into the "Needs attention" groups by their wording (clock,
probe readings, elevation, other); a dataset whose attributes say
``clock_error_suspected = 1`` is listed even without a notice.
"""

from __future__ import annotations

import base64
import datetime as dt
import html
import json
import os
import re
from pathlib import Path

import numpy as np

from ..archive.catalog import Catalog
from ..archive.ncio import read_attrs, read_dataset
from ..archive.store import safe_file_name
from ..files import atomic_path
from . import plots

FLAG_KEYS = ("1", "2", "3", "4", "9")
FLAG_WORDS = {"1": "pass", "2": "not evaluated", "3": "suspect", "4": "fail", "9": "missing"}
#: text symbols matching the plot markers (circle, square, triangle, cross, bar)
FLAG_SYMBOLS = {"1": "\u25cf", "2": "\u25a0", "3": "\u25b2", "4": "\u2716", "9": "\u2758"}
_NOTICE_LABEL = re.compile(r"^(?P<station>[A-Za-z0-9][\w.\-]*)/(?P<deployment>[A-Za-z0-9][\w.\-]*): (?P<text>.*)$",
                           re.S)
_VERSION_IN_NAME = re.compile(r"_v(\d{3,})(?=[_.])")


def e(value) -> str:
    """HTML-escaped text of any value (None as an empty string)."""
    return "" if value is None else html.escape(str(value), quote=True)


def _write_page(final: Path, text: str) -> Path:
    """Write a page atomically (temporary file in the same folder, then os.replace), readable by all."""
    with atomic_path(final) as tmp:
        tmp.write_text(text, encoding="utf-8")
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(tmp, 0o666 & ~mask)
    return final


# --- building the run dict ---------------------------------------------------------

def run_from_summary(summary, *, run_id: int | None = None, started: str | None = None,
                     ended: str | None = None, outcome: str | None = None) -> dict:
    """The ``run`` dict (see the module docstring) from a ``pipeline.RunSummary``."""
    results = []
    for r in summary.results:
        results.append({
            "station": str(r.station), "deployment": str(r.deployment), "dataset": str(r.dataset),
            "version": int(r.version), "samples": int(r.samples),
            "flag_counts": {str(v): {str(k): int(n) for k, n in per.items()} for v, per in r.flag_counts.items()},
            "counts": {str(k): int(n) for k, n in r.counts.items()},
            "notices": [n.line() for n in r.notices], "products": [str(p) for p in r.products],
            "air_pressure": json.loads(json.dumps(getattr(r, "air_pressure", {}) or {}))})
    return {"run_id": None if run_id is None else int(run_id), "started": started, "ended": ended,
            "outcome": outcome, "files_seen": int(summary.files_seen), "files_known": int(summary.files_known),
            "ingested": int(summary.ingested),
            "quarantined": [{"name": str(q.name), "reason": str(q.reason)} for q in summary.quarantined],
            "repeated_in_inbox": [str(x) for x in summary.repeated_in_inbox], "results": results,
            "notices": [n.line() for n in getattr(summary, "notices", [])],
            "reruns": {str(d): [str(w) for w in why] for d, why in getattr(summary, "reruns", {}).items()}}


def diff_rows(flag_diff, *, station: str, deployment: str) -> list[dict]:
    """Rows of the run dict's ``diff`` from a ``qcpipe.diff.FlagDiff`` (its moves and input changes)."""
    changes = "; ".join(str(c) for c in getattr(flag_diff, "input_changes", []) or [])
    return [{"station": str(station), "deployment": str(deployment), "variable": str(m.variable),
             "check": str(m.check), "from_flag": None if m.from_flag is None else int(m.from_flag),
             "to_flag": None if m.to_flag is None else int(m.to_flag), "count": int(m.count),
             "ranges": [[str(a), str(b)] for a, b in m.ranges], "rule_change": changes}
            for m in flag_diff.moves]


def run_diff(archive_root: str | Path, run: dict) -> list[dict]:
    """``diff`` rows for the run's results: each new version against the version before it.

    Uses ``qcpipe.diff.flag_diff_files`` with the QC inputs the catalog
    recorded for both versions; versions that are pruned or missing are skipped.
    """
    from ..diff import flag_diff_files

    cat = Catalog(Path(archive_root) / "catalog.sqlite")
    rows: list[dict] = []
    for r in run.get("results", []):
        if int(r.get("version", 1)) <= 1:
            continue
        versions = {int(v["version"]): v for v in cat.dataset_versions(r["deployment"])}
        old, new = versions.get(int(r["version"]) - 1), versions.get(int(r["version"]))
        if old is None or new is None or old.get("pruned") or not Path(old["path"]).exists() \
                or not Path(new["path"]).exists():
            continue
        fd = flag_diff_files(old["path"], new["path"], old_inputs=old.get("qc_inputs"),
                             new_inputs=new.get("qc_inputs"))
        rows += diff_rows(fd, station=r["station"], deployment=r["deployment"])
    return rows


def run_from_catalog(archive_root: str | Path, run_id: int | None = None) -> dict:
    """The ``run`` dict of a recorded run (default: the latest), rebuilt from the catalog.

    Datasets created and files first seen between the run's start and end
    belong to it.  The catalog keeps no notices; the report still finds
    suspected clock errors in the datasets' attributes.
    """
    cat = Catalog(Path(archive_root) / "catalog.sqlite")
    runs = cat.runs()
    if not runs:
        raise ValueError(f"archive {archive_root} has no recorded run; run 'qcpipe process' first")
    row = runs[-1] if run_id is None else next((r for r in runs if r["id"] == run_id), None)
    if row is None:
        raise ValueError(f"archive {archive_root} has no run {run_id}; known runs: "
                         f"{', '.join(str(r['id']) for r in runs)}")
    lo, hi = row["started"], row["ended"] or "9999"
    counts = row.get("counts") or {}
    results = [{"station": d["station"], "deployment": d["deployment"], "dataset": d["path"],
                "version": int(d["version"]), "samples": int(d["samples"]), "flag_counts": d["flag_counts"],
                "counts": {}, "notices": [], "products": []}
               for d in cat.datasets() if lo <= d["created"] <= hi]
    quarantined = [{"name": f["original_name"], "reason": f["reason"]}
                   for f in cat.raw_files(status="quarantined") if lo <= f["first_seen"] <= hi]
    return {"run_id": int(row["id"]), "kind": row.get("kind"), "started": row["started"], "ended": row["ended"],
            "outcome": row["outcome"],
            "files_seen": int(counts.get("files_seen", 0)), "files_known": int(counts.get("files_known", 0)),
            "ingested": int(counts.get("ingested", 0)), "quarantined": quarantined,
            "repeated_in_inbox": [], "results": results, "notices": []}


# --- reading the archive -------------------------------------------------------------

class _Archive:
    """The archive's latest datasets, read once each (through ncio, under its lock)."""

    def __init__(self, root: Path):
        self.root = root
        self._cache: dict[Path, object] = {}
        self._headers: dict[Path, dict] = {}
        cat_path = root / "catalog.sqlite"
        rows = Catalog(cat_path).datasets() if cat_path.exists() else []
        latest: dict[str, dict] = {}
        for r in rows:
            if r["deployment"] not in latest or r["version"] > latest[r["deployment"]]["version"]:
                latest[r["deployment"]] = r
        self.latest = latest
        for r in latest.values():
            r["local_path"] = self._locate(r)

    def _locate(self, row: dict) -> Path | None:
        p = Path(row["path"])
        if p.exists():
            return p
        q = self.root / "datasets" / row["station"] / p.name        # an archive moved as a whole
        return q if q.exists() else None

    def stations(self) -> list[str]:
        return sorted({r["station"] for r in self.latest.values() if r["local_path"] is not None})

    def datasets_of(self, station: str) -> list[dict]:
        return sorted((r for r in self.latest.values() if r["station"] == station and r["local_path"] is not None),
                      key=lambda r: r["deployment"])

    def read(self, path: Path):
        path = Path(path)
        if path not in self._cache:
            self._cache[path] = read_dataset(path)
        return self._cache[path]

    def header_attrs(self, path: Path) -> dict:
        """Global attributes only (no data read), from the loaded dataset if there is one."""
        path = Path(path)
        if path in self._cache:
            return dict(self._cache[path].attrs)
        if path not in self._headers:
            self._headers[path] = read_attrs(path)
        return self._headers[path]

    def attrs(self, row: dict) -> dict:
        return dict(self.read(row["local_path"]).attrs)

    def derived(self, station: str, dataset_stem: str, product: str) -> Path | None:
        """The derived product file of a dataset (``.nc``), else None."""
        p = self.root / "derived" / station / f"{dataset_stem}_{product}.nc"
        return p if p.exists() else None

    def derived_files(self, station: str, dataset_stems: set[str]) -> list[Path]:
        folder = self.root / "derived" / station
        if not folder.is_dir():
            return []
        return sorted(p for p in folder.iterdir() if p.is_file() and any(p.name.startswith(s + "_")
                                                                           for s in dataset_stems))


# --- small HTML pieces -----------------------------------------------------------------

CSS = """
:root { --ink:#1b1b1b; --muted:#5a5a5a; --rule:#d7d7d7; --band:#f4f4f1; --link:#0072B2; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", "Liberation Sans", Arial, sans-serif; color: var(--ink);
       margin: 0; background: #fff; line-height: 1.45; font-size: 15px; }
header.top { background: #0b3954; color: #fff; padding: 14px 28px; }
header.top h1 { margin: 0; font-size: 22px; font-weight: 600; }
header.top p { margin: 4px 0 0; color: #d9e6ee; font-size: 14px; }
header.top a { color: #fff; }
main { max-width: 1180px; padding: 8px 28px 40px; }
h2 { font-size: 19px; margin: 30px 0 10px; padding-bottom: 4px; border-bottom: 2px solid var(--rule); }
h3 { font-size: 16px; margin: 22px 0 8px; }
a { color: var(--link); }
p.muted, span.muted, td.muted { color: var(--muted); }
table { border-collapse: collapse; margin: 6px 0 14px; font-size: 14px; }
th, td { border-bottom: 1px solid var(--rule); padding: 4px 10px; text-align: left; vertical-align: top; }
th { background: var(--band); font-weight: 600; }
table.facts th { background: none; font-weight: normal; color: var(--muted); padding-right: 18px; }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.c3 { background: #fbe8bf; } td.c4 { background: #f6cdb3; font-weight: 600; } td.c9 { background: #f1d9e6; }
ul.attention { list-style: none; padding: 0; margin: 0; }
ul.attention li { border-left: 6px solid #999; background: var(--band); margin: 8px 0; padding: 8px 12px; }
ul.attention li.quarantine { border-color: #CC79A7; }
ul.attention li.clock { border-color: #D55E00; }
ul.attention li.probe { border-color: #E69F00; }
ul.attention li.fail { border-color: #D55E00; }
ul.attention li.other { border-color: #56B4E9; }
ul.attention b.kind { display: inline-block; min-width: 12em; }
.ok { border-left: 6px solid #009E73; background: var(--band); padding: 8px 12px; }
figure { margin: 10px 0 22px; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: 13px; margin-top: 4px; }
.key span { display: inline-block; margin-right: 16px; white-space: nowrap; }
.sym { font-size: 15px; }
.note { background: #fff8dc; border: 1px solid #e6d690; padding: 8px 12px; margin: 8px 0 14px; }
code { font-size: 13px; word-break: break-all; }
nav.stations a { margin-right: 14px; }
"""


def _page(title: str, subtitle: str, body: str) -> str:
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            f"<title>{e(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n"
            f"<header class=\"top\"><h1>{e(title)}</h1><p>{subtitle}</p></header>\n<main>\n{body}\n</main>\n"
            "</body>\n</html>\n")


def _img(fig, alt: str, caption: str = "") -> str:
    data = base64.b64encode(plots.png_bytes(fig)).decode("ascii")
    w, h = (int(round(x * fig.dpi)) for x in fig.get_size_inches())
    cap = f"<figcaption>{caption}</figcaption>" if caption else ""
    return (f"<figure><img src=\"data:image/png;base64,{data}\" alt=\"{e(alt)}\" width=\"{w}\" height=\"{h}\">"
            f"{cap}</figure>")


def _facts(rows: list[list[str]]) -> str:
    """A two-column table of (label, value) with no header row; cells already escaped."""
    body = "".join(f"<tr><th scope=\"row\">{k}</th><td>{v}</td></tr>" for k, v in rows)
    return f"<table class=\"facts\"><tbody>{body}</tbody></table>"


def _table(header: list[str], rows: list[list[str]], numeric: set[int] = frozenset()) -> str:
    """A table of already-escaped cells; ``numeric`` columns are right-aligned."""
    head = "".join(f"<th class=\"n\">{h}</th>" if i in numeric else f"<th>{h}</th>" for i, h in enumerate(header))
    body = []
    for row in rows:
        cells = []
        for i, c in enumerate(row):
            if isinstance(c, tuple):            # (html, css class)
                cells.append(f"<td class=\"{c[1]}\">{c[0]}</td>")
            else:
                cells.append(f"<td class=\"n\">{c}</td>" if i in numeric else f"<td>{c}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _flag_key() -> str:
    spans = "".join(f"<span><span class=\"sym\" style=\"color:{plots.FLAG_STYLE[int(k)][1]}\">{FLAG_SYMBOLS[k]}"
                    f"</span> {k} {e(w)}</span>" for k, w in FLAG_WORDS.items())
    return f"<p class=\"key\">Flag classes (aggregate, IOC primary scheme): {spans}</p>"


def _n(x) -> str:
    return f"{int(x):,}".replace(",", "\u2009")      # thin space between thousands


def _pct(part: int, whole: int) -> str:
    if not whole:
        return ""
    p = 100.0 * part / whole
    return "&lt;0.1%" if 0 < p < 0.1 else f"{p:.1f}%"


def _rel(target: Path, start: Path) -> str:
    return Path(os.path.relpath(Path(target).resolve(), Path(start).resolve())).as_posix()


def _href(target: Path, start: Path) -> str:
    from urllib.parse import quote

    return e(quote(_rel(target, start)))


def _station_page_name(station: str) -> str:
    return f"station-{safe_file_name(station)}.html"


# --- what needs attention ----------------------------------------------------------------

def _notice_kind(text: str) -> str:
    t = text.lower()
    if "clock" in t:
        return "clock"
    if "bimodal" in t or "fouled" in t or "threshold" in t or "wet from dry" in t:
        return "probe"
    if "elevation" in t:
        return "elevation"
    return "other"


def _split_notice(text: str) -> tuple[str | None, str | None, str]:
    m = _NOTICE_LABEL.match(text)
    return (m["station"], m["deployment"], m["text"]) if m else (None, None, text)


def _fails_by_station(results: list[dict]) -> list[tuple[str, int, int, str]]:
    """(station, failed samples, samples checked, worst variable) with any fails, most first."""
    out: dict[str, list] = {}
    for r in results:
        entry = out.setdefault(r["station"], [0, 0, {}])
        for var, per in (r.get("flag_counts") or {}).items():
            fails = int(per.get("4", 0))
            entry[0] += fails
            entry[1] += sum(int(v) for v in per.values())
            entry[2][f"{r['deployment']} {var}"] = entry[2].get(f"{r['deployment']} {var}", 0) + fails
    rows = [(st, f, n, max(w, key=w.get)) for st, (f, n, w) in out.items() if f > 0]
    return sorted(rows, key=lambda x: (-x[1], x[0]))


def _attention_items(run: dict, archive: _Archive, station_filter: str | None = None) -> list[tuple[str, str, str]]:
    """(css class, kind words, escaped html) for everything that needs a person's attention."""
    items: list[tuple[str, str, str]] = []
    results = [r for r in run.get("results", []) if station_filter in (None, r.get("station"))]
    if station_filter is None:
        for q in run.get("quarantined", []):
            items.append(("quarantine", "File quarantined",
                          f"<b>{e(q.get('name'))}</b>: {e(q.get('reason'))}"))
    notices = [n for r in results for n in r.get("notices", [])]
    if station_filter is None:
        notices += list(run.get("notices", []))
    clock_seen = set()
    words = {"clock": "Clock looks wrong", "probe": "Probe readings", "elevation": "Sensor height",
             "other": "Notice"}
    for n in notices:
        st, dep, text = _split_notice(str(n))
        kind = _notice_kind(text)
        if kind == "clock":
            clock_seen.add(dep)
        where = f"<b>{e(st)}/{e(dep)}</b>: " if st else ""
        items.append(({"elevation": "probe"}.get(kind, kind), words[kind], where + e(text)))
    for r in results:           # suspected clock errors recorded in the dataset even without a notice
        row = archive.latest.get(r["deployment"])
        if r["deployment"] in clock_seen or row is None or row.get("local_path") is None:
            continue
        a = archive.attrs(row)
        if int(a.get("clock_error_suspected", 0) or 0) == 1:
            items.append(("clock", "Clock looks wrong",
                          f"<b>{e(r['station'])}/{e(r['deployment'])}</b>: {e(a.get('clock_verdict', ''))}"))
    for r in results:
        conflicts = int((r.get("counts") or {}).get("conflicts", 0))
        if conflicts:
            items.append(("other", "Downloads disagree",
                          f"<b>{e(r['station'])}/{e(r['deployment'])}</b>: {_n(conflicts)} timestamp(s) with "
                          "different values in overlapping downloads (first kept, flagged suspect)"))
    for st, fails, n, worst in _fails_by_station(results)[:3]:
        items.append(("fail", "Failed samples",
                      f"<b>{e(st)}</b>: {_n(fails)} of {_n(n)} samples fail ({_pct(fails, n)}, aggregate flags "
                      f"of all variables); most in {e(worst)}"))
    return items


def _attention_html(items: list[tuple[str, str, str]], nothing: str) -> str:
    if not items:
        return f"<p class=\"ok\">{e(nothing)}</p>"
    lis = "".join(f"<li class=\"{cls}\"><b class=\"kind\">{e(kind)}</b> {body}</li>" for cls, kind, body in items)
    return f"<ul class=\"attention\">{lis}</ul>"


# --- the overview page ----------------------------------------------------------------------

def _flag_rows(results: list[dict], *, link_station: bool) -> list[list]:
    rows = []
    for r in results:
        for var, per in sorted((r.get("flag_counts") or {}).items()):
            total = sum(int(v) for v in per.values())
            st = (f"<a href=\"{e(_station_page_name(r['station']))}\">{e(r['station'])}</a>" if link_station
                  else e(r["station"]))
            row = [st, e(r["deployment"]), f"v{int(r.get('version', 0)):03d}", e(var)]
            for k in FLAG_KEYS:
                v = int(per.get(k, 0))
                cls = f"n c{k}" if v and k in ("3", "4", "9") else "n"
                row.append((_n(v) if v else "<span class=\"muted\">0</span>", cls))
            bad = sum(int(per.get(k, 0)) for k in ("3", "4"))
            row.append((_pct(bad, total), "n"))
            rows.append(row)
    return rows


_FLAG_HEADER = ["Station", "Deployment", "Version", "Variable"] + [
    f"{k} {FLAG_WORDS[k]}" for k in FLAG_KEYS] + ["suspect + fail"]


def _run_title(run: dict) -> str:
    kind = f" {run['kind']}" if run.get("kind") else ""
    return f"qcpipe{kind} run {run['run_id']}" if run.get("run_id") is not None else f"qcpipe{kind} run"


def _run_subtitle(run: dict, archive_root: Path) -> str:
    parts = []
    if run.get("started"):
        parts.append(f"started {e(run['started'])}")
    if run.get("ended"):
        parts.append(f"ended {e(run['ended'])}")
    if run.get("outcome"):
        parts.append(f"outcome: {e(run['outcome'])}")
    parts.append(f"archive <code style=\"color:#fff\">{e(archive_root)}</code>")
    return " &middot; ".join(parts)


def _this_run_html(run: dict, archive: _Archive, out_dir: Path) -> str:
    results = run.get("results", [])
    known = any(r.get("counts") for r in results)

    def c(key):
        return sum(int((r.get("counts") or {}).get(key, 0)) for r in results) if known else None

    facts = [
        ("files in the inbox", run.get("files_seen", 0)),
        ("already in the archive", run.get("files_known", 0)),
        ("repeated copies skipped", len(run.get("repeated_in_inbox", []))),
        ("files ingested", run.get("ingested", 0)),
        ("files quarantined", len(run.get("quarantined", []))),
        ("dataset versions written", len(results)),
        ("samples in them", sum(int(r.get("samples", 0)) for r in results)),
        ("repeated records of overlapping downloads dropped", c("duplicates")),
        ("timestamps whose downloads disagree (kept, flagged suspect)", c("conflicts")),
        ("samples trimmed before deployment", c("pre_deployment")),
        ("samples trimmed after recovery", c("post_recovery")),
    ]
    out = ["<h2 id=\"this-run\">This run</h2>",
           _table(["", "count"], [[e(k), "<span class=\"muted\">not recorded</span>" if v is None else _n(v)]
                                  for k, v in facts], numeric={1})]
    if run.get("quarantined"):
        out.append("<h3>Quarantined files</h3>")
        out.append(_table(["File", "Reason"], [[e(q.get("name")), e(q.get("reason"))]
                                                for q in run["quarantined"]]))
        qdir = archive.root / "quarantine"
        if qdir.is_dir():
            out.append(f"<p class=\"muted\">Copies and reasons are in "
                       f"<code>{e(qdir)}</code>.</p>")
    if run.get("reruns"):
        out.append("<h3>Checked again from stored data</h3>")
        out.append(_table(["Deployment", "Why"], [[e(d), e("; ".join(str(w) for w in why))]
                                                  for d, why in sorted(run["reruns"].items())]))
    if run.get("repeated_in_inbox"):
        out.append("<h3>Repeated copies in the inbox (skipped)</h3><ul>" +
                   "".join(f"<li>{e(x)}</li>" for x in run["repeated_in_inbox"]) + "</ul>")
    conflict_rows = []
    for r in results:
        n = int((r.get("counts") or {}).get("conflicts", 0))
        if n:
            p = archive.root / "conflicts" / f"{r['deployment']}.csv"
            link = f"<a href=\"{_href(p, out_dir)}\">{e(p.name)}</a>" if p.exists() else ""
            conflict_rows.append([e(r["station"]), e(r["deployment"]), _n(n), link])
    if conflict_rows:
        out.append("<h3>Downloads that disagree</h3>")
        out.append(_table(["Station", "Deployment", "timestamps", "list"], conflict_rows, numeric={2}))
    baro = _barometric_html(results)
    if baro:
        out.append(baro)
    if results:
        out.append("<h3>Flags by station and variable</h3>")
        out.append(_flag_key())
        out.append(_table(_FLAG_HEADER, _flag_rows(results, link_station=True), numeric={5, 6, 7, 8, 9, 10}))
    else:
        out.append("<p>Nothing new: no dataset was written in this run.</p>")
    return "\n".join(out)


def _barometric_html(results: list[dict]) -> str:
    """The air pressure each level dataset of the run subtracted: source, samples on the barometer and on the constant."""
    rows = []
    for r in results:
        a = r.get("air_pressure") or {}
        if not a:
            continue
        if "from_barometer" in a:
            what = f"barometer {a.get('barometer') or '(no data yet)'}; else {_fmt(a.get('constant_hpa'), 2, ' hPa')}"
            rows.append([e(r["station"]), e(r["deployment"]), e(what), _n(a["from_barometer"]), _n(a["from_constant"])])
        else:
            rows.append([e(r["station"]), e(r["deployment"]), e(a.get("source", "")), "", ""])
    if not rows:
        return ""
    return ("<h3 id=\"barometric-correction\">Barometric correction</h3>"
            "<p>The air pressure subtracted from each level logger's pressure. Where the site's barometer had no "
            "valid value (missing, failed its QC, a gap longer than allowed, outside its record) the configured "
            "constant was used and those water levels are flagged suspect (check <code>barometer_fallback</code>).</p>"
            + _table(["Station", "Deployment", "Air pressure from", "samples on the barometer",
                      "samples on the constant (suspect)"], rows, numeric={3, 4}))


def _diff_html(diff: list[dict]) -> str:
    rows = []
    def flag(x) -> str:
        return "absent" if x is None else f"{e(x)} {e(FLAG_WORDS.get(str(x), ''))}".strip()

    for d in diff:
        ranges = [list(r) for r in d.get("ranges") or []]
        if not ranges and (d.get("first") or d.get("last")):
            ranges = [[d.get("first"), d.get("last")]]
        shown = "<br>".join(e(a) if a == b else f"{e(a)} to {e(b)}" for a, b in ranges[:3])
        if len(ranges) > 3:
            shown += f"<br><span class=\"muted\">and {len(ranges) - 3} more</span>"
        rows.append([e(d.get("station")), e(d.get("deployment")), e(d.get("variable")), e(d.get("check")),
                     f"{flag(d.get('from_flag'))} &rarr; {flag(d.get('to_flag'))}",
                     _n(d.get("count", 0)), shown, e(d.get("rule_change"))])
    return ("<h2 id=\"what-changed\">What changed</h2>"
            "<p>Flags that differ from the previous version of each dataset, and the differences in the "
            "inputs that were recorded for them.</p>" +
            _table(["Station", "Deployment", "Variable", "Check", "Flag", "samples", "when (UTC)",
                    "Input difference"], rows, numeric={5}))


# --- station pages -----------------------------------------------------------------------------

_QC_SUFFIX = "_qc"


def _qc_variables(ds) -> list[str]:
    """Data variables that carry an aggregate flag ``<var>_qc``."""
    return [v for v in ds.data_vars if f"{v}{_QC_SUFFIX}" in ds.data_vars and not v.endswith(_QC_SUFFIX)
            and "_qc_" not in v]


def _display_values(ds, var: str) -> tuple[np.ndarray, str]:
    units = str(ds[var].attrs.get("units", ""))
    values = ds[var].values.astype(np.float64)
    if units == "Pa" and var.startswith("air_pressure"):  # air pressure in the unit of weather maps
        return values / 100.0, "hPa"
    if units == "Pa":                                    # readable numbers on the axis
        return values / 1000.0, "kPa"
    return values, "" if units == "1" else units


def _var_label(ds, var: str) -> str:
    return var.replace("_", " ")


def _scalar(ds, name: str):
    if name in ds.coords or name in ds.data_vars:
        v = np.asarray(ds[name].values)
        if v.size == 1:
            return float(v.reshape(-1)[0])
    return None


def _fmt(x, nd=1, unit="") -> str:
    if x is None:
        return "not recorded"
    try:
        f = float(x)
    except (TypeError, ValueError):
        return e(x)
    return "not recorded" if not np.isfinite(f) else f"{f:.{nd}f}{unit}"


def _air_pressure_section(station: str, deployment: str, ds, attrs: dict) -> str:
    """A level logger's barometric correction: where its air pressure came from, and a plot of it."""
    if "water_level_air_pressure_source" not in attrs:
        return ""
    facts = [["pressure sensor", e(attrs.get("pressure_sensor", ""))],
             ["air pressure subtracted", e(attrs["water_level_air_pressure_source"])]]
    if "water_level_air_pressure_from_barometer" in attrs:
        facts += [["samples on the barometer", _n(attrs["water_level_air_pressure_from_barometer"])],
                  ["samples on the constant (flagged suspect)", _n(attrs["water_level_air_pressure_from_constant"])]]
    if attrs.get("water_level_air_pressure_constant_ranges"):
        facts.append(["on the constant (UTC)", e(attrs["water_level_air_pressure_constant_ranges"])])
    out = "<h3>Barometric correction</h3>" + _facts(facts)
    if "air_pressure_subtracted" in ds.data_vars and "air_pressure_source" in ds.data_vars:
        src = ds["air_pressure_source"].values
        marks = np.where(src == 2, 3, 1).astype(np.int8)
        values, units = _display_values(ds, "air_pressure_subtracted")
        fig = plots.plot_variable(ds["time"].values, values, marks, name="air pressure subtracted", units=units,
                                  title=f"{station} {deployment}: air pressure subtracted")
        out += _img(fig, f"air pressure subtracted at {station}",
                    "Air pressure subtracted for the water level: circles (pass) from the site's barometer, "
                    "triangles (suspect) the configured constant where the barometer had no valid value.")
    return out


def _clock_section(ds, attrs: dict) -> str:
    if "clock_transition_offset_s" not in attrs and "clock_verdict" not in attrs:
        return ""
    out = ["<h3>Probe clock against the tide</h3>"]
    verdict = str(attrs.get("clock_verdict", "no verdict recorded"))
    if "transition_offset" in ds.data_vars:
        out.append(_img(plots.plot_transition_offsets(ds["transition_offset"].values, verdict_text=verdict),
                        "histogram of transition offsets", "Offsets of the observed wet/dry transitions from the "
                        "predicted ones (minutes). Tide values are for data quality control only."))
    else:
        out.append("<p class=\"note\">This dataset does not store the offset of each wet/dry transition, so no "
                   "histogram can be drawn; these are the summary numbers the pipeline recorded.</p>")
    suspected = int(attrs.get("clock_error_suspected", 0) or 0) == 1
    rows = [["clock error suspected", "<b>yes</b>" if suspected else "no"],
            ["median offset of observed from predicted transitions",
             _fmt(_minutes(attrs.get("clock_transition_offset_s")), 1, " min")],
            ["spread of the offsets", _fmt(_minutes(attrs.get("clock_offset_spread_s")), 1, " min")],
            ["wet/dry cross-correlation lag", _fmt(_minutes(attrs.get("clock_xcorr_lag_s")), 1, " min")],
            ["verdict", e(verdict)]]
    out.append(_facts(rows))
    return "\n".join(out)


def _minutes(seconds):
    try:
        return float(seconds) / 60.0
    except (TypeError, ValueError):
        return None


def _exposure_section(archive: _Archive, station: str, stem: str) -> str:
    daily = archive.derived(station, stem, "daily_exposure")
    periods = archive.derived(station, stem, "emersion_periods")
    if daily is None and periods is None:
        return ""
    out = ["<h3>Time out of water</h3>"]
    if daily is not None:
        dd = archive.read(daily)
        mt = dd["max_aerial_temperature"].values if "max_aerial_temperature" in dd else None
        out.append(_img(plots.plot_daily_exposure(dd["day"].values, dd["hours_emersed"].values, mt,
                                                  title=f"Daily exposure at {station}"),
                        f"daily exposure at {station}",
                        "Hours the sensing point was out of water per UTC day, and the highest temperature "
                        "while emersed (from the station's temperature logger, fail and missing samples "
                        "left out)."))
    if periods is not None:
        pp = archive.read(periods)
        dur = pp["duration"].values / 3600.0
        rows = [["emersion periods", _n(dur.size)]]
        if dur.size:
            i = int(np.nanargmax(dur))
            rows.append(["longest", f"{dur[i]:.1f} h from {e(_iso(pp['start_time'].values[i]))}"])
            mx = pp["max_temperature"].values
            if np.isfinite(mx).any():
                j = int(np.nanargmax(mx))
                rows.append(["hottest", f"{mx[j]:.1f} degC, emersion from {e(_iso(pp['start_time'].values[j]))}"])
            rows.append(["with both ends observed", _n(int(np.sum(pp["both_ends_observed"].values == 1)))])
        out.append(_facts(rows))
    return "\n".join(out)


def _tide_section(archive: _Archive, station: str, stem: str) -> str:
    events = archive.derived(station, stem, "tide_events")
    if events is None:
        return ""
    ev = archive.read(events)
    src = ev["event_source"].values if "event_source" in ev else np.zeros(ev.sizes.get("event", 0), np.int8)
    kind = ev["event_kind"].values if "event_kind" in ev else np.zeros_like(src)
    out = ["<h3>High and low waters</h3>",
           f"<p>{_n(np.sum((src == 1) & (kind == 1)))} observed high and {_n(np.sum((src == 1) & (kind == 0)))} "
           f"observed low waters; {_n(np.sum(src == 0))} predicted events.</p>"]
    datums = [(k[len("datum_"):-2].upper(), v) for k, v in ev.attrs.items()
              if k.startswith("datum_") and k.endswith("_m")]
    if datums:
        out.append(_table(["Datum", f"m above {e(ev.attrs.get('vertical_datum', 'the datum'))}"],
                          [[e(k), _fmt(v, 3)] for k, v in datums], numeric={1}))
        if ev.attrs.get("datum_note"):
            out.append(f"<p class=\"muted\">{e(ev.attrs['datum_note'])}</p>")
    return "\n".join(out)


def _iso(t) -> str:
    return np.datetime_as_string(np.datetime64(t, "s"), unit="s") + "Z"


def _site_gauges(archive: _Archive, site_id: str) -> list[dict]:
    out = []
    for r in sorted(archive.latest.values(), key=lambda r: r["deployment"]):
        # the catalog's flag counts name the dataset's variables: only a water-level dataset's
        # header is opened (reading every dataset for each station page made pages O(datasets))
        if r["local_path"] is None or "water_level" not in (r.get("flag_counts") or {}):
            continue
        if archive.header_attrs(r["local_path"]).get("site_id") == site_id:
            out.append(r)
    return out


def _water_level_section(archive: _Archive, station: str, ds, attrs: dict) -> str:
    site = attrs.get("site_id")
    gauges = _site_gauges(archive, site) if site else []
    if not gauges:
        return ""
    g = gauges[0]
    gds = archive.read(g["local_path"])
    level = gds["water_level"].values.astype(np.float64)
    if "water_level_qc" in gds:
        level = np.where(np.isin(gds["water_level_qc"].values, (4, 9)), np.nan, level)
    pred = gds["water_level_predicted"].values if "water_level_predicted" in gds else None
    elev = _scalar(ds, "sensor_height")
    own = g["station"] == station
    what = "the pressure sensor" if own else "this station's sensing point"
    fig = plots.plot_water_level(gds["time"].values, level, pred, elevation_m=elev,
                                 datum_name=str(gds.attrs.get("vertical_datum", "datum")),
                                 title=f"Water level at {g['station']} ({g['deployment']})")
    cap = (f"Observed water level at gauge {e(g['station'])} (fail and missing samples left out)"
           f"{' and its harmonic prediction' if pred is not None else ''}, with the height of {e(what)}. "
           "Tide values are for data quality control only, not for navigation or safety planning.")
    return "<h3>Water level</h3>" + _img(fig, f"water level at {g['station']}", cap)


def _station_html(station: str, archive: _Archive, run: dict, out_dir: Path) -> str:
    rows = archive.datasets_of(station)
    first = archive.read(rows[0]["local_path"])
    a0 = first.attrs
    name = a0.get("station_name", station)
    body = ["<p><a href=\"index.html\">&larr; back to the run overview</a></p>"]
    facts = [["station", f"{e(station)} ({e(name)})"], ["site", e(a0.get("site_name", a0.get("site_id", "")))],
             ["latitude, longitude", f"{_fmt(_scalar(first, 'latitude'), 4)}, {_fmt(_scalar(first, 'longitude'), 4)}"],
             ["vertical datum", e(a0.get("vertical_datum", ""))]]
    body.append(_facts(facts))
    items = _attention_items(run, archive, station_filter=station)
    body.append("<h2 id=\"needs-attention\">Needs attention</h2>")
    body.append(_attention_html(items, "Nothing at this station needs attention in this run."))
    in_run = {r["deployment"]: r for r in run.get("results", []) if r.get("station") == station}
    if in_run:
        body.append("<h2>Flags in this run</h2>" + _flag_key() +
                    _table(_FLAG_HEADER, _flag_rows(list(in_run.values()), link_station=False),
                           numeric={5, 6, 7, 8, 9, 10}))
    water_done = False
    for row in rows:
        ds = archive.read(row["local_path"])
        attrs = dict(ds.attrs)
        stem = Path(row["local_path"]).stem
        body.append(f"<h2 id=\"{e(row['deployment'])}\">{e(row['deployment'])} "
                    f"<span class=\"muted\">version {int(row['version'])}</span></h2>")
        note = "" if row["deployment"] in in_run else " (not updated in this run)"
        info = [["instrument", e(attrs.get("instrument", ""))],
                ["time covered", f"{e(attrs.get('time_coverage_start', ''))} to {e(attrs.get('time_coverage_end', ''))}"],
                ["samples", _n(ds.sizes.get("time", 0))],
                ["sensing point", f"{_fmt(_scalar(ds, 'sensor_height'), 2, ' m')} above {e(attrs.get('vertical_datum', 'the datum'))}"],
                ["rule set", f"{e(attrs.get('qc_rule_set', ''))} <span class=\"muted\">sha256 "
                             f"{e(str(attrs.get('qc_rule_set_sha256', ''))[:12])}</span>"],
                ["raw files", e(attrs.get("raw_file_names", ""))],
                ["dataset", f"<a href=\"{_href(row['local_path'], out_dir)}\">{e(Path(row['local_path']).name)}</a>"
                            f"{e(note)}"]]
        body.append(_facts(info))
        imm = ds["immersion"].values if "immersion" in ds.data_vars else None
        for var in _qc_variables(ds):
            values, units = _display_values(ds, var)
            fig = plots.plot_variable(ds["time"].values, values, ds[f"{var}_qc"].values, immersion=imm,
                                      name=_var_label(ds, var), units=units,
                                      title=f"{station} {row['deployment']}: {_var_label(ds, var)}")
            long_name = ds[var].attrs.get("long_name", var)
            body.append(_img(fig, f"{var} at {station}",
                             f"{e(long_name)}; markers show the aggregate flag of each sample"
                             f"{'; shaded: emersed (out of water)' if imm is not None and (imm == 0).any() else ''}."))
        if "water_level" in ds.data_vars or (not water_done and imm is not None and "wetness" in ds.data_vars):
            sec = _water_level_section(archive, station, ds, attrs)
            if sec:
                body.append(sec)
                water_done = True
        body.append(_air_pressure_section(station, row["deployment"], ds, attrs))
        body.append(_clock_section(ds, attrs))
        body.append(_exposure_section(archive, station, stem))
        body.append(_tide_section(archive, station, stem))
    if not water_done:
        body.append("<p class=\"muted\">Tide values in qcpipe's reports are for data quality control only, "
                    "not for navigation or safety planning.</p>")
    stems = {Path(r["local_path"]).stem for r in rows}
    files = archive.derived_files(station, stems)
    if files:
        body.append("<h2 id=\"products\">Derived files</h2><ul>" +
                    "".join(f"<li><a href=\"{_href(p, out_dir)}\">{e(p.name)}</a></li>" for p in files) + "</ul>")
    sub = f"{_run_title(run)} &middot; station page"
    return _page(f"Station {station}: {name}", sub, "\n".join(b for b in body if b))


# --- the whole report --------------------------------------------------------------------------------

def _report_dir_name(run: dict) -> str:
    if run.get("run_id") is not None:
        return f"run-{int(run['run_id'])}"
    stamp = run.get("started") or dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    return "run-" + safe_file_name(re.sub(r"[^0-9TZ]", "", str(stamp)))


def _report_out(archive_root: str | Path, run: dict, out_dir: str | Path | None) -> tuple[Path, Path]:
    root = Path(archive_root).resolve()
    json.dumps(run)                                      # fail early on a value that is not JSON-able
    out = Path(out_dir).resolve() if out_dir is not None else root / "reports" / _report_dir_name(run)
    out.mkdir(parents=True, exist_ok=True)
    return root, out


def report_stations(archive_root: str | Path) -> list[str]:
    """The stations that get a page in a run report of this archive."""
    return _Archive(Path(archive_root).resolve()).stations()


def write_station_pages(archive_root: str | Path, run: dict, stations, *,
                        out_dir: str | Path | None = None) -> list[Path]:
    """Write the pages of `stations` of the run's report (their plots are most of a report's cost,
    so a flow can render stations on several workers), then call :func:`write_run_report` with
    ``station_pages=False`` for the index."""
    root, out = _report_out(archive_root, run, out_dir)
    archive = _Archive(root)
    pages = []
    for st in stations:
        pages.append(out / _station_page_name(st))
        _write_page(pages[-1], _station_html(st, archive, run, out))
    return pages


def write_run_report(archive_root: str | Path, run: dict, *, out_dir: str | Path | None = None,
                     station_pages: bool = True) -> Path:
    """Write the run's HTML report and return the path of its ``index.html``.

    Parameters
    ----------
    archive_root : path of the archive folder (with ``catalog.sqlite``)
    run : the run dict described in the module docstring
    out_dir : folder for the pages (default ``<archive>/reports/run-<id>``)
    station_pages : also write every station's page (False: they were written by
        :func:`write_station_pages`)
    """
    root, out = _report_out(archive_root, run, out_dir)
    archive = _Archive(root)
    stations = archive.stations()
    touched = {r.get("station") for r in run.get("results", [])}
    if station_pages:
        write_station_pages(root, run, stations, out_dir=out)
    body = ["<h2 id=\"needs-attention\">Needs attention</h2>",
            _attention_html(_attention_items(run, archive), "Nothing in this run needs attention."),
            _this_run_html(run, archive, out)]
    if run.get("diff"):
        body.append(_diff_html(run["diff"]))
    body.append("<h2 id=\"stations\">Stations</h2>")
    if stations:
        rows = []
        for st in stations:
            ds_rows = archive.datasets_of(st)
            name = archive.attrs(ds_rows[0]).get("station_name", "")
            rows.append([f"<a href=\"{e(_station_page_name(st))}\">{e(st)}</a>", e(name),
                         e(", ".join(r["deployment"] for r in ds_rows)),
                         "yes" if st in touched else "<span class=\"muted\">no</span>"])
        body.append(_table(["Station", "Name", "Deployments (latest version)", "Updated in this run"], rows))
    else:
        body.append("<p>The archive holds no dataset yet.</p>")
    body.append("<p class=\"muted\">Tide values in this report are for data quality control only; they are not "
                "for navigation or safety planning.</p>")
    index = out / "index.html"
    _write_page(index, _page(_run_title(run), _run_subtitle(run, root), "\n".join(body)))
    return index
