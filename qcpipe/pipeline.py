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
from .archive.cf import add_air_pressure, build_cf_dataset
from .archive.ncio import read_attrs, read_dataset, write_dataset_atomic
from .archive.store import ArchivePaths
from .files import copy_atomic, write_text_atomic
from .config import load_workspace
from .config.annotations import Annotations
from .config.layouts import LoadedLayouts
from .config.register import LoadedRegister
from .config.rules import RuleSet
from .checks import barometer_fallback_flags
from .convert.by_kind import AIR_FROM_CONSTANT, BarometerSeries, physical_from_raw
from . import lineage, progress
from .ingest import FileRejected, IngestedFile, RawFile, discover_files, ingest_file
from .files import sha256_of_file
from .ingest.timebase import merge_records
from .qc import apply_rule_set, flag_counts
from .archive import products as derived
from .tidal import SiteTide, analyse_probe, state_from_level
from .config.constituents import load_constituents
from .tide.exposure import immersion_at


@dataclass
class Context:
    """Everything a run needs, loaded and validated once."""
    workspace_path: Path
    inbox: Path
    register: LoadedRegister
    layouts: LoadedLayouts
    rules: RuleSet
    paths: ArchivePaths
    annotations: Annotations = field(default_factory=lambda: Annotations([], None))
    keep_versions: int = 0

    @property
    def catalog(self) -> Catalog:
        return Catalog(self.paths.catalog)


def load_context(workspace_path: str | Path) -> Context:
    """Load and cross-check the workspace's configuration (ConfigError on any problem)."""
    ws = load_workspace(workspace_path)
    register, layouts, rules = ws.load()
    return Context(ws.path, ws.inbox, register, layouts, rules, ArchivePaths(ws.archive),
                   ws.load_annotations(register), ws.keep_versions)


# --- discover -----------------------------------------------------------------

def find_new_files(ctx: Context) -> tuple[list[RawFile], dict]:
    """New raw files in the inbox (content not yet in the catalog)."""
    if not ctx.inbox.is_dir():
        from .errors import ConfigError
        raise ConfigError(f"{ctx.workspace_path}: key paths.inbox: folder {ctx.inbox} does not exist; "
                          "create it or correct the path")
    new, counts = discover_files(ctx.inbox, ctx.catalog.known_hashes())
    progress.expect("read", len(new))
    return new, counts


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
    finally:
        progress.step("read", raw.name)


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
    notices: list = field(default_factory=list)    # what needs a person's attention
    products: list = field(default_factory=list)   # derived files written beside the dataset
    air_pressure: dict = field(default_factory=dict)  # level loggers: where the subtracted air pressure came from


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
    ingest_key: str = ""               # lineage.ingest_key when the store was built
    file_provenance: dict = field(default_factory=dict)   # raw file name -> how it was read (header values...)


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
                 clock_drift_s=float(ds.attrs.get("clock_drift_s", 0.0)), ingest_key=ds.attrs.get("ingest_key", ""),
                 file_provenance=json.loads(ds.attrs.get("file_provenance_json", "{}")))


def _write_store(ctx: Context, station_id: str, store: Store) -> None:
    data = {k: ("time", v, {"units": store.units[k]}) for k, v in store.values.items()}
    data["source_index"] = ("time", store.source.astype(np.int16))
    for k, m in store.conflict.items():
        data[f"conflict_{k}"] = ("time", m.astype(np.int8))
    ds = xr.Dataset(data, coords={"time": store.time})
    ds.attrs = {"title": "qcpipe pre-QC level: merged downloads, UTC, raw units", "deployment_id": store.deployment,
                "instrument_kind": store.kind, "source_sha256": " ".join(store.sources),
                "source_names": " ".join(store.names), "units_json": json.dumps(store.units, sort_keys=True),
                "counts_json": json.dumps(store.counts, sort_keys=True), "clock_drift_s": store.clock_drift_s,
                "ingest_key": store.ingest_key,
                "file_provenance_json": json.dumps(store.file_provenance, sort_keys=True)}
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


def merge_new_files(ctx: Context, deployment_id: str, files: list[IngestedFile], *, fresh: bool = False) -> Store:
    """Merge newly read files into the deployment's pre-QC store and write it (atomically).

    Repeated identical records of overlapping downloads are dropped and
    counted; different values for one timestamp are kept (earlier download
    first), marked as conflicts and listed in ``conflicts/<deployment>.csv``.
    Re-merging a file already in the store changes nothing (idempotent).
    """
    dep = ctx.register.deployment_by_id(deployment_id)
    old = None if fresh else load_store(ctx, deployment_id)
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
    file_provenance = dict(old.file_provenance) if old else {}
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
        file_provenance[f.raw.name] = f.provenance
    merged = merge_records(np.concatenate(times), {k: np.concatenate(v) for k, v in vals.items()},
                           np.concatenate(srcs), conflict={k: np.concatenate(v) for k, v in prior.items()})
    counts["duplicates"] = counts.get("duplicates", 0) + merged.duplicates
    counts["conflicts"] = int(max((np.count_nonzero(m) for m in merged.conflict.values()), default=0))
    store = Store(dep.id, kind, merged.time, merged.values, units, merged.conflict, merged.source, sources, names,
                  counts, drift, lineage.ingest_key(ctx, dep.id), file_provenance)
    _write_store(ctx, dep.station, store)
    if merged.conflict_rows:
        _conflict_csv(ctx.paths.conflicts(dep.id), merged.conflict_rows, names)
    return store


def qc_deployment(ctx: Context, deployment_id: str, *, new_files: list[IngestedFile] = (),
                  store: Store | None = None, tide=None, run_id: int | None = None) -> DeploymentResult:
    """Convert, QC and write a new dataset version of one deployment from its pre-QC store.

    ``new_files`` are the raw files merged in this run: their catalog rows are
    committed together with the dataset's, after the dataset is written.
    ``tide`` is the station's tidal context (:mod:`qcpipe.tidal`), or None.
    ``run_id``: the catalog run doing this; if that run already committed a
    version of the deployment (a task tried again after a passing I/O error),
    that version is returned and nothing is written twice.
    """
    reg = ctx.register
    dep = reg.deployment_by_id(deployment_id)
    done = _committed_by_run(ctx, dep.id, run_id, new_files)
    if done is not None:
        return done
    station = reg.station_by_id(dep.station)
    site = reg.site_by_id(station.site)
    store = store or load_store(ctx, deployment_id)
    counts = store.counts
    barometer = site_barometer(ctx, dep.id) if store.kind == "pressure" else None
    conv = physical_from_raw(store.kind, store.values, store.units, deployment=dep, station=station,
                             times=store.time, barometer=barometer)
    conflicts = {k: store.conflict[k] for k in conv.variables if k in store.conflict}
    for var_out, raw in (("wetness", "probe_reading"), ("water_level", "pressure"), ("ph", "ph_mv")):
        if raw in store.conflict and var_out in conv.variables:
            conflicts[var_out] = store.conflict[raw]
    qc_vars = {k: v for k, v in conv.variables.items() if k != "probe_reading"}
    label = f"{station.id}/{dep.id}"
    transitions = None
    notices: list[str] = [n for f in new_files for n in f.notes]
    tide_attrs: dict = {}
    qc_args: dict = {}
    if store.kind == "immersion_probe":
        analysis = analyse_probe(store.time, store.values["probe_reading"], probe_reference=dep.probe_reference,
                                 elevation_m=station.elevation_m, settings=ctx.rules.immersion,
                                 timing_rules=ctx.rules.tide_timing, tide=tide, label=label)
        conv.variables["wetness"] = qc_vars["wetness"] = analysis.wetness
        conv.immersion = analysis.state
        notices += analysis.notices
        tide_attrs.update(analysis.attrs)
        ref_level, ref_source = tide.reference(store.time) if tide is not None else (None, "none")
        tide_attrs["immersion_reference_level"] = ref_source
        transitions = analysis
        qc_args = dict(immersion=analysis.state, reference_level=ref_level, elevation_m=station.elevation_m,
                       readings=store.values["probe_reading"], extra={"wetness": {"immersion_quality": analysis.quality}})
    elif store.kind == "barometer":
        tide_attrs["immersion_source"] = "none (a barometer measures air pressure; immersion does not apply)"
    else:
        state, source = station_immersion(ctx, station, store.time, tide)
        conv.immersion = state
        tide_attrs["immersion_source"] = source
        qc_args = dict(immersion=state)
        if store.kind == "pressure" and tide is not None:
            qc_args["predicted_level"] = tide.predicted(store.time)
    if conv.barometer_used:
        qc_args["extra"] = {"water_level": {"barometer_fallback": barometer_fallback_flags(
            conv.variables["water_level"], conv.air_pressure_source == AIR_FROM_CONSTANT)}}
    notes_manual: dict[str, list[str]] = {}
    manual: dict[str, list] = {}
    for a in ctx.annotations.for_station(station.id):
        for var in qc_vars:
            if a.applies_to(station.id, var):
                d = a.as_dict()
                manual.setdefault(var, []).append((np.datetime64(d["start"].rstrip("Z"), "ns"),
                                                   np.datetime64(d["end"].rstrip("Z"), "ns"), a.flag))
                notes_manual.setdefault(var, []).append(
                    f"{d['start']} to {d['end']}: flag {a.flag} by {a.reviewer} on {d['date']}: {a.reason}")
    flags = apply_rule_set(qc_vars, store.time, ctx.rules, station.id, conflicts, manual=manual, **qc_args)
    if "tide_residual" in flags.get("water_level", {}):
        res = qc_args["predicted_level"]
        tide_attrs["tide_residual_rms_m"] = round(float(np.sqrt(np.nanmean((conv.variables["water_level"] - res) ** 2))), 4)
    conv.attrs.update(tide_attrs)

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
                      notes=conv.notes, meta=conv.meta,
                      extra_attrs=dict(conv.attrs, clock_offset_declared=dep.clock_offset,
                                       clock_drift_at_check_s=round(float(store.clock_drift_s), 3),
                                       samples_removed_pre_deployment_total=counts.get("pre_deployment", 0),
                                       samples_removed_post_recovery_total=counts.get("post_recovery", 0),
                                       download_conflicts=counts.get("conflicts", 0),
                                       raw_file_reading=json.dumps(store.file_provenance, sort_keys=True)))
    inputs = lineage.qc_inputs(ctx, dep.id)
    key = lineage.qc_key(ctx, dep.id)
    provenance["extra_attrs"]["qc_inputs_sha256"] = key
    if prev is not None:
        provenance["previous_version"] = Path(prev["path"]).stem
    ds, enc = build_cf_dataset(time=store.time, variables=conv.variables, flags=flags, immersion=conv.immersion,
                               station=station, site=site, deployment=dep, register_info=reg.info,
                               provenance=provenance, version=version, history=history, raw_units=store.units)
    if transitions is not None and transitions.transition_time is not None:
        _add_transitions(ds, enc, transitions)
    if conv.air_pressure is not None:
        add_air_pressure(ds, enc, conv.air_pressure, conv.air_pressure_source)
    for var, lines in notes_manual.items():
        ds[f"{var}_qc_manual"].attrs["comment"] = "review annotations: " + " | ".join(lines)
    first = cat.dataset_versions(dep.id)
    if first and Path(first[0]["path"]).exists():
        ds.attrs["date_created"] = read_attrs(first[0]["path"]).get("date_created", ds.attrs["date_created"])
    if qc_args.get("predicted_level") is not None:
        ds["water_level_predicted"] = xr.DataArray(qc_args["predicted_level"], dims=("time",), attrs=dict(
            long_name=f"harmonic prediction of the water level above {site.vertical_datum}", units="m",
            coordinates=ds["water_level"].attrs["coordinates"], comment="for the tide residual check; "
            "not for navigation or safety planning"))
        enc["water_level_predicted"] = dict(enc["water_level"])
    write_dataset_atomic(ds, out_path, enc)
    products = derived.write_products(ctx, station, site, dep, store.kind, store.time, conv, flags, version,
                                      tide=tide) if store.kind in ("pressure",) else []
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
                           flag_counts=fc, raw_sha256=store.sources, qc_key=key, qc_inputs=inputs,
                           sha256=sha256_of_file(out_path), run_id=run_id)
    prune_versions(ctx, dep.id)
    run_counts = _run_counts(new_files, counts)
    progress.step("qc", f"{station.id}/{dep.id} v{version:03d}")
    return DeploymentResult(station.id, dep.id, out_path, version, int(store.time.size), fc, run_counts,
                            notices, products, air_pressure_summary(conv.attrs))


def _run_counts(new_files, store_counts: dict) -> dict:
    """What this run's new files of a deployment add to the run's counts."""
    run_counts = {k: sum(int(f.counts.get(k, 0)) for f in new_files) for k in _COUNT_KEYS}
    if new_files:      # repeats and conflicts are known per store, so they are reported with new data only
        run_counts.update(duplicates=store_counts.get("duplicates", 0), conflicts=store_counts.get("conflicts", 0))
    return run_counts


def _committed_by_run(ctx: Context, deployment_id: str, run_id: int | None,
                      new_files) -> DeploymentResult | None:
    """The version ``run_id`` already committed for the deployment, as a result; None if it has not."""
    if run_id is None:
        return None
    row = ctx.catalog.latest_dataset(deployment_id)
    if row is None or row.get("run_id") != run_id:
        return None
    store_counts = load_store(ctx, deployment_id).counts if new_files else {}
    return DeploymentResult(row["station"], deployment_id, Path(row["path"]), row["version"], row["samples"],
                            row["flag_counts"], _run_counts(new_files, store_counts),
                            [f"{row['station']}/{deployment_id}: version {row['version']} was written by an "
                             "earlier attempt of this run (the task was tried again after an I/O error)"])


def prune_versions(ctx: Context, deployment_id: str) -> list[Path]:
    """Delete dataset versions beyond the workspace's ``keep_versions`` (0 keeps all); the catalog keeps their rows."""
    if ctx.keep_versions <= 0:
        return []
    cat = ctx.catalog
    versions = [v for v in cat.dataset_versions(deployment_id) if not v["pruned"]]
    removed = []
    for v in versions[:-ctx.keep_versions]:
        p = Path(v["path"])
        if p.exists():
            p.unlink()
        cat.mark_pruned(v["path"])
        removed.append(p)
    return removed


def _add_transitions(ds: xr.Dataset, enc: dict, a) -> None:
    """Observed wet/dry transitions and their offsets from the prediction, on their own dimension."""
    secs = a.transition_time.astype("datetime64[ns]").astype(np.int64) / 1e9
    ds["transition_time"] = xr.DataArray(secs, dims=("transition",), attrs=dict(
        long_name="time of an observed wet/dry transition of the probe (UTC)",
        units="seconds since 1970-01-01T00:00:00Z", calendar="standard"))
    ds["transition_kind"] = xr.DataArray(a.transition_kind, dims=("transition",), attrs=dict(
        long_name="kind of transition", flag_values=np.array([0, 1], np.int8), flag_meanings="draining flooding"))
    ds["transition_offset"] = xr.DataArray(a.transition_offset_s, dims=("transition",), attrs=dict(
        long_name="observed minus predicted transition time (positive: logger clock ahead)", units="s"))
    enc.update(transition_time={"_FillValue": None}, transition_kind={"_FillValue": None},
               transition_offset={"_FillValue": np.float64(np.nan)})


def update_deployment(ctx: Context, deployment_id: str, files: list[IngestedFile], tide=None) -> DeploymentResult:
    """Merge new files into the deployment's store, then QC it and write a new version."""
    store = merge_new_files(ctx, deployment_id, files)
    return qc_deployment(ctx, deployment_id, new_files=files, store=store, tide=tide)


# --- what changed since the last run ---------------------------------------------

def changed_ingest(ctx: Context) -> list[str]:
    """Deployments whose pre-QC store was built with another register entry or layout."""
    out = []
    for d in ctx.register.deployment:
        path = ctx.paths.ingested(d.station, d.id)
        if path.exists() and read_attrs(path).get("ingest_key", "") != lineage.ingest_key(ctx, d.id):
            out.append(d.id)
    return out


def rebuild_store(ctx: Context, deployment_id: str) -> tuple[Store | None, list[str]]:
    """Read a deployment's archived raw copies again (after a register or layout change).

    Each copy is read under its original name (layouts match on it) from a
    temporary folder; the archive's copies are only read.  Returns the new store
    and notices (files that now fall outside the deployment).
    """
    import shutil
    import tempfile

    rows = ctx.catalog.raw_files(deployment=deployment_id, status="archived")
    notices, files = [], []
    with tempfile.TemporaryDirectory(prefix="qcpipe-reread-") as tmp:
        for r in rows:
            src = Path(r["archived_path"])
            dest = Path(tmp) / r["sha256"][:12] / r["original_name"]
            dest.parent.mkdir()
            shutil.copyfile(src, dest)
            outcome = read_one_file(RawFile(dest, r["sha256"], r["size"]), ctx.register, ctx.layouts)
            if outcome.ingested is None or outcome.ingested.deployment != deployment_id:
                notices.append(f"{deployment_id}: archived file {r['original_name']} no longer reads into this "
                               f"deployment ({outcome.reason or 'matches ' + outcome.ingested.deployment})")
                continue
            files.append(outcome.ingested)
        if not files:
            return None, notices
        return merge_new_files(ctx, deployment_id, files, fresh=True), notices


def check_deployment_ids(ctx: Context, ids) -> None:
    """ConfigError naming the first id that is not a deployment with stored data."""
    from .errors import ConfigError

    known = {d.id: d for d in ctx.register.deployment}
    for d in ids:
        if d not in known:
            raise ConfigError(f"{ctx.register.path}: no deployment {d!r}; see 'qcpipe holdings' for the ids")
        if not ctx.paths.ingested(known[d].station, d).exists():
            raise ConfigError(f"deployment {d!r} has no stored data in {ctx.paths.root}; run 'qcpipe process' first")


def stale_deployments(ctx: Context) -> dict[str, list[str]]:
    """Deployments with a store whose latest dataset came from other inputs: {id: differences}."""
    out: dict[str, list[str]] = {}
    cat = ctx.catalog
    for d in ctx.register.deployment:
        if not ctx.paths.ingested(d.station, d.id).exists():
            continue
        latest = cat.latest_dataset(d.id)
        if latest is None:
            out[d.id] = ["no dataset yet"]
        elif latest.get("qc_key") != lineage.qc_key(ctx, d.id):
            out[d.id] = lineage.differences(latest.get("qc_inputs") or {}, lineage.qc_inputs(ctx, d.id)) or \
                ["inputs changed"]
    return out


def air_pressure_summary(attrs: dict) -> dict:
    """Where a level dataset's air pressure came from, from its attributes ({} for other kinds)."""
    if "water_level_air_pressure_source" not in attrs:
        return {}
    out = {"source": str(attrs["water_level_air_pressure_source"]), "sensor": str(attrs.get("pressure_sensor", ""))}
    if "water_level_air_pressure_from_barometer" in attrs:
        out.update(barometer=str(attrs["water_level_air_pressure_barometer"]),
                   from_barometer=int(attrs["water_level_air_pressure_from_barometer"]),
                   from_constant=int(attrs["water_level_air_pressure_from_constant"]),
                   constant_hpa=float(attrs["water_level_air_pressure_pa"]) / 100.0)
    return out


# --- the barometer of a site ---------------------------------------------------------

def site_barometer(ctx: Context, deployment_id: str) -> BarometerSeries | None:
    """The valid air pressure a level logger subtracts: its site's barometer datasets, merged.

    The barometer deployments are :func:`lineage.barometers_for` (None when
    there are none: the configured constant is used, unflagged); each from its
    latest dataset version, without samples whose aggregate flag is fail or
    missing.  An empty series when none has a dataset yet (every level then
    falls back to the constant and is flagged).
    """
    ids = lineage.barometers_for(ctx.register, deployment_id)
    if not ids:
        return None
    found = _latest_valid(ctx, ids, "air_pressure")
    if found is None:
        return BarometerSeries(np.array([], "datetime64[ns]"), np.array([], np.float64), "")
    t, v, rows = found
    return BarometerSeries(t, v, ", ".join(f"{d} (v{version:03d})" for d, version in rows))


def _latest_valid(ctx: Context, deployment_ids, variable: str):
    """One variable of the deployments' latest datasets, merged in time order, without fail or missing samples.

    Returns (times, values, [(deployment, version), ...]) or None when none has a dataset.
    """
    times, values, rows = [], [], []
    for d in deployment_ids:
        latest = ctx.catalog.latest_dataset(d)
        if latest is None or not Path(latest["path"]).exists():
            continue
        ds = read_dataset(latest["path"])
        keep = ~np.isin(ds[f"{variable}_qc"].values, (4, 9))
        times.append(ds["time"].values[keep])
        values.append(ds[variable].values[keep])
        rows.append((d, latest["version"]))
    if not times:
        return None
    t = np.concatenate(times)
    order = np.argsort(t, kind="stable")
    return t[order], np.concatenate(values)[order], rows


# --- the tide around a station ----------------------------------------------------

def _kind(ctx: Context, deployment_id: str) -> str:
    dep = ctx.register.deployment_by_id(deployment_id)
    return ctx.register.instrument_by_serial(dep.instrument).kind


def site_tide(ctx: Context, site_id: str) -> SiteTide:
    """The site's harmonic constants (if the register names a file) and its observed gauge.

    The gauge is every pressure-logger deployment at the site, from its latest
    dataset version, without samples whose aggregate flag is fail or missing.
    """
    path = ctx.register.constituents_path(site_id)
    constants = load_constituents(path) if path is not None else None
    gauges = [d.id for d in ctx.register.deployment
              if ctx.register.station_by_id(d.station).site == site_id and _kind(ctx, d.id) == "pressure"]
    found = _latest_valid(ctx, gauges, "water_level")
    if found is None:
        return SiteTide(site_id, constants)
    t, levels, rows = found
    return SiteTide(site_id, constants, t, levels, ", ".join(d for d, _ in rows))


def station_immersion(ctx: Context, station, times, tide: SiteTide | None) -> tuple[np.ndarray, str]:
    """Immersion state of a station at ``times``: from its immersion probe, else from the water level.

    The probe's latest dataset gives the state of the nearest preceding probe
    sample (within three probe sampling intervals, at most 1 h); without a
    probe the reference level against the station elevation decides (unknown
    within 0.1 m of it); without either, unknown.
    """
    t = np.asarray(times, dtype="datetime64[ns]")
    for dep in ctx.register.deployment:
        if dep.station != station.id or _kind(ctx, dep.id) != "immersion_probe":
            continue
        latest = ctx.catalog.latest_dataset(dep.id)
        if latest is None or not Path(latest["path"]).exists():
            continue
        ds = read_dataset(latest["path"])
        pt = ds["time"].values
        if pt.size < 2 or t.size == 0 or pt[-1] < t[0] or pt[0] > t[-1]:
            continue
        step = float(np.median(np.diff(pt)).astype("timedelta64[ns]").astype(np.int64)) / 1e9
        state = immersion_at(t, pt, ds["immersion"].values, max_gap_s=min(3 * step, 3600.0))
        return state, f"immersion probe deployment {dep.id} (version {latest['version']})"
    if tide is not None:
        level, source = tide.reference(t)
        if level is not None:
            return (state_from_level(t, level, elevation_m=station.elevation_m, margin_m=0.1),
                    f"water level ({source}) against the station elevation, unknown within 0.1 m")
    return np.full(t.size, 2, np.int8), "unknown (no immersion probe and no water level at this site)"


# --- planning a run ----------------------------------------------------------------

@dataclass
class QcPlan:
    """Deployments to (re-)QC, in dependency order: barometers, gauges, then stations (probe first)."""
    gauges: list[str]
    stations: dict[str, list[str]]
    sites: list[str]
    barometers: list[str] = field(default_factory=list)


def plan_qc(ctx: Context, touched: set[str]) -> QcPlan:
    """Which deployments a run must QC, given those that received new data.

    A new barometer record changes the air pressure of the level loggers at its
    site; a new gauge record changes the reference level of every probe at its
    site; a new probe record changes the immersion state of every instrument at
    its station: their datasets are re-QC'd from the stored pre-QC level.
    """
    reg = ctx.register
    have_store = {d.id for d in reg.deployment if ctx.paths.ingested(d.station, d.id).exists()} | set(touched)
    todo = set(touched)
    site_of = {d.id: reg.station_by_id(d.station).site for d in reg.deployment}
    barometers = sorted(d for d in todo if _kind(ctx, d) == "barometer")
    todo |= {d for d in have_store if set(lineage.barometers_for(reg, d)) & set(barometers)}
    new_gauge_sites = {site_of[d] for d in todo if _kind(ctx, d) == "pressure"}
    todo |= {d for d in have_store if _kind(ctx, d) == "immersion_probe" and site_of[d] in new_gauge_sites}
    new_probe_stations = {reg.deployment_by_id(d).station for d in todo if _kind(ctx, d) == "immersion_probe"}
    todo |= {d for d in have_store if reg.deployment_by_id(d).station in new_probe_stations}
    order = {"pressure": 0, "immersion_probe": 1}
    gauges = sorted(d for d in todo if _kind(ctx, d) == "pressure")
    stations: dict[str, list[str]] = {}
    for d in sorted(todo - set(gauges) - set(barometers), key=lambda d: (order.get(_kind(ctx, d), 2), d)):
        stations.setdefault(reg.deployment_by_id(d).station, []).append(d)
    progress.expect("qc", len(todo))
    return QcPlan(gauges, dict(sorted(stations.items())), sorted({site_of[d] for d in todo}), barometers)


def qc_station(ctx: Context, station_id: str, deployment_ids: list[str], new_files: dict[str, list],
               tide: SiteTide | None, run_id: int | None = None) -> list[DeploymentResult]:
    """QC the given deployments of one station in order (probe first), then its exposure products."""
    results = [qc_deployment(ctx, d, new_files=new_files.get(d, []), tide=tide, run_id=run_id)
               for d in deployment_ids]
    station = ctx.register.station_by_id(station_id)
    written = derived.write_exposure_products(ctx, station)
    if written and results:
        results[0].products.extend(written)
    return results


def group_by_deployment(files: list[IngestedFile]) -> dict[str, list[IngestedFile]]:
    """Ingested files grouped by deployment id (sorted)."""
    out: dict[str, list[IngestedFile]] = {}
    for f in files:
        out.setdefault(f.deployment, []).append(f)
    return dict(sorted(out.items()))


# --- summary ---------------------------------------------------------------------

def air_pressure_words(a: dict) -> str:
    """One line on a level dataset's air pressure (from :func:`air_pressure_summary`)."""
    if "from_barometer" not in a:
        return a["source"]
    n = a["from_barometer"] + a["from_constant"]
    return (f"barometer {a['barometer'] or '(no data yet)'} at {a['from_barometer']} of {n} samples; configured "
            f"constant {a['constant_hpa']:.2f} hPa at {a['from_constant']} (flagged suspect by barometer_fallback)")

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

    reruns: dict = field(default_factory=dict)          # deployment -> why it was re-QC'd
    notices: list = field(default_factory=list)          # run-level notices (not of one deployment)
    report: str = ""                                     # path of the run's HTML report

    @property
    def nothing_new(self) -> bool:
        return self.ingested == 0 and not self.quarantined and not self.results

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
        for dep, why in self.reruns.items():
            out.append(f"  re-QC {dep}: " + "; ".join(why[:4]) + (f"; and {len(why) - 4} more" if len(why) > 4 else ""))
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
        baro = [r for r in self.results if r.air_pressure]
        if baro:
            out.append("barometric correction (air pressure subtracted for water level):")
            out += [f"  {r.station}/{r.deployment}: {air_pressure_words(r.air_pressure)}" for r in baro]
        notices = list(self.notices) + [n for r in self.results for n in r.notices]
        if notices:
            out.append("needs attention:")
            out += [f"  {n}" for n in notices]
        n_products = sum(len(r.products) for r in self.results)
        out.append(f"outputs: {self.archive}/datasets, {n_products} derived products in {self.archive}/derived "
                   f"(catalog {self.archive}/catalog.sqlite)")
        return out

