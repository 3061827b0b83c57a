"""What the review page shows, read from the archive: never written here.

Datasets are read only through :mod:`qcpipe.archive.ncio` (under its lock) and only at the
paths the catalog records, checked to lie inside the workspace's archive.  Long records are
thinned for display by :func:`thin_indices` (the lowest and highest value of each flag class
in each pixel column); a window with few enough samples is sent whole.
"""

from __future__ import annotations

import datetime as dt
import threading
from collections import OrderedDict
from pathlib import Path

import numpy as np

from ..archive.ncio import read_attrs, read_dataset
from ..config.annotations_edit import annotation_key
from ..diff import flag_diff_files
from ..errors import ArchiveError
from ..report.plots import EMERSED_COLOUR, FLAG_STYLE

#: a window with at most this many samples per pixel column is sent at full resolution
FULL_PER_COLUMN = 3
#: pixel columns a client may ask for (a wider request is answered with this many)
MAX_COLUMNS = 4000
MIN_COLUMNS = 50
#: times the page accepts: outside these years a date is refused as absurd
YEARS = (1900, 2100)

#: plotly marker symbols drawing the report's marker shapes (report/plots.py FLAG_STYLE: o s ^ X |)
PLOTLY_SYMBOL = {"o": "circle", "s": "square", "^": "triangle-up", "X": "x", "|": "line-ns-open"}


class NotFound(LookupError):
    """A station, deployment or version the archive does not hold (HTTP 404)."""


def flag_classes() -> list[dict]:
    """Flag classes as the page draws them: value, words, Okabe-Ito colour and the report's marker shape."""
    return [{"flag": f, "words": words, "colour": colour, "symbol": PLOTLY_SYMBOL[marker]}
            for f, (words, colour, marker, _size) in FLAG_STYLE.items()]


def thin_indices(times_ns: np.ndarray, values: np.ndarray, flags: np.ndarray, t0: int, t1: int,
                 columns: int) -> np.ndarray:
    """Indices of the samples to draw for the window [t0, t1] (int64 ns) on ``columns`` pixel columns.

    Samples in the window are put in ``columns`` equal time bins; in each bin, for each
    aggregate flag class present, the sample with the lowest and the one with the highest
    value are kept (a NaN value counts as 0 for the choice).  So every flag class that is in
    a column is drawn there and the line keeps its envelope (min/max per pixel column:
    common practice for drawing long series, no source).  ``times_ns`` is sorted; returns
    sorted unique indices into it.  O(n log n) (one sort of the window's samples).
    """
    if columns < 1:
        raise ValueError(f"columns must be >= 1; got {columns}")
    lo, hi = np.searchsorted(times_ns, t0, side="left"), np.searchsorted(times_ns, t1, side="right")
    if hi <= lo:
        return np.zeros(0, dtype=np.int64)
    t = times_ns[lo:hi]
    span = max(int(t1) - int(t0), 1)
    col = ((t - t0).astype(np.float64) * columns / span).astype(np.int64).clip(0, columns - 1)
    key = col * 16 + np.asarray(flags[lo:hi], dtype=np.int64).clip(0, 15)
    v = np.nan_to_num(np.asarray(values[lo:hi], dtype=np.float64), nan=0.0)
    order = np.lexsort((v, key))
    k = key[order]
    first = np.flatnonzero(np.r_[True, k[1:] != k[:-1]])
    last = np.r_[first[1:] - 1, k.size - 1]
    return np.unique(np.concatenate((order[first], order[last]))) + lo


def runs_of(mask: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) indices of each run of consecutive True values of ``mask``."""
    m = np.asarray(mask, dtype=bool)
    if not m.any():
        return []
    edges = np.diff(np.r_[0, m.astype(np.int8), 0])
    return list(zip(np.flatnonzero(edges == 1).tolist(), (np.flatnonzero(edges == -1) - 1).tolist()))


def ms(t) -> int:
    """Milliseconds since 1970-01-01 UTC of a datetime64."""
    return int(np.datetime64(t, "ms").astype(np.int64))


def parse_time(text: str, what: str) -> int:
    """A time given as ISO 8601 with a zone (``2026-09-20T00:00:00Z``) or as epoch milliseconds, in ns.

    ValueError (one sentence) for anything else, or a year outside :data:`YEARS`."""
    text = str(text).strip()
    try:
        if text.lstrip("-").isdigit() and len(text) <= 16:
            when = dt.datetime.fromtimestamp(int(text) / 1000.0, dt.timezone.utc)
        else:
            when = dt.datetime.fromisoformat(text.replace("Z", "+00:00"))
            if when.tzinfo is None:
                raise ValueError
    except (ValueError, OverflowError, OSError):
        raise ValueError(f"{what} {text[:40]!r} is not a time: give ISO 8601 with its zone, e.g. "
                         "2026-09-20T06:00:00Z") from None
    if not YEARS[0] <= when.year <= YEARS[1]:
        raise ValueError(f"{what} {text[:40]!r} is outside the years {YEARS[0]} to {YEARS[1]}; check the date")
    return int(when.timestamp()) * 1_000_000_000 + when.microsecond * 1000


def _qc_variables(ds) -> list[str]:
    return [v for v in ds.data_vars if f"{v}_qc" in ds.data_vars and "_qc" not in v]


def _display(ds, var: str) -> tuple[np.ndarray, str]:
    """Values and units as drawn: pressures in hPa (air) or kPa (water), like the report."""
    units = str(ds[var].attrs.get("units", ""))
    values = ds[var].values.astype(np.float64)
    if units == "Pa":
        return (values / 100.0, "hPa") if var.startswith("air_pressure") else (values / 1000.0, "kPa")
    return values, "" if units == "1" else units


class ArchiveView:
    """The workspace's archive as the page reads it: catalog rows, dataset headers and data (cached)."""

    def __init__(self, ctx):
        self.ctx = ctx
        self.root = ctx.paths.root
        self._lock = threading.Lock()
        self._cache: OrderedDict[tuple, object] = OrderedDict()

    # --- catalog --------------------------------------------------------------------
    def has_catalog(self) -> bool:
        return self.ctx.paths.catalog.exists()

    def _catalog(self):
        if not self.has_catalog():
            raise ArchiveError(f"archive {self.root} has no catalog yet; run 'qcpipe process' first")
        return self.ctx.catalog

    def latest_rows(self) -> dict[str, dict]:
        latest: dict[str, dict] = {}
        for r in self._catalog().datasets():
            if r["deployment"] not in latest or r["version"] > latest[r["deployment"]]["version"]:
                latest[r["deployment"]] = r
        return latest

    def versions(self, deployment: str) -> dict[int, dict]:
        return {int(r["version"]): r for r in self._catalog().dataset_versions(deployment)}

    def inside(self, path: str | Path) -> Path:
        """``path`` resolved, if it lies inside the archive; ArchiveError otherwise."""
        p = Path(path).resolve()
        if self.root not in p.parents:
            raise ArchiveError(f"catalog path {p.name} lies outside the archive {self.root}; not read")
        return p

    def row(self, deployment: str) -> dict:
        row = self.latest_rows().get(deployment)
        if row is None:
            raise NotFound(f"no dataset of deployment {deployment!r} in this archive")
        return row

    def dataset(self, row: dict):
        path = self.inside(row["path"])
        key = (str(path), path.stat().st_mtime_ns)
        with self._lock:
            if key in self._cache:
                self._cache.move_to_end(key)
                return self._cache[key]
        ds = read_dataset(path)
        with self._lock:
            self._cache[key] = ds
            while len(self._cache) > 8:
                self._cache.popitem(last=False)
        return ds

    # --- the stations page ---------------------------------------------------------------
    def notices(self, row: dict, quarantined: list[dict]) -> list[dict]:
        """Open notices of a deployment's latest dataset: suspected clock error, unreliable probe, quarantined files."""
        out = []
        attrs = read_attrs(self.inside(row["path"]))
        if int(attrs.get("clock_error_suspected", 0) or 0) == 1:
            out.append({"kind": "clock", "text": str(attrs.get("clock_verdict", "clock error suspected"))})
        if attrs.get("immersion_unreliable_periods"):
            out.append({"kind": "fouling", "text": "probe unreliable (fouled or buried): "
                                                   f"{attrs['immersion_unreliable_periods']}"})
        for q in quarantined:
            if q.get("deployment") == row["deployment"]:
                out.append({"kind": "quarantine", "text": f"{q['original_name']}: {q.get('reason') or ''}"})
        return out

    def stations(self) -> dict:
        """Stations with their deployments' latest versions, flag counts and open notices."""
        latest = self.latest_rows()
        quarantined = self._catalog().raw_files(status="quarantined")
        stations = []
        for st in self.ctx.register.station:
            deps = []
            for d in self.ctx.register.deployment:
                if d.station != st.id or d.id not in latest:
                    continue
                r = latest[d.id]
                counts = {str(f): 0 for f in FLAG_STYLE}
                for per in (r.get("flag_counts") or {}).values():
                    for f, n in per.items():
                        counts[str(f)] = counts.get(str(f), 0) + int(n)
                deps.append({"id": d.id, "version": int(r["version"]), "samples": int(r["samples"]),
                             "flag_counts": counts, "variables": sorted(r.get("flag_counts") or {}),
                             "notices": self.notices(r, quarantined)})
            stations.append({"id": st.id, "name": getattr(st, "name", "") or "", "deployments": deps})
        unmatched = [{"kind": "quarantine", "text": f"{q['original_name']}: {q.get('reason') or ''}"}
                     for q in quarantined if not q.get("deployment")]
        return {"stations": stations, "notices": unmatched}

    # --- a deployment ----------------------------------------------------------------------
    def deployment(self, deployment: str, annotations) -> dict:
        """A deployment's header: its station, version, variables and their checks, time span, annotations."""
        row = self.row(deployment)
        ds = self.dataset(row)
        t = ds["time"].values
        variables = []
        for v in _qc_variables(ds):
            _, units = _display(ds, v)
            checks = sorted(n[len(v) + 4:] for n in ds.data_vars if n.startswith(f"{v}_qc_"))
            variables.append({"name": v, "units": units, "checks": checks})
        station = row["station"]
        station_vars = sorted({v for r in self.latest_rows().values() if r["station"] == station
                               for v in (r.get("flag_counts") or {})})
        return {"station": station, "deployment": deployment, "version": int(row["version"]),
                "samples": int(t.size), "start": ms(t[0]) if t.size else None, "end": ms(t[-1]) if t.size else None,
                "variables": variables, "station_variables": station_vars,
                "versions": sorted(self.versions(deployment)),
                "annotations": annotation_rows(annotations, station)}

    def series(self, deployment: str, t0: int | None, t1: int | None, columns: int) -> dict:
        """The deployment's variables in [t0, t1] (ns; None: the whole record), thinned to ``columns``
        pixel columns unless the window is small, with emersed periods and the site's reference level."""
        row = self.row(deployment)
        ds = self.dataset(row)
        times = ds["time"].values.astype("datetime64[ns]").astype(np.int64)
        if times.size == 0:
            return {"full": True, "variables": [], "emersed": [], "reference": None}
        columns = int(min(max(columns, MIN_COLUMNS), MAX_COLUMNS))
        t0 = int(times[0]) if t0 is None else max(int(t0), int(times[0]))
        t1 = int(times[-1]) if t1 is None else min(int(t1), int(times[-1]))
        if t1 < t0:
            t0, t1 = t1, t0
        lo, hi = np.searchsorted(times, t0, "left"), np.searchsorted(times, t1, "right")
        full = (hi - lo) <= FULL_PER_COLUMN * columns
        out_vars = []
        for v in _qc_variables(ds):
            values, units = _display(ds, v)
            agg = ds[f"{v}_qc"].values
            idx = np.arange(lo, hi) if full else thin_indices(times, values, agg, t0, t1, columns)
            checks = {n[len(v) + 4:]: ds[n].values[idx].astype(int).tolist()
                      for n in ds.data_vars if n.startswith(f"{v}_qc_")}
            vals = values[idx]
            out_vars.append({"name": v, "units": units, "t": (times[idx] // 1_000_000).tolist(),
                             "v": [None if not np.isfinite(x) else round(float(x), 6) for x in vals],
                             "flag": agg[idx].astype(int).tolist(), "checks": checks})
        emersed = []
        if "immersion" in ds.data_vars:
            imm = ds["immersion"].values[lo:hi]
            emersed = [[int(times[lo + a] // 1_000_000), int(times[lo + b] // 1_000_000)]
                       for a, b in runs_of(imm == 0)]
        return {"full": bool(full), "samples": int(hi - lo), "variables": out_vars, "emersed": emersed,
                "emersed_colour": EMERSED_COLOUR, "reference": self.reference(row, t0, t1, columns)}

    def reference(self, row: dict, t0: int, t1: int, columns: int) -> dict | None:
        """The site's reference water level (its first gauge's observed level, fail and missing left out)."""
        site = read_attrs(self.inside(row["path"])).get("site_id")
        for r in sorted(self.latest_rows().values(), key=lambda r: r["deployment"]):
            if "water_level" not in (r.get("flag_counts") or {}):
                continue
            if read_attrs(self.inside(r["path"])).get("site_id") != site:
                continue
            g = self.dataset(r)
            times = g["time"].values.astype("datetime64[ns]").astype(np.int64)
            level = g["water_level"].values.astype(np.float64)
            flags = g["water_level_qc"].values
            level = np.where(np.isin(flags, (4, 9)), np.nan, level)
            idx = thin_indices(times, level, np.zeros_like(flags), t0, t1, columns)
            return {"station": r["station"], "deployment": r["deployment"], "units": "m",
                    "t": (times[idx] // 1_000_000).tolist(),
                    "v": [None if not np.isfinite(x) else round(float(x), 4) for x in level[idx]]}
        return None

    # --- differences --------------------------------------------------------------------
    def diff(self, deployment: str, old: int | None = None, new: int | None = None) -> dict:
        """Flag differences between two versions of a deployment (``qcpipe diff``'s content)."""
        versions = self.versions(deployment)
        if not versions:
            raise NotFound(f"no dataset of deployment {deployment!r} in this archive")
        new = new or max(versions)
        old = old or max((v for v in versions if v < new), default=None)
        for v in (old, new):
            if v is None or v not in versions:
                raise NotFound(f"deployment {deployment!r} has versions {sorted(versions)}; choose two of them")
            if versions[v]["pruned"] or not Path(versions[v]["path"]).exists():
                raise NotFound(f"version {v} of {deployment!r} is no longer kept (retention setting)")
        d = flag_diff_files(self.inside(versions[old]["path"]), self.inside(versions[new]["path"]),
                            old_inputs=versions[old].get("qc_inputs"), new_inputs=versions[new].get("qc_inputs"))
        return {"deployment": deployment, "from": old, "to": new, "lines": d.lines(),
                "moves": [{"variable": m.variable, "check": m.check, "from": m.from_flag, "to": m.to_flag,
                           "count": m.count, "ranges": [list(r) for r in m.ranges[:20]]} for m in d.moves]}


def annotation_rows(annotations, station: str) -> list[dict]:
    """A station's annotations as the page lists them (with each one's key for editing)."""
    return [dict(a.as_dict(), key=annotation_key(a),
                 start_ms=ms(np.datetime64(a.as_dict()["start"].rstrip("Z"))),
                 end_ms=ms(np.datetime64(a.as_dict()["end"].rstrip("Z"))))
            for a in annotations.for_station(station)]
