"""The pre-QC store of a deployment: merged downloads, UTC, raw units (``ingested/``)."""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import lineage
from ..archive.ncio import read_dataset, write_columns_atomic
from ..arrays import joined
from ..files import write_text_atomic
from ..ingest import FileRejected, IngestedFile, RawFile
from ..ingest.timebase import merge_records
from ..report.model import Notice
from ..report.words import conflicts_dropped_text
from .context import Context
from .inbox import read_one_file


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


def write_store(ctx: Context, station_id: str, store: Store) -> None:
    """The store to ``ingested/`` (atomically), slice by slice: a big deployment's store is written in the
    memory of one slice besides its arrays."""
    columns = {k: (np.asarray(v, dtype=np.float64), {"units": store.units[k]}) for k, v in store.values.items()}
    columns["source_index"] = (store.source.astype(np.int16, copy=False), {})
    for k, m in store.conflict.items():
        columns[f"conflict_{k}"] = (m.view(np.int8) if m.dtype == bool else m.astype(np.int8), {})
    attrs = {"title": "qcpipe pre-QC level: merged downloads, UTC, raw units", "deployment_id": store.deployment,
             "instrument_kind": store.kind, "source_sha256": " ".join(store.sources),
             "source_names": " ".join(store.names), "units_json": json.dumps(store.units, sort_keys=True),
             "counts_json": json.dumps(store.counts, sort_keys=True), "clock_drift_s": store.clock_drift_s,
             "ingest_key": store.ingest_key,
             "file_provenance_json": json.dumps(store.file_provenance, sort_keys=True)}
    write_columns_atomic(ctx.paths.ingested(station_id, store.deployment), store.time, columns, attrs)


def _conflict_csv(path: Path, rows: list[dict], names: list[str], *, fresh: bool = False) -> None:
    """Add the merge's conflict rows to the deployment's conflicts file (``fresh``: the file is written anew,
    for a store built again from all its raw files)."""
    old = path.read_text(encoding="utf-8").splitlines()[1:] if path.exists() and not fresh else []
    lines = list(old)
    for r in rows:
        s = io.StringIO()
        csv.writer(s, lineterminator="").writerow(
            [r["time"], r["variable"], r["kept"], names[r["kept_source"]], r["other"], names[r["other_source"]]])
        if s.getvalue() not in lines:
            lines.append(s.getvalue())
    header = "time_utc,variable,kept_value,kept_from,other_value,other_from\n"
    write_text_atomic(path, header + "".join(ln + "\n" for ln in lines))


#: ingest counts summed over a deployment's raw files: records read, samples trimmed outside the deployment
#: window, truncated last lines not read, records out of time order (sorted)
COUNT_KEYS = ("records", "pre_deployment", "post_recovery", "truncated_last_line", "out_of_order")


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
    counts = dict(old.counts) if old else {k: 0 for k in COUNT_KEYS}
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
        for key in COUNT_KEYS:
            counts[key] = counts.get(key, 0) + int(f.counts.get(key, 0))
        drift = f.clock_correction_s
        file_provenance[f.raw.name] = f.provenance
    merged = merge_records(joined(times), {k: joined(v) for k, v in vals.items()}, joined(srcs),
                           conflict={k: joined(v) for k, v in prior.items()})
    counts["duplicates"] = counts.get("duplicates", 0) + merged.duplicates
    counts["conflicts"] = conflicting_timestamps(merged.conflict)
    store = Store(dep.id, kind, merged.time, merged.values, units, merged.conflict, merged.source, sources, names,
                  counts, drift, lineage.ingest_key(ctx, dep.id), file_provenance)
    write_store(ctx, dep.station, store)
    if merged.conflict_rows or (fresh and ctx.paths.conflicts(dep.id).exists()):
        _conflict_csv(ctx.paths.conflicts(dep.id), merged.conflict_rows, names, fresh=fresh)
    return store


def conflicting_timestamps(conflict: dict[str, np.ndarray]) -> int:
    """Timestamps at which any variable's downloads disagree (the union of the per-variable conflict masks)."""
    masks = [np.asarray(m, bool) for m in conflict.values()]
    return int(np.count_nonzero(np.logical_or.reduce(masks))) if masks else 0




def rebuild_store(ctx: Context, deployment_id: str) -> tuple[Store | None, list[Notice]]:
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
                notices.append(Notice("rerun", f"archived file {r['original_name']} no longer reads into this "
                                      f"deployment ({outcome.reason or 'matches ' + outcome.ingested.deployment})",
                                      deployment=deployment_id))
                continue
            files.append(outcome.ingested)
        if not files:
            return None, notices
        listed = _conflict_timestamps(ctx.paths.conflicts(deployment_id))
        store = merge_new_files(ctx, deployment_id, files, fresh=True)
        remain = _conflict_timestamps(ctx.paths.conflicts(deployment_id))
        if listed - remain:
            dep = ctx.register.deployment_by_id(deployment_id)
            notices.append(Notice("conflict", conflicts_dropped_text(len(listed - remain), len(remain)),
                                  dep.station, deployment_id))
        return store, notices


def _conflict_timestamps(path: Path) -> set[str]:
    """The timestamps a conflicts file lists (empty when there is none)."""
    if not path.exists():
        return set()
    with path.open(encoding="utf-8", newline="") as f:
        return {row["time_utc"] for row in csv.DictReader(f)}
