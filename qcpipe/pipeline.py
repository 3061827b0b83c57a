"""One plain function per job: find new files, ingest one file, update one deployment.

Flows (``flows/``) only call these in order; everything here runs and tests
without Prefect.  Nothing is dropped silently: every file ends archived or
quarantined with a reason, and every count lands in the run summary.
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from . import __version__
from .archive.catalog import Catalog, utc_now
from .archive.cf import build_cf_dataset
from .archive.ncio import read_attrs, read_dataset, write_dataset_atomic
from .archive.store import ArchivePaths, copy_atomic, write_text_atomic
from .config import load_workspace
from .config.layouts import LoadedLayouts
from .config.register import LoadedRegister
from .config.rules import RuleSet
from .convert.by_kind import physical_from_raw
from .ingest import FileRejected, IngestedFile, RawFile, discover_files, ingest_file
from .ingest.timebase import merge_records
from .qc import apply_rule_set, flag_counts


@dataclass
class Context:
    """Everything a run needs, loaded and validated once."""
    workspace_path: Path
    inbox: Path
    register: LoadedRegister
    layouts: LoadedLayouts
    rules: RuleSet
    paths: ArchivePaths

    @property
    def catalog(self) -> Catalog:
        return Catalog(self.paths.catalog)


def load_context(workspace_path: str | Path) -> Context:
    """Load and cross-check the workspace's configuration (ConfigError on any problem)."""
    ws = load_workspace(workspace_path)
    register, layouts, rules = ws.load()
    return Context(ws.path, ws.inbox, register, layouts, rules, ArchivePaths(ws.archive))


# --- discover -----------------------------------------------------------------

def find_new_files(ctx: Context) -> tuple[list[RawFile], dict]:
    """New raw files in the inbox (content not yet in the catalog)."""
    if not ctx.inbox.is_dir():
        from .errors import ConfigError
        raise ConfigError(f"{ctx.workspace_path}: key paths.inbox: folder {ctx.inbox} does not exist; "
                          "create it or correct the path")
    return discover_files(ctx.inbox, ctx.catalog.known_hashes())


# --- one file -------------------------------------------------------------------

@dataclass
class FileOutcome:
    raw: RawFile
    ingested: IngestedFile | None = None
    reason: str | None = None


def read_one_file(raw: RawFile, register: LoadedRegister, layouts: LoadedLayouts) -> FileOutcome:
    """Ingest one file; a rejected file comes back with its one-line reason (never raises)."""
    try:
        return FileOutcome(raw, ingested=ingest_file(raw, register, layouts))
    except FileRejected as err:
        return FileOutcome(raw, reason=str(err))


def quarantine_file(ctx: Context, outcome: FileOutcome) -> Path:
    """Copy a rejected file and its reason to quarantine and record it in the catalog."""
    raw = outcome.raw
    dest = ctx.paths.quarantine(raw.sha256, raw.name)
    copy_atomic(raw.path, dest)
    write_text_atomic(dest.with_name(dest.name + ".reason.txt"),
                      f"{outcome.reason}\nsha256: {raw.sha256}\noriginal path: {raw.path}\n")
    with ctx.catalog.transaction() as con:
        ctx.catalog.record_raw(con, sha256=raw.sha256, size=raw.size, original_name=raw.name,
                               original_path=str(raw.path), archived_path=str(dest), status="quarantined",
                               reason=outcome.reason)
    return dest


# --- one deployment -------------------------------------------------------------

@dataclass
class DeploymentResult:
    station: str
    deployment: str
    dataset: Path
    version: int
    samples: int
    flag_counts: dict
    counts: dict = field(default_factory=dict)


@dataclass
class Store:
    """The pre-QC level of one deployment: merged downloads, UTC, raw units."""
    deployment: str
    kind: str
    time: np.ndarray
    values: dict[str, np.ndarray]
    units: dict[str, str]
    conflict: dict[str, np.ndarray]
    source: np.ndarray
    sources: list[str]                 # SHA-256 of each raw file merged, in source-index order
    names: list[str]                   # their original names
    counts: dict[str, int]             # cumulative ingest counts (trimmed, repeats, conflicts)
    clock_drift_s: float = 0.0


def load_store(ctx: Context, deployment_id: str) -> Store | None:
    """The deployment's pre-QC store from the archive, or None if it has none yet."""
    dep = ctx.register.deployment_by_id(deployment_id)
    path = ctx.paths.ingested(dep.station, dep.id)
    if not path.exists():
        return None
    ds = read_dataset(path)
    units = json.loads(ds.attrs["units_json"])
    return Store(deployment=dep.id, kind=ds.attrs["instrument_kind"], time=ds["time"].values,
                 values={k: ds[k].values for k in units}, units=units,
                 conflict={k: ds[f"conflict_{k}"].values.astype(bool) for k in units},
                 source=ds["source_index"].values.astype(np.int16), sources=ds.attrs["source_sha256"].split(),
                 names=ds.attrs["source_names"].split(), counts=json.loads(ds.attrs["counts_json"]),
                 clock_drift_s=float(ds.attrs.get("clock_drift_s", 0.0)))


def _write_store(ctx: Context, station_id: str, store: Store) -> None:
    data = {k: ("time", v, {"units": store.units[k]}) for k, v in store.values.items()}
    data["source_index"] = ("time", store.source.astype(np.int16))
    for k, m in store.conflict.items():
        data[f"conflict_{k}"] = ("time", m.astype(np.int8))
    ds = xr.Dataset(data, coords={"time": store.time})
    ds.attrs = {"title": "qcpipe pre-QC level: merged downloads, UTC, raw units", "deployment_id": store.deployment,
                "instrument_kind": store.kind, "source_sha256": " ".join(store.sources),
                "source_names": " ".join(store.names), "units_json": json.dumps(store.units, sort_keys=True),
                "counts_json": json.dumps(store.counts, sort_keys=True), "clock_drift_s": store.clock_drift_s}
    enc = {"time": {"units": "seconds since 1970-01-01T00:00:00Z", "dtype": "float64"}}
    for k in ds.data_vars:
        enc[k] = {"zlib": True, "complevel": 4}
    write_dataset_atomic(ds, ctx.paths.ingested(station_id, store.deployment), enc)


def _conflict_csv(path: Path, rows: list[dict], names: list[str]) -> None:
    old = path.read_text(encoding="utf-8").splitlines()[1:] if path.exists() else []
    lines = list(old)
    for r in rows:
        s = io.StringIO()
        csv.writer(s, lineterminator="").writerow(
            [r["time"], r["variable"], r["kept"], names[r["kept_source"]], r["other"], names[r["other_source"]]])
        if s.getvalue() not in lines:
            lines.append(s.getvalue())
    header = "time_utc,variable,kept_value,kept_from,other_value,other_from\n"
    write_text_atomic(path, header + "".join(ln + "\n" for ln in lines))


_COUNT_KEYS = ("records", "pre_deployment", "post_recovery", "truncated_last_line")


def merge_new_files(ctx: Context, deployment_id: str, files: list[IngestedFile]) -> Store:
    """Merge newly read files into the deployment's pre-QC store and write it (atomically).

    Repeated identical records of overlapping downloads are dropped and
    counted; different values for one timestamp are kept (earlier download
    first), marked as conflicts and listed in ``conflicts/<deployment>.csv``.
    Re-merging a file already in the store changes nothing (idempotent).
    """
    dep = ctx.register.deployment_by_id(deployment_id)
    old = load_store(ctx, deployment_id)
    kind = files[0].kind
    units = dict(files[0].units)
    if old is not None and old.units != units:
        raise FileRejected(f"{files[0].raw.name}: units {units} differ from earlier files {old.units} of "
                           f"deployment {dep.id}; check the logger layout")
    sources = list(old.sources) if old else []
    names = list(old.names) if old else []
    counts = dict(old.counts) if old else {k: 0 for k in _COUNT_KEYS}
    times = [old.time] if old else []
    vals = {k: ([old.values[k]] if old else []) for k in units}
    prior = {k: ([old.conflict[k]] if old else []) for k in units}
    srcs = [old.source] if old else []
    drift = old.clock_drift_s if old else 0.0
    for f in sorted(files, key=lambda f: (f.time.min() if f.time.size else np.datetime64("NaT"), f.raw.name)):
        if f.units != units:
            raise FileRejected(f"{f.raw.name}: units {f.units} differ from earlier files {units} of deployment "
                               f"{dep.id}; check the logger layout")
        if f.raw.sha256 in sources:
            continue                       # already merged (a re-run after a crash)
        sources.append(f.raw.sha256)
        names.append(f.raw.name)
        times.append(f.time)
        for k in units:
            vals[k].append(f.values[k])
            prior[k].append(np.zeros(f.time.size, bool))
        srcs.append(np.full(f.time.size, len(sources) - 1, np.int16))
        for key in _COUNT_KEYS:
            counts[key] = counts.get(key, 0) + int(f.counts.get(key, 0))
        drift = f.clock_correction_s
    merged = merge_records(np.concatenate(times), {k: np.concatenate(v) for k, v in vals.items()},
                           np.concatenate(srcs), conflict={k: np.concatenate(v) for k, v in prior.items()})
    counts["duplicates"] = counts.get("duplicates", 0) + merged.duplicates
    counts["conflicts"] = int(max((np.count_nonzero(m) for m in merged.conflict.values()), default=0))
    store = Store(dep.id, kind, merged.time, merged.values, units, merged.conflict, merged.source, sources, names,
                  counts, drift)
    _write_store(ctx, dep.station, store)
    if merged.conflict_rows:
        _conflict_csv(ctx.paths.conflicts(dep.id), merged.conflict_rows, names)
    return store


def qc_deployment(ctx: Context, deployment_id: str, *, new_files: list[IngestedFile] = (),
                  store: Store | None = None, tide=None) -> DeploymentResult:
    """Convert, QC and write a new dataset version of one deployment from its pre-QC store.

    ``new_files`` are the raw files merged in this run: their catalog rows are
    committed together with the dataset's, after the dataset is written.
    ``tide`` is the station's tidal context (:mod:`qcpipe.tidal`), or None.
    """
    reg = ctx.register
    dep = reg.deployment_by_id(deployment_id)
    station = reg.station_by_id(dep.station)
    site = reg.site_by_id(station.site)
    store = store or load_store(ctx, deployment_id)
    counts = store.counts
    conv = physical_from_raw(store.kind, store.values, store.units, deployment=dep, station=station)
    conflicts = {k: store.conflict[k] for k in conv.variables if k in store.conflict}
    for derived, raw in (("wetness", "probe_reading"), ("water_level", "pressure"), ("ph", "ph_mv")):
        if raw in store.conflict and derived in conv.variables:
            conflicts[derived] = store.conflict[raw]
    qc_vars = {k: v for k, v in conv.variables.items() if k != "probe_reading"}
    flags = apply_rule_set(qc_vars, store.time, ctx.rules, station.id, conflicts)

    cat = ctx.catalog
    prev = cat.latest_dataset(dep.id)
    version = 1 if prev is None else prev["version"] + 1
    out_path = ctx.paths.dataset(station.id, dep.id, version)
    now = utc_now()
    history = (f"{now} qcpipe {__version__}: {len(store.sources)} raw file(s) merged ({counts.get('duplicates', 0)} "
               f"repeated records dropped, {counts.get('conflicts', 0)} conflicts kept and flagged), converted, QC "
               f"with rule set {ctx.rules.name} sha256:{ctx.rules.sha256[:12]}")
    if prev is not None and Path(prev["path"]).exists():
        history = f"{read_attrs(prev['path']).get('history', '')}\n{history}".strip()
    provenance = dict(rules_name=ctx.rules.name, rules_sha256=ctx.rules.sha256, register_sha256=reg.sha256,
                      raw_files=list(zip(store.names, store.sources)), software_version=__version__,
                      notes=conv.notes,
                      extra_attrs=dict(conv.attrs, clock_offset_declared=dep.clock_offset,
                                       clock_drift_at_check_s=round(float(store.clock_drift_s), 3),
                                       samples_removed_pre_deployment_total=counts.get("pre_deployment", 0),
                                       samples_removed_post_recovery_total=counts.get("post_recovery", 0),
                                       download_conflicts=counts.get("conflicts", 0)))
    if prev is not None:
        provenance["previous_version"] = Path(prev["path"]).stem
    ds, enc = build_cf_dataset(time=store.time, variables=conv.variables, flags=flags, immersion=conv.immersion,
                               station=station, site=site, deployment=dep, register_info=reg.info,
                               provenance=provenance, version=version, history=history, raw_units=store.units)
    write_dataset_atomic(ds, out_path, enc)
    fc = flag_counts(flags)
    with cat.transaction() as con:
        for f in new_files:
            dest = ctx.paths.raw_copy(station.id, dep.id, f.raw.sha256, f.raw.name)
            if not dest.exists():
                copy_atomic(f.raw.path, dest)
            cat.record_raw(con, sha256=f.raw.sha256, size=f.raw.size, original_name=f.raw.name,
                           original_path=str(f.raw.path), archived_path=str(dest), station=station.id,
                           deployment=dep.id, layout=f.layout,
                           time_start=str(f.time.min()) if f.time.size else None,
                           time_end=str(f.time.max()) if f.time.size else None, status="archived", reason=None)
        cat.record_dataset(con, path=str(out_path), station=station.id, deployment=dep.id, version=version,
                           rules_name=ctx.rules.name, rules_sha256=ctx.rules.sha256, register_sha256=reg.sha256,
                           software_version=__version__, created=now, samples=int(store.time.size),
                           flag_counts=fc, raw_sha256=store.sources)
    run_counts = {k: sum(int(f.counts.get(k, 0)) for f in new_files) for k in _COUNT_KEYS}
    run_counts.update(duplicates=counts.get("duplicates", 0), conflicts=counts.get("conflicts", 0))
    return DeploymentResult(station.id, dep.id, out_path, version, int(store.time.size), fc, run_counts)


def update_deployment(ctx: Context, deployment_id: str, files: list[IngestedFile]) -> DeploymentResult:
    """Merge new files into the deployment's store, then QC it and write a new version."""
    store = merge_new_files(ctx, deployment_id, files)
    return qc_deployment(ctx, deployment_id, new_files=files, store=store)


def update_station(ctx: Context, station_id: str, files: list[IngestedFile]) -> list[DeploymentResult]:
    """Update every deployment of one station that received new files."""
    by_dep: dict[str, list[IngestedFile]] = {}
    for f in files:
        by_dep.setdefault(f.deployment, []).append(f)
    return [update_deployment(ctx, dep_id, fs) for dep_id, fs in sorted(by_dep.items())]


# --- summary ---------------------------------------------------------------------

FLAG_WORDS = {"1": "pass", "2": "not evaluated", "3": "suspect", "4": "fail", "9": "missing"}


@dataclass
class RunSummary:
    files_seen: int = 0
    files_known: int = 0
    repeated_in_inbox: list = field(default_factory=list)
    ingested: int = 0
    quarantined: list = field(default_factory=list)      # (name, reason)
    results: list = field(default_factory=list)          # DeploymentResult
    archive: str = ""

    @property
    def nothing_new(self) -> bool:
        return self.ingested == 0 and not self.quarantined

    def totals(self) -> dict[str, int]:
        tot = {k: 0 for k in FLAG_WORDS}
        for r in self.results:
            for per in r.flag_counts.values():
                for k, v in per.items():
                    tot[k] = tot.get(k, 0) + v
        return tot

    def as_counts(self) -> dict:
        return {"files_seen": self.files_seen, "files_known": self.files_known, "ingested": self.ingested,
                "quarantined": len(self.quarantined), "repeated_in_inbox": len(self.repeated_in_inbox),
                "datasets_written": len(self.results), "samples": sum(r.samples for r in self.results),
                "flags": self.totals()}

    def lines(self) -> list[str]:
        if self.nothing_new:
            return [f"nothing new: {self.files_seen} file(s) in the inbox, all already in the archive {self.archive}"]
        out = [f"files: {self.files_seen} in inbox, {self.ingested} ingested, {len(self.quarantined)} quarantined, "
               f"{self.files_known} already archived, {len(self.repeated_in_inbox)} repeated copies skipped"]
        for name, reason in self.quarantined:
            out.append(f"  quarantined {name}: {reason}")
        for rep in self.repeated_in_inbox:
            out.append(f"  skipped repeated copy {rep}")
        samples = sum(r.samples for r in self.results)
        dup = sum(r.counts.get("duplicates", 0) for r in self.results)
        con = sum(r.counts.get("conflicts", 0) for r in self.results)
        pre = sum(r.counts.get("pre_deployment", 0) for r in self.results)
        post = sum(r.counts.get("post_recovery", 0) for r in self.results)
        out.append(f"samples: {samples} in {len(self.results)} dataset(s); {dup} repeated records from overlapping "
                   f"downloads dropped, {con} conflicting timestamps kept and flagged suspect; "
                   f"{pre} pre-deployment and {post} post-recovery samples trimmed")
        tot = self.totals()
        out.append("flags (aggregate, all variables): " +
                   ", ".join(f"{FLAG_WORDS[k]} {tot.get(k, 0)}" for k in FLAG_WORDS))
        for r in self.results:
            parts = "; ".join(f"{var}: " + " ".join(f"{FLAG_WORDS[k][:4]}={v}" for k, v in sorted(per.items()))
                              for var, per in r.flag_counts.items())
            out.append(f"  {r.station}/{r.deployment} v{r.version:03d}: {parts}")
        out.append(f"outputs: {self.archive}/datasets (catalog {self.archive}/catalog.sqlite)")
        return out


def group_by_station(files: list[IngestedFile]) -> dict[str, list[IngestedFile]]:
    """Ingested files grouped by station id (sorted)."""
    out: dict[str, list[IngestedFile]] = {}
    for f in files:
        out.setdefault(f.station, []).append(f)
    return dict(sorted(out.items()))
