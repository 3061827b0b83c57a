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
that is not there yet.

Figures are drawn once per content: ``figure_cache`` keeps each PNG in
``<archive>/reports/.figure-cache`` under the SHA-256 of the plotting code and
the arrays it was given, so a page of an unchanged dataset costs no drawing.

Python prepares the values (numbers, table rows, figures as PNG ``data:``
URIs); the Jinja2 templates in ``qcpipe/report/templates`` (``page.html.j2``,
``index.html.j2``, ``station.html.j2``, ``macros.html.j2`` and the style
sheet ``report.css``) write the markup, with autoescaping: every string taken
from data is HTML-escaped.

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
      "skipped_in_inbox": ["x.csv: vanished ..."],     # files not used this run, one line each (optional)
      "results": [{                         # one per dataset version written
          "station": "kc-mid", "deployment": "kc-mid-temp-2026-09",
          "dataset": "/abs/path/qcpipe_..._v001.nc", "version": 1, "samples": 6039,
          "flag_counts": {"temperature": {"1": 6038, "3": 1}},   # aggregate flag -> count
          "counts": {"duplicates": 0, "conflicts": 0, "pre_deployment": 0, "post_recovery": 0},
          "notices": [{"kind": "clock", "text": "probe clock about +60 min off ...",
                       "station": "kc-mid", "deployment": "kc-mid-probe-2026-09"}],   # Notice.as_dict()
          "products": ["/abs/path/derived/..."],
          "air_pressure": {"source": "...", "sensor": "absolute", "barometer": "kc-baro-2026-09 (v001)",
                           "from_barometer": 9980, "from_constant": 60, "constant_hpa": 1013.25},
                                            # (optional) level loggers: the air pressure subtracted
      }],
      "notices": [{"kind": "run", "text": "...", "station": None, "deployment": None}],   # (optional) run-level
      "earlier": [{"run_id": 6, "kind": "clock", "text": "...", "station": "kc-mid",      # (optional) notices of
                   "deployment": "kc-mid-probe-2026-09"}],      # earlier runs that stopped before showing them
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

Notices are listed under "Needs attention" by their ``kind`` (a key of
``report.model.NOTICE_KINDS``, whose words head each entry), never by their
words; a dataset whose attributes say ``clock_error_suspected = 1`` is listed
even without a clock notice.
"""

from __future__ import annotations

import base64
import datetime as dt
import json
import os
import re
from pathlib import Path

import jinja2
import numpy as np

from ..archive.catalog import Catalog
from ..archive.ncio import read_attrs, read_dataset
from ..archive.store import safe_file_name
from ..checks.flags import FLAG_KEYS, FLAG_WORDS
from ..files import atomic_path
from . import plots
from .figure_cache import CACHE_DIR_NAME, FigureCache, png_size
from .model import NOTICE_KINDS, Notice, earlier_notices

#: text symbols matching the plot markers (circle, square, triangle, cross, bar)
FLAG_SYMBOLS = {"1": "\u25cf", "2": "\u25a0", "3": "\u25b2", "4": "\u2716", "9": "\u2758"}


def _write_page(final: Path, text: str) -> Path:
    """Write a page atomically (temporary file in the same folder, then os.replace), readable by all."""
    with atomic_path(final) as tmp:
        tmp.write_text(text, encoding="utf-8")
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(tmp, 0o666 & ~mask)
    return final


# --- building the run dict ---------------------------------------------------------

def _notice_dicts(notices) -> list[dict]:
    """``Notice.as_dict()`` of each notice (plain JSON for the run dict)."""
    return [n.as_dict() for n in notices]


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
            "notices": _notice_dicts(r.notices), "products": [str(p) for p in r.products],
            "air_pressure": json.loads(json.dumps(getattr(r, "air_pressure", {}) or {}))})
    return {"run_id": None if run_id is None else int(run_id), "started": started, "ended": ended,
            "outcome": outcome, "files_seen": int(summary.files_seen), "files_known": int(summary.files_known),
            "ingested": int(summary.ingested),
            "quarantined": [{"name": str(q.name), "reason": str(q.reason)} for q in summary.quarantined],
            "repeated_in_inbox": [str(x) for x in summary.repeated_in_inbox],
            "skipped_in_inbox": [str(x) for x in summary.skipped_in_inbox], "results": results,
            "notices": _notice_dicts(getattr(summary, "notices", [])),
            "earlier": [{"run_id": int(run_id), **n.as_dict()} for run_id, n in getattr(summary, "earlier", [])],
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
        self.figures = FigureCache(os.environ.get("QCPIPE_FIGURE_CACHE") or root / "reports" / CACHE_DIR_NAME)
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


# --- templates and small pieces ------------------------------------------------------

#: the page templates (``qcpipe/report/templates``), with autoescaping: every value from data is escaped
_TEMPLATES = jinja2.Environment(
    loader=jinja2.FileSystemLoader(Path(__file__).with_name("templates")),
    autoescape=jinja2.select_autoescape(["html", "html.j2"], default_for_string=True),
    undefined=jinja2.StrictUndefined, keep_trailing_newline=True)


def _render(template: str, **context) -> str:
    return _TEMPLATES.get_template(template).render(**context)


# Parts of a table cell, drawn by the templates' ``show`` macro: a cell is text, a part, or a list of them.
def _link(text, href: str) -> dict:
    return {"href": href, "text": "" if text is None else str(text)}


def _muted(text) -> dict:
    return {"muted": str(text)}


def _bold(text) -> dict:
    return {"bold": str(text)}


_BR = {"br": True}


def _text(value) -> str:
    """Text of any value from data (None as an empty string)."""
    return "" if value is None else str(value)


def _img(png: bytes, alt: str, caption: str = "") -> dict:
    """A figure for the templates: the PNG as a ``data:`` URI, its size in pixels, alt text and caption."""
    w, h = png_size(png)
    data = base64.b64encode(png).decode("ascii")
    return {"src": f"data:image/png;base64,{data}", "alt": alt, "width": w, "height": h, "caption": caption}


def _table(header: list[str], rows: list[list], numeric: set[int] = frozenset()) -> dict:
    """A table for the templates; ``numeric`` columns are right-aligned.  A cell given as a
    tuple ``(cell, css class)`` keeps its own class."""
    head = [{"text": h, "cls": "n" if i in numeric else None} for i, h in enumerate(header)]
    body = [[{"v": c[0], "cls": c[1]} if isinstance(c, tuple) else {"v": c, "cls": "n" if i in numeric else None}
             for i, c in enumerate(row)] for row in rows]
    return {"head": head, "rows": body}


def _flag_classes() -> list[dict]:
    """The key of flag classes: each flag's symbol (as on the plots), colour and word."""
    return [{"key": k, "word": w, "symbol": FLAG_SYMBOLS[k], "color": plots.FLAG_STYLE[int(k)][1]}
            for k, w in FLAG_WORDS.items()]


def _n(x) -> str:
    return f"{int(x):,}".replace(",", "\u2009")      # thin space between thousands


def _pct(part: int, whole: int) -> str:
    if not whole:
        return ""
    p = 100.0 * part / whole
    return "<0.1%" if 0 < p < 0.1 else f"{p:.1f}%"


def _rel(target: Path, start: Path) -> str:
    return Path(os.path.relpath(Path(target).resolve(), Path(start).resolve())).as_posix()


def _href(target: Path, start: Path) -> str:
    from urllib.parse import quote

    return quote(_rel(target, start))


def _station_page_name(station: str) -> str:
    return f"station-{safe_file_name(station)}.html"


# --- what needs attention ----------------------------------------------------------------

#: css class of each notice kind in the "Needs attention" list (colour of its left border)
_KIND_CLASS = {"clock": "clock", "fouling": "probe", "elevation": "probe", "tide": "probe", "quarantine": "quarantine",
               "failures": "fail"}


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


def _item(kind: str, where: str, text: str) -> dict:
    """One entry of "Needs attention": css class, heading words of its kind, where, the sentence."""
    return {"cls": _KIND_CLASS.get(kind, "other"), "kind": NOTICE_KINDS[kind], "where": where, "text": text}


def _attention_items(run: dict, archive: _Archive, station_filter: str | None = None) -> list[dict]:
    """Everything that needs a person's attention, grouped by the notices' kinds (never by their words)."""
    items: list[dict] = []
    results = [r for r in run.get("results", []) if station_filter in (None, r.get("station"))]
    if station_filter is None:
        for q in run.get("quarantined", []):
            items.append(_item("quarantine", _text(q.get("name")), _text(q.get("reason"))))
    notices = [Notice.from_dict(n) for r in results for n in r.get("notices", [])]
    if station_filter is None:
        notices += [Notice.from_dict(n) for n in run.get("notices", [])] + earlier_notices(run)
    clock_seen = {n.deployment for n in notices if n.kind == "clock"}
    items += [_item(n.kind, n.where, n.text) for n in notices]
    for r in results:           # suspected clock errors recorded in the dataset even without a notice
        row = archive.latest.get(r["deployment"])
        if r["deployment"] in clock_seen or row is None or row.get("local_path") is None:
            continue
        a = archive.attrs(row)
        if int(a.get("clock_error_suspected", 0) or 0) == 1:
            items.append(_item("clock", f"{r['station']}/{r['deployment']}", _text(a.get("clock_verdict", ""))))
    for r in results:
        conflicts = int((r.get("counts") or {}).get("conflicts", 0))
        if conflicts:
            items.append(_item("conflict", f"{r['station']}/{r['deployment']}",
                               f"{_n(conflicts)} timestamp(s) with different values in overlapping downloads "
                               "(first kept, flagged suspect)"))
    for st, fails, n, worst in _fails_by_station(results)[:3]:
        items.append(_item("failures", st, f"{_n(fails)} of {_n(n)} samples fail ({_pct(fails, n)}, aggregate "
                                           f"flags of all variables); most in {worst}"))
    return items


# --- the overview page ----------------------------------------------------------------------

def _flag_rows(results: list[dict], *, link_station: bool) -> list[list]:
    rows = []
    for r in results:
        for var, per in sorted((r.get("flag_counts") or {}).items()):
            total = sum(int(v) for v in per.values())
            st = _link(r["station"], _station_page_name(r["station"])) if link_station else r["station"]
            row = [st, r["deployment"], f"v{int(r.get('version', 0)):03d}", var]
            for k in FLAG_KEYS:
                v = int(per.get(k, 0))
                cls = f"n c{k}" if v and k in ("3", "4", "9") else "n"
                row.append((_n(v) if v else _muted("0"), cls))
            bad = sum(int(per.get(k, 0)) for k in ("3", "4"))
            row.append((_pct(bad, total), "n"))
            rows.append(row)
    return rows


_FLAG_HEADER = ["Station", "Deployment", "Version", "Variable"] + [
    f"{k} {FLAG_WORDS[k]}" for k in FLAG_KEYS] + ["suspect + fail"]


def _flag_table(results: list[dict], *, link_station: bool) -> dict:
    return _table(_FLAG_HEADER, _flag_rows(results, link_station=link_station), numeric={5, 6, 7, 8, 9, 10})


def _run_title(run: dict) -> str:
    kind = f" {run['kind']}" if run.get("kind") else ""
    return f"qcpipe{kind} run {run['run_id']}" if run.get("run_id") is not None else f"qcpipe{kind} run"


def _run_meta(run: dict) -> list[tuple[str, str]]:
    """(label, value) of the run for the overview's header: when it started and ended, its outcome."""
    labels = {"started": "started ", "ended": "ended ", "outcome": "outcome: "}
    return [(label, str(run[key])) for key, label in labels.items() if run.get(key)]


def _this_run(run: dict, archive: _Archive, out_dir: Path) -> dict:
    """The values of the overview's "This run" section."""
    results = run.get("results", [])
    known = any(r.get("counts") for r in results)

    def c(key):
        return sum(int((r.get("counts") or {}).get(key, 0)) for r in results) if known else None

    facts = [
        ("files in the inbox", run.get("files_seen", 0)),
        ("already in the archive", run.get("files_known", 0)),
        ("repeated copies skipped", len(run.get("repeated_in_inbox", []))),
        ("files skipped this run (vanished, changed, links out of the inbox)", len(run.get("skipped_in_inbox", []))),
        ("files ingested", run.get("ingested", 0)),
        ("files quarantined", len(run.get("quarantined", []))),
        ("dataset versions written", len(results)),
        ("samples in them", sum(int(r.get("samples", 0)) for r in results)),
        ("repeated records of overlapping downloads dropped", c("duplicates")),
        ("timestamps whose downloads disagree (kept, flagged suspect)", c("conflicts")),
        ("samples trimmed before deployment", c("pre_deployment")),
        ("samples trimmed after recovery", c("post_recovery")),
        ("truncated last lines not read", c("truncated_last_line")),
        ("records out of time order (sorted)", c("out_of_order")),
    ]
    out = {"run_counts": _table(["", "count"], [[k, _muted("not recorded") if v is None else _n(v)]
                                                for k, v in facts], numeric={1}),
           "quarantined": None, "quarantine_dir": None, "reruns": None, "conflicts": None,
           "repeated_in_inbox": [str(x) for x in run.get("repeated_in_inbox", [])],
           "skipped_in_inbox": [str(x) for x in run.get("skipped_in_inbox", [])],
           "barometric": _barometric_table(results),
           "flags": _flag_table(results, link_station=True) if results else None}
    if run.get("quarantined"):
        out["quarantined"] = _table(["File", "Reason"], [[_text(q.get("name")), _text(q.get("reason"))]
                                                         for q in run["quarantined"]])
        qdir = archive.root / "quarantine"
        out["quarantine_dir"] = str(qdir) if qdir.is_dir() else None
    if run.get("reruns"):
        out["reruns"] = _table(["Deployment", "Why"], [[d, "; ".join(str(w) for w in why)]
                                                       for d, why in sorted(run["reruns"].items())])
    conflict_rows = []
    for r in results:
        n = int((r.get("counts") or {}).get("conflicts", 0))
        if n:
            p = archive.root / "conflicts" / f"{r['deployment']}.csv"
            link = _link(p.name, _href(p, out_dir)) if p.exists() else ""
            conflict_rows.append([r["station"], r["deployment"], _n(n), link])
    if conflict_rows:
        out["conflicts"] = _table(["Station", "Deployment", "timestamps", "list"], conflict_rows, numeric={2})
    return out


def _barometric_table(results: list[dict]) -> dict | None:
    """The air pressure each level dataset of the run subtracted: source, samples on the barometer and on the constant."""
    rows = []
    for r in results:
        a = r.get("air_pressure") or {}
        if not a:
            continue
        if "from_barometer" in a:
            what = f"barometer {a.get('barometer') or '(no data yet)'}; else {_fmt(a.get('constant_hpa'), 2, ' hPa')}"
            rows.append([r["station"], r["deployment"], what, _n(a["from_barometer"]), _n(a["from_constant"])])
        else:
            rows.append([r["station"], r["deployment"], _text(a.get("source", "")), "", ""])
    if not rows:
        return None
    return _table(["Station", "Deployment", "Air pressure from", "samples on the barometer",
                   "samples on the constant (suspect)"], rows, numeric={3, 4})


def _diff_table(diff: list[dict]) -> dict:
    rows = []

    def flag(x) -> str:
        return "absent" if x is None else f"{x} {FLAG_WORDS.get(str(x), '')}".strip()

    for d in diff:
        ranges = [list(r) for r in d.get("ranges") or []]
        if not ranges and (d.get("first") or d.get("last")):
            ranges = [[d.get("first"), d.get("last")]]
        shown: list = []
        for a, b in ranges[:3]:
            shown += ([_BR] if shown else []) + [_text(a) if a == b else f"{_text(a)} to {_text(b)}"]
        if len(ranges) > 3:
            shown += [_BR, _muted(f"and {len(ranges) - 3} more")]
        rows.append([_text(d.get("station")), _text(d.get("deployment")), _text(d.get("variable")),
                     _text(d.get("check")), f"{flag(d.get('from_flag'))} \u2192 {flag(d.get('to_flag'))}",
                     _n(d.get("count", 0)), shown, _text(d.get("rule_change"))])
    return _table(["Station", "Deployment", "Variable", "Check", "Flag", "samples", "when (UTC)",
                   "Input difference"], rows, numeric={5})


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
        return str(x)
    return "not recorded" if not np.isfinite(f) else f"{f:.{nd}f}{unit}"


def _air_pressure_section(station: str, deployment: str, ds, attrs: dict, figures: FigureCache) -> dict | None:
    """A level logger's barometric correction: where its air pressure came from, and a plot of it."""
    if "water_level_air_pressure_source" not in attrs:
        return None
    facts = [["pressure sensor", _text(attrs.get("pressure_sensor", ""))],
             ["air pressure subtracted", _text(attrs["water_level_air_pressure_source"])]]
    if "water_level_air_pressure_from_barometer" in attrs:
        facts += [["samples on the barometer", _n(attrs["water_level_air_pressure_from_barometer"])],
                  ["samples on the constant (flagged suspect)", _n(attrs["water_level_air_pressure_from_constant"])]]
    if attrs.get("water_level_air_pressure_constant_ranges"):
        facts.append(["on the constant (UTC)", _text(attrs["water_level_air_pressure_constant_ranges"])])
    figure = None
    if "air_pressure_subtracted" in ds.data_vars and "air_pressure_source" in ds.data_vars:
        src = ds["air_pressure_source"].values
        marks = np.where(src == 2, 3, 1).astype(np.int8)
        values, units = _display_values(ds, "air_pressure_subtracted")
        png = figures.png(plots.plot_variable, ds["time"].values, values, marks, name="air pressure subtracted",
                          units=units, title=f"{station} {deployment}: air pressure subtracted")
        figure = _img(png, f"air pressure subtracted at {station}",
                      "Air pressure subtracted for the water level: circles (pass) from the site's barometer, "
                      "triangles (suspect) the configured constant where the barometer had no valid value.")
    return {"facts": facts, "figure": figure}


def _clock_section(ds, attrs: dict, figures: FigureCache) -> dict | None:
    if "clock_transition_offset_s" not in attrs and "clock_verdict" not in attrs:
        return None
    verdict = str(attrs.get("clock_verdict", "no verdict recorded"))
    figure = None
    if "transition_offset" in ds.data_vars:
        figure = _img(figures.png(plots.plot_transition_offsets, ds["transition_offset"].values, verdict_text=verdict),
                      "histogram of transition offsets", "Offsets of the observed wet/dry transitions from the "
                      "predicted ones (minutes). Tide values are for data quality control only.")
    suspected = int(attrs.get("clock_error_suspected", 0) or 0) == 1
    rows = [["clock error suspected", _bold("yes") if suspected else "no"],
            ["median offset of observed from predicted transitions",
             _fmt(_minutes(attrs.get("clock_transition_offset_s")), 1, " min")],
            ["spread of the offsets", _fmt(_minutes(attrs.get("clock_offset_spread_s")), 1, " min")],
            ["wet/dry cross-correlation lag", _fmt(_minutes(attrs.get("clock_xcorr_lag_s")), 1, " min")],
            ["verdict", verdict]]
    return {"figure": figure, "facts": rows}


def _minutes(seconds):
    try:
        return float(seconds) / 60.0
    except (TypeError, ValueError):
        return None


def _exposure_section(archive: _Archive, station: str, stem: str) -> dict | None:
    daily = archive.derived(station, stem, "daily_exposure")
    periods = archive.derived(station, stem, "emersion_periods")
    if daily is None and periods is None:
        return None
    out = {"figure": None, "facts": None}
    if daily is not None:
        dd = archive.read(daily)
        mt = dd["max_aerial_temperature"].values if "max_aerial_temperature" in dd else None
        out["figure"] = _img(archive.figures.png(plots.plot_daily_exposure, dd["day"].values,
                                                 dd["hours_emersed"].values, mt, title=f"Daily exposure at {station}"),
                             f"daily exposure at {station}",
                             "Hours the sensing point was out of water per UTC day, and the highest temperature "
                             "while emersed (from the station's temperature logger, fail and missing samples "
                             "left out).")
    if periods is not None:
        pp = archive.read(periods)
        dur = pp["duration"].values / 3600.0
        rows = [["emersion periods", _n(dur.size)]]
        if dur.size:
            i = int(np.nanargmax(dur))
            rows.append(["longest", f"{dur[i]:.1f} h from {_iso(pp['start_time'].values[i])}"])
            mx = pp["max_temperature"].values
            if np.isfinite(mx).any():
                j = int(np.nanargmax(mx))
                rows.append(["hottest", f"{mx[j]:.1f} degC, emersion from {_iso(pp['start_time'].values[j])}"])
            rows.append(["with both ends observed", _n(int(np.sum(pp["both_ends_observed"].values == 1)))])
        out["facts"] = rows
    return out


def _tide_section(archive: _Archive, station: str, stem: str) -> dict | None:
    events = archive.derived(station, stem, "tide_events")
    if events is None:
        return None
    ev = archive.read(events)
    src = ev["event_source"].values if "event_source" in ev else np.zeros(ev.sizes.get("event", 0), np.int8)
    kind = ev["event_kind"].values if "event_kind" in ev else np.zeros_like(src)
    out = {"high": _n(np.sum((src == 1) & (kind == 1))), "low": _n(np.sum((src == 1) & (kind == 0))),
           "predicted": _n(np.sum(src == 0)), "datums": None, "note": None}
    datums = [(k[len("datum_"):-2].upper(), v) for k, v in ev.attrs.items()
              if k.startswith("datum_") and k.endswith("_m")]
    if datums:
        out["datums"] = _table(["Datum", f"m above {ev.attrs.get('vertical_datum', 'the datum')}"],
                               [[k, _fmt(v, 3)] for k, v in datums], numeric={1})
        out["note"] = _text(ev.attrs.get("datum_note")) or None
    return out


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


def _water_level_figure(archive: _Archive, station: str, ds, attrs: dict) -> dict | None:
    site = attrs.get("site_id")
    gauges = _site_gauges(archive, site) if site else []
    if not gauges:
        return None
    g = gauges[0]
    gds = archive.read(g["local_path"])
    level = gds["water_level"].values.astype(np.float64)
    if "water_level_qc" in gds:
        level = np.where(np.isin(gds["water_level_qc"].values, (4, 9)), np.nan, level)
    pred = gds["water_level_predicted"].values if "water_level_predicted" in gds else None
    elev = _scalar(ds, "sensor_height")
    own = g["station"] == station
    what = "the pressure sensor" if own else "this station's sensing point"
    png = archive.figures.png(plots.plot_water_level, gds["time"].values, level, pred, elevation_m=elev,
                              datum_name=str(gds.attrs.get("vertical_datum", "datum")),
                              title=f"Water level at {g['station']} ({g['deployment']})")
    cap = (f"Observed water level at gauge {g['station']} (fail and missing samples left out)"
           f"{' and its harmonic prediction' if pred is not None else ''}, with the height of {what}. "
           "Tide values are for data quality control only, not for navigation or safety planning.")
    return _img(png, f"water level at {g['station']}", cap)


def _dataset_section(archive: _Archive, station: str, row: dict, in_run: dict, out_dir: Path,
                     water_level_shown: bool) -> dict:
    """The values of one dataset's part of a station page."""
    ds = archive.read(row["local_path"])
    attrs = dict(ds.attrs)
    stem = Path(row["local_path"]).stem
    note = "" if row["deployment"] in in_run else " (not updated in this run)"
    info = [["instrument", _text(attrs.get("instrument", ""))],
            ["time covered", f"{_text(attrs.get('time_coverage_start', ''))} to "
                             f"{_text(attrs.get('time_coverage_end', ''))}"],
            ["samples", _n(ds.sizes.get("time", 0))],
            ["sensing point", f"{_fmt(_scalar(ds, 'sensor_height'), 2, ' m')} above "
                              f"{_text(attrs.get('vertical_datum', 'the datum'))}"],
            ["rule set", [_text(attrs.get("qc_rule_set", "")), " ",
                          _muted(f"sha256 {str(attrs.get('qc_rule_set_sha256', ''))[:12]}")]],
            ["raw files", _text(attrs.get("raw_file_names", ""))],
            ["dataset", [_link(Path(row["local_path"]).name, _href(row["local_path"], out_dir)), note]]]
    if attrs.get("immersion_reference_level"):
        info.append(["tide reference (checked against)", _text(attrs["immersion_reference_level"])])
    if attrs.get("immersion_source") and "immersion" in ds.data_vars:
        info.append(["immersion state from", _text(attrs["immersion_source"])])
    if attrs.get("immersion_unreliable_periods"):
        info.append(["probe unreliable (fouled or buried)", _bold(_text(attrs["immersion_unreliable_periods"]))])
    imm = ds["immersion"].values if "immersion" in ds.data_vars else None
    figures = []
    for var in _qc_variables(ds):
        values, units = _display_values(ds, var)
        png = archive.figures.png(plots.plot_variable, ds["time"].values, values, ds[f"{var}_qc"].values,
                                  immersion=imm, name=_var_label(ds, var), units=units,
                                  title=f"{station} {row['deployment']}: {_var_label(ds, var)}")
        long_name = ds[var].attrs.get("long_name", var)
        figures.append(_img(png, f"{var} at {station}",
                            f"{long_name}; markers show the aggregate flag of each sample"
                            f"{'; shaded: emersed (out of water)' if imm is not None and (imm == 0).any() else ''}."))
    water = None
    if "water_level" in ds.data_vars or (not water_level_shown and imm is not None and "wetness" in ds.data_vars):
        water = _water_level_figure(archive, station, ds, attrs)
    return {"deployment": row["deployment"], "version": int(row["version"]), "info": info, "figures": figures,
            "water_level": water, "air_pressure": _air_pressure_section(station, row["deployment"], ds, attrs, archive.figures),
            "clock": _clock_section(ds, attrs, archive.figures), "exposure": _exposure_section(archive, station, stem),
            "tide": _tide_section(archive, station, stem)}


def _station_html(station: str, archive: _Archive, run: dict, out_dir: Path) -> str:
    rows = archive.datasets_of(station)
    first = archive.read(rows[0]["local_path"])
    a0 = first.attrs
    name = a0.get("station_name", station)
    facts = [["station", f"{station} ({name})"], ["site", _text(a0.get("site_name", a0.get("site_id", "")))],
             ["latitude, longitude", f"{_fmt(_scalar(first, 'latitude'), 4)}, {_fmt(_scalar(first, 'longitude'), 4)}"],
             ["vertical datum", _text(a0.get("vertical_datum", ""))]]
    in_run = {r["deployment"]: r for r in run.get("results", []) if r.get("station") == station}
    datasets, water_level_shown = [], False
    for row in rows:
        datasets.append(_dataset_section(archive, station, row, in_run, out_dir, water_level_shown))
        water_level_shown = water_level_shown or datasets[-1]["water_level"] is not None
    stems = {Path(r["local_path"]).stem for r in rows}
    products = [_link(p.name, _href(p, out_dir)) for p in archive.derived_files(station, stems)]
    return _render("station.html.j2", title=f"Station {station}: {name}", run_title=_run_title(run),
                   station_page=True, station_facts=facts,
                   attention=_attention_items(run, archive, station_filter=station),
                   flags=_flag_table(list(in_run.values()), link_station=False) if in_run else None,
                   flag_classes=_flag_classes(), datasets=datasets, water_level_shown=water_level_shown,
                   products=products)


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
    station_rows = []
    for st in stations:
        ds_rows = archive.datasets_of(st)
        station_rows.append([_link(st, _station_page_name(st)), _text(archive.attrs(ds_rows[0]).get("station_name", "")),
                             ", ".join(r["deployment"] for r in ds_rows), "yes" if st in touched else _muted("no")])
    index = out / "index.html"
    _write_page(index, _render(
        "index.html.j2", title=_run_title(run), run_meta=_run_meta(run), archive=str(root), station_page=False,
        attention=_attention_items(run, archive), **_this_run(run, archive, out),
        flag_classes=_flag_classes(), diff=_diff_table(run["diff"]) if run.get("diff") else None,
        stations=_table(["Station", "Name", "Deployments (latest version)", "Updated in this run"], station_rows)
        if station_rows else None))
    archive.figures.prune()
    return index
