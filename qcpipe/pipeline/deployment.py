"""QC of one deployment from its pre-QC store into a new dataset version, in named steps."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from .. import __version__, lineage, progress
from ..archive.catalog import utc_now
from ..archive.cf import add_air_pressure, add_source_variable, build_cf_dataset, flag_name
from ..archive.ncio import read_attrs, read_dataset, write_dataset_atomic
from ..checks import barometer_fallback_flags
from ..convert.by_kind import AIR_FROM_CONSTANT, physical_from_raw
from ..derive import products as derived
from ..files import atomic_path, copy_atomic, sha256_of_file
from ..ingest import IngestedFile
from ..apply_rules import CANNOT_RUN_WHEN_LONGER, apply_rule_set, flag_counts, unevaluated_checks
from ..report.words import (clock_correction_text, clock_verdict_text, companion_clock_text, elevation_text,
                            no_reference_text, probe_finding_text, reading_counts_texts,
                            window_longer_than_record_text)
from ..report.model import DatasetWritten, Notice
from ..probe_analysis import analyse_probe
from ..tide.companion import shares_error, step_lag
from ..tide_reference import (IMMERSION_PROBE, IMMERSION_SOURCE_MEANINGS, IMMERSION_UNKNOWN, OBSERVED_GAUGE,
                              SOURCE_MEANINGS, SiteTide, immersion_source_from_reference, state_from_level)
from .context import Context
from .references import site_barometer, state_from_reference, station_immersion, swash_margin
from .store import COUNT_KEYS, Store, load_store


#: one dataset version written by a run (the run model's record)
DeploymentResult = DatasetWritten


@dataclass
class Prepared:
    """A deployment on its way to a dataset: its configuration, converted variables and what QC needs."""
    dep: object
    station: object
    site: object
    store: Store
    conv: object                                   # convert.by_kind.Converted
    qc_vars: dict                                  # variables that are QC'd
    conflicts: dict                                # variable -> download-conflict mask
    qc_args: dict = field(default_factory=dict)    # immersion, reference level, extra flags for apply_rule_set
    tide_attrs: dict = field(default_factory=dict)
    notices: list = field(default_factory=list)    # Notice records
    analysis: object = None                        # probe_analysis.ProbeAnalysis of an immersion probe
    sources: dict = field(default_factory=dict)    # per-sample source variables: immersion_source, tide_reference_source
    qc_key: str = ""                               # lineage: what this dataset is made from
    qc_inputs: dict = field(default_factory=dict)
    unevaluated: dict = field(default_factory=dict)  # (variable, check) -> its window is longer than the record


def qc_deployment(ctx: Context, deployment_id: str, *, new_files: list[IngestedFile] = (),
                  store: Store | None = None, tide=None, run_id: int | None = None) -> DeploymentResult:
    """Convert, QC and write a new dataset version of one deployment from its pre-QC store.

    ``new_files`` are the raw files merged in this run: their catalog rows are
    committed together with the dataset's, after the dataset is written.
    ``tide`` is the station's tide reference (:class:`qcpipe.tide_reference.SiteTide`), or None.
    ``run_id``: the catalog run doing this; if that run already committed a
    version of the deployment (a task tried again after a passing I/O error),
    that version is returned and nothing is written twice.
    """
    done = _committed_by_run(ctx, deployment_id, run_id, new_files)
    if done is not None:
        return done
    p = convert(ctx, deployment_id, store or load_store(ctx, deployment_id), new_files)
    attach_immersion(ctx, p, tide)
    attach_companion_clock(ctx, p)
    flags, manual_notes = apply_rules(ctx, p)
    now = utc_now()
    ds, enc, version = build_dataset(ctx, p, flags, manual_notes, now)
    out_path = ctx.paths.dataset(p.station.id, p.dep.id, version)
    write_dataset_atomic(ds, out_path, enc)
    products = derived.write_products(ctx, p.station, p.site, p.dep, p.store.kind, p.store.time, p.conv, flags,
                                      version, tide=tide) if p.store.kind == "pressure" else []
    fc = flag_counts(flags)
    commit(ctx, p, new_files, out_path, version, now, fc, run_id)
    prune_versions(ctx, p.dep.id)
    progress.step("qc", f"{p.station.id}/{p.dep.id} v{version:03d}")
    return DeploymentResult(p.station.id, p.dep.id, out_path, version, int(p.store.time.size), fc,
                            _run_counts(new_files, p.store.counts), p.notices, products,
                            air_pressure_summary(p.conv.attrs))


def convert(ctx: Context, deployment_id: str, store: Store, new_files) -> Prepared:
    """Step 1: raw units to physical variables (with the site's barometer for a level logger)."""
    reg = ctx.register
    dep = reg.deployment_by_id(deployment_id)
    station = reg.station_by_id(dep.station)
    barometer = site_barometer(ctx, dep.id) if store.kind == "pressure" else None
    conv = physical_from_raw(store.kind, store.values, store.units, deployment=dep, station=station,
                             times=store.time, barometer=barometer)
    conflicts = {k: store.conflict[k] for k in conv.variables if k in store.conflict}
    for var_out, raw in (("wetness", "probe_reading"), ("water_level", "pressure"), ("ph", "ph_mv")):
        if raw in store.conflict and var_out in conv.variables:
            conflicts[var_out] = store.conflict[raw]
    qc_vars = {k: v for k, v in conv.variables.items() if k != "probe_reading"}
    notices = [Notice("reading", n, station.id, dep.id) for f in new_files
               for n in [*f.notes, *reading_counts_texts(f.raw.name, f.counts)]]
    return Prepared(dep, station, reg.site_by_id(station.site), store, conv, qc_vars, conflicts, notices=notices,
                    qc_key=lineage.qc_key(ctx, dep.id), qc_inputs=lineage.qc_inputs(ctx, dep.id))


def attach_immersion(ctx: Context, p: Prepared, tide) -> None:
    """Step 2: the immersion state of every sample (a probe's own analysis, else its station's probe or the
    water level) and what the tide checks compare with."""
    store, station, conv = p.store, p.station, p.conv
    if store.kind == "immersion_probe":
        ref_state, ref_imm_source = state_from_reference(ctx, station, store.time, tide)
        analysis = analyse_probe(store.time, store.values["probe_reading"], probe_reference=p.dep.probe_reference,
                                 elevation_m=station.elevation_m, settings=ctx.rules.immersion,
                                 timing_rules=ctx.rules.tide_timing, tide=tide,
                                 reference_state=ref_state if np.any(ref_state != 2) else None)
        conv.variables["wetness"] = p.qc_vars["wetness"] = analysis.wetness
        # the station's state: the probe's, but the tide reference's where the probe is judged unreliable
        station_state = analysis.state.copy()
        imm_source = np.where(analysis.state == 2, IMMERSION_UNKNOWN, IMMERSION_PROBE).astype(np.int8)
        if analysis.unreliable is not None and analysis.unreliable.any():
            u = analysis.unreliable
            station_state[u], imm_source[u] = ref_state[u], ref_imm_source[u]
            p.tide_attrs["immersion_state_from_reference_samples"] = int(np.count_nonzero(u))
        conv.immersion = station_state
        p.notices += probe_notices(analysis, station.id, p.dep.id)
        p.tide_attrs.update(analysis.attrs)
        if analysis.clock is not None:
            p.tide_attrs["clock_verdict"] = clock_verdict_text(analysis.clock)
        ref_level, ref_source = analysis.reference_level, analysis.reference_source
        if ref_source is None or not np.any(np.isfinite(ref_level)):
            ref_level = None
            why = tide.why_no_fit if tide is not None and tide.why_no_fit else "the site has no tide reference"
            p.tide_attrs["immersion_reference_level"] = f"none: {why}"
            p.notices.append(Notice("tide", no_reference_text(why), station.id, p.dep.id))
        else:
            p.tide_attrs["immersion_reference_level"] = tide.describe(ref_source)
            p.sources["tide_reference_source"] = ref_source
        p.sources["immersion_source"] = imm_source
        p.analysis = analysis
        p.qc_args = dict(immersion=analysis.state, reference_level=ref_level, elevation_m=station.elevation_m,
                         readings=store.values["probe_reading"],
                         extra={"wetness": {"immersion_quality": analysis.quality}})
    elif store.kind == "barometer":
        p.tide_attrs["immersion_source"] = "none (a barometer measures air pressure; immersion does not apply)"
    elif store.kind == "pressure":
        # a water-level logger knows its own immersion: its level against its own elevation
        margin = swash_margin(ctx, station.id)
        state = state_from_level(store.time, conv.variables["water_level"], elevation_m=station.elevation_m,
                                 margin_m=margin)
        conv.immersion = state
        p.tide_attrs["immersion_source"] = ("the logger's own water level against its elevation (unknown within "
                                            f"{margin:g} m of it)")
        p.sources["immersion_source"] = np.where(state == 2, IMMERSION_UNKNOWN,
                                                 immersion_source_from_reference(OBSERVED_GAUGE)).astype(np.int8)
        p.qc_args = dict(immersion=state)
        if tide is not None:
            # a gauge is checked against the register's constants only, never against constants fitted to itself
            p.qc_args["predicted_level"] = tide.register_predicted(store.time)
    else:
        state, source, what = station_immersion(ctx, station, store.time, tide)
        conv.immersion = state
        p.tide_attrs["immersion_source"] = what
        p.sources["immersion_source"] = source
        p.qc_args = dict(immersion=state)
    if conv.barometer_used:
        p.qc_args["extra"] = {"water_level": {"barometer_fallback": barometer_fallback_flags(
            conv.variables["water_level"], conv.air_pressure_source == AIR_FROM_CONSTANT)}}


def probe_notices(analysis, station_id: str, deployment_id: str) -> list[Notice]:
    """What a probe's analysis found that a person should look at, as notices."""
    out = [Notice("fouling", probe_finding_text(f, figures), station_id, deployment_id)
           for f, figures in analysis.findings]
    if analysis.clock is not None and analysis.clock.suspected:
        out.append(Notice("clock", clock_verdict_text(analysis.clock), station_id, deployment_id))
    if analysis.elevation is not None and analysis.elevation.suspect:
        out.append(Notice("elevation", elevation_text(analysis.elevation), station_id, deployment_id))
    return out


def manual_ranges(ctx: Context, station_id: str, variables) -> tuple[dict, dict]:
    """The review annotations of a station as flag ranges per variable, and their notes for the comment."""
    ranges: dict[str, list] = {}
    notes: dict[str, list[str]] = {}
    for a in ctx.annotations.for_station(station_id):
        for var in variables:
            if a.applies_to(station_id, var):
                d = a.as_dict()
                ranges.setdefault(var, []).append((np.datetime64(d["start"].rstrip("Z"), "ns"),
                                                   np.datetime64(d["end"].rstrip("Z"), "ns"), a.flag))
                notes.setdefault(var, []).append(
                    f"{d['start']} to {d['end']}: flag {a.flag} by {a.reviewer} on {d['date']}: {a.reason}")
    return ranges, notes


def apply_rules(ctx: Context, p: Prepared) -> tuple[dict, dict]:
    """Step 3: the rule set's flags per variable and check (with the reviewers' manual flags)."""
    manual, notes = manual_ranges(ctx, p.station.id, p.qc_vars)
    flags = apply_rule_set(p.qc_vars, p.store.time, ctx.rules, p.station.id, p.conflicts, manual=manual,
                           **p.qc_args)
    for (var, check), (window_s, span_s) in unevaluated_checks(p.qc_vars, p.store.time, ctx.rules,
                                                               p.station.id).items():
        p.unevaluated[(var, check)] = window_longer_than_record_text(
            var, check, window_s, span_s, evaluated=check not in CANNOT_RUN_WHEN_LONGER)
        p.notices.append(Notice("rules", p.unevaluated[(var, check)], p.station.id, p.dep.id))
    if "tide_residual" in flags.get("water_level", {}):
        res = p.conv.variables["water_level"] - p.qc_args["predicted_level"]
        p.tide_attrs["tide_residual_rms_m"] = round(float(np.sqrt(np.nanmean(res ** 2))), 4)
    p.conv.attrs.update(p.tide_attrs)
    return flags, notes


def build_dataset(ctx: Context, p: Prepared, flags: dict, manual_notes: dict, now: str):
    """Step 4: the CF/ACDD dataset (the next version after the catalog's latest) with its history and
    provenance; returns it, its NetCDF encoding and its version number."""
    reg, dep, store, conv, counts = ctx.register, p.dep, p.store, p.conv, p.store.counts
    cat = ctx.catalog
    prev = cat.latest_dataset(dep.id)
    version = 1 if prev is None else prev["version"] + 1
    history = (f"{now} qcpipe {__version__}: {len(store.sources)} raw file(s) merged ({counts.get('duplicates', 0)} "
               f"repeated records dropped, {counts.get('conflicts', 0)} conflicting timestamps kept and flagged, "
               f"{counts.get('pre_deployment', 0)} pre-deployment and {counts.get('post_recovery', 0)} post-recovery "
               f"samples trimmed, {counts.get('truncated_last_line', 0)} truncated last line(s) not read, "
               f"{counts.get('out_of_order', 0)} record(s) out of time order sorted), converted, QC "
               f"with rule set {ctx.rules.name} sha256:{ctx.rules.sha256[:12]}")
    correction_attrs, correction_text = clock_correction_record(dep)
    if correction_text:
        history += f"; {correction_text}"
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
                                       truncated_last_lines_total=counts.get("truncated_last_line", 0),
                                       records_out_of_time_order_total=counts.get("out_of_order", 0),
                                       raw_file_reading=json.dumps(store.file_provenance, sort_keys=True),
                                       **correction_attrs))
    provenance["extra_attrs"]["qc_inputs_sha256"] = p.qc_key
    if prev is not None:
        provenance["previous_version"] = Path(prev["path"]).stem
    ds, enc = build_cf_dataset(time=store.time, variables=conv.variables, flags=flags, immersion=conv.immersion,
                               station=p.station, site=p.site, deployment=dep, register_info=reg.info,
                               provenance=provenance, version=version, history=history, raw_units=store.units)
    if p.analysis is not None and p.analysis.transition_time is not None:
        _add_transitions(ds, enc, p.analysis)
    if "immersion_source" in p.sources and "immersion" in ds:
        add_source_variable(ds, enc, "immersion_source", p.sources["immersion_source"], of="immersion",
                            long_name="source of the immersion state at each sample",
                            meanings=IMMERSION_SOURCE_MEANINGS)
    if "tide_reference_source" in p.sources:
        add_source_variable(ds, enc, "tide_reference_source", p.sources["tide_reference_source"], of="wetness",
                            long_name="source of the reference water level the probe was checked against",
                            meanings=SOURCE_MEANINGS)
    if conv.air_pressure is not None:
        add_air_pressure(ds, enc, conv.air_pressure, conv.air_pressure_source)
    for var, lines in manual_notes.items():
        ds[f"{var}_qc_manual"].attrs["comment"] = "review annotations: " + " | ".join(lines)
    for (var, check), text in p.unevaluated.items():
        ds[flag_name(var, check)].attrs["comment"] = text
    # one time for the dataset and its catalog row; date_created is version 1's, which the catalog
    # keeps even when that version's file has been pruned
    first = cat.dataset_versions(dep.id)
    ds.attrs["date_modified"] = now
    ds.attrs["date_created"] = first[0]["created"] if first else now
    if p.qc_args.get("predicted_level") is not None:
        ds["water_level_predicted"] = xr.DataArray(p.qc_args["predicted_level"], dims=("time",), attrs=dict(
            long_name=f"harmonic prediction of the water level above {p.site.vertical_datum}", units="m",
            coordinates=ds["water_level"].attrs["coordinates"], comment="for the tide residual check; "
            "not for navigation or safety planning"))
        enc["water_level_predicted"] = dict(enc["water_level"])
    return ds, enc, version


def commit(ctx: Context, p: Prepared, new_files, out_path: Path, version: int, now: str, fc: dict,
           run_id: int | None) -> None:
    """Step 5: copy the run's new raw files into the archive and record them, the dataset and the run's notices
    of it in one transaction (a run killed before its summary leaves the notices to the next run)."""
    reg, cat, station, dep, store = ctx.register, ctx.catalog, p.station, p.dep, p.store
    archive_configuration(ctx, station.site)
    with cat.transaction() as con:
        for f in new_files:
            dest = ctx.paths.raw_copy(station.id, dep.id, f.raw.sha256, f.raw.name)
            if not dest.exists():          # kept by the read step; else copied now, and it must match its hash
                copy_atomic(f.raw.path, dest, sha256=f.raw.sha256)
            cat.record_raw(con, sha256=f.raw.sha256, size=f.raw.size, original_name=f.raw.name,
                           original_path=str(f.raw.path), archived_path=str(dest), station=station.id,
                           deployment=dep.id, layout=f.layout,
                           time_start=str(f.time.min()) if f.time.size else None,
                           time_end=str(f.time.max()) if f.time.size else None, status="archived", reason=None)
        cat.record_dataset(con, path=str(out_path), station=station.id, deployment=dep.id, version=version,
                           rules_name=ctx.rules.name, rules_sha256=ctx.rules.sha256, register_sha256=reg.sha256,
                           software_version=__version__, created=now, samples=int(store.time.size),
                           flag_counts=fc, raw_sha256=store.sources, qc_key=p.qc_key,
                           qc_inputs=p.qc_inputs, sha256=sha256_of_file(out_path), run_id=run_id)
        if run_id is not None:
            cat.record_notices(con, run_id, [n.as_dict() for n in p.notices])


def archive_configuration(ctx: Context, site_id: str) -> list[Path]:
    """Copy the configuration files a dataset is made with into the archive, by content hash
    (``config/<kind>/<sha256>.toml``; kept once, never replaced): the rule set, register and layouts under
    the hash the catalog records for them, the site's harmonic constants under the file's SHA-256 (as in
    the dataset's QC inputs).  A file whose content no longer has the hash loaded for this run (edited
    during the run) is not copied, so a copy is always exactly what its hash names.  Returns the copies."""
    import tomllib

    from ..config.loading import content_sha256

    out = []
    for kind, loaded in (("rules", ctx.rules), ("register", ctx.register), ("layouts", ctx.layouts)):
        dest = ctx.paths.config_snapshot(kind, loaded.sha256)
        if not dest.exists():
            data = Path(loaded.path).read_bytes()
            try:
                same = content_sha256(tomllib.loads(data.decode("utf-8"))) == loaded.sha256
            except (UnicodeDecodeError, tomllib.TOMLDecodeError):
                same = False
            if not same:
                continue
            with atomic_path(dest) as tmp:
                tmp.write_bytes(data)
        out.append(dest)
    constants = ctx.register.constituents_path(site_id)
    if constants is not None and constants.is_file():
        dest = ctx.paths.config_snapshot("tide_constants", sha256_of_file(constants))
        if not dest.exists():
            copy_atomic(constants, dest)
        out.append(dest)
    return out


def _run_counts(new_files, store_counts: dict) -> dict:
    """What this run's new files of a deployment add to the run's counts."""
    run_counts = {k: sum(int(f.counts.get(k, 0)) for f in new_files) for k in COUNT_KEYS}
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
    recorded = [Notice.from_dict(n) for n in ctx.catalog.notices(run_id=run_id, deployment=deployment_id)]
    return DeploymentResult(row["station"], deployment_id, Path(row["path"]), row["version"], row["samples"],
                            row["flag_counts"], _run_counts(new_files, store_counts),
                            [Notice("run", f"version {row['version']} was written by an earlier attempt of this run "
                                    "(the task was tried again after an I/O error)", row["station"], deployment_id),
                             *recorded])


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
    """Observed wet/dry transitions and their offsets from the prediction, on their own dimension.

    ``transition_time`` is the coordinate variable of that dimension (CF-1.8 section 1.3: named
    as its dimension, strictly increasing, no missing values). The probe analysis gives the
    transitions in time order, one state change per time, so it is strictly increasing; a
    record that is not is refused rather than written as a broken coordinate.
    """
    secs = a.transition_time.astype("datetime64[ns]").astype(np.int64) / 1e9
    if secs.size > 1 and not np.all(np.diff(secs) > 0):
        raise ValueError("transition times of the probe analysis are not strictly increasing; "
                         "they cannot be the coordinate of the transition_time dimension")
    dim = ("transition_time",)
    ds.coords["transition_time"] = xr.DataArray(secs, dims=dim, attrs=dict(
        standard_name="time", long_name="time of an observed wet/dry transition of the probe (UTC)",
        units="seconds since 1970-01-01T00:00:00Z", calendar="standard", axis="T"))
    ds["transition_kind"] = xr.DataArray(a.transition_kind, dims=dim, attrs=dict(
        long_name="kind of transition", flag_values=np.array([0, 1], np.int8), flag_meanings="draining flooding"))
    ds["transition_offset"] = xr.DataArray(a.transition_offset_s, dims=dim, attrs=dict(
        long_name="observed minus predicted transition time (positive: logger clock ahead)", units="s"))
    enc.update(transition_time={"_FillValue": None, "dtype": "float64"}, transition_kind={"_FillValue": None},
               transition_offset={"_FillValue": np.float64(np.nan)})


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




def qc_station(ctx: Context, station_id: str, deployment_ids: list[str], new_files: dict[str, list],
               tide: SiteTide | None, run_id: int | None = None) -> list[DeploymentResult]:
    """QC the given deployments of one station in order (probe first), then its exposure products."""
    results = [qc_deployment(ctx, d, new_files=new_files.get(d, []), tide=tide, run_id=run_id)
               for d in deployment_ids]
    note_companions(ctx, results, run_id)
    station = ctx.register.station_by_id(station_id)
    written = derived.write_exposure_products(ctx, station)
    if written and results:
        results[0].products.extend(written)
    return results


# --- clock corrections and the loggers that share a probe's clock ------------------------------

def clock_correction_record(dep) -> tuple[dict, str]:
    """A deployment's confirmed clock correction as dataset attributes and a history sentence ({} and "" without)."""
    if dep.clock_correction is None:
        return {}, ""
    c = dep.clock_correction.model_dump(mode="json")
    attrs = {"clock_correction_applied_s": float(c["shift_s"]), "clock_correction_confirmed_by": c["confirmed_by"],
             "clock_correction_confirmed_on": c["confirmed_on"], "clock_correction_verdict": c["verdict"],
             "clock_correction_evidence": c["evidence"]}
    return attrs, clock_correction_text(c)


def _station_probe(ctx: Context, dep) -> tuple[object, dict] | None:
    """The immersion-probe deployment of ``dep``'s station overlapping it in time, and its latest dataset row."""
    reg = ctx.register
    for d in reg.station_companions(dep.id):
        if reg.kind_of(d) == "immersion_probe":
            row = ctx.catalog.latest_dataset(d)
            if row is not None and Path(row["path"]).exists():
                return reg.deployment_by_id(d), row
    return None


def attach_companion_clock(ctx: Context, p: Prepared) -> None:
    """A logger at a station whose probe's latest dataset has a suspected clock error: its own clock lag.

    The times of the temperature record's largest steps are matched to the probe's
    wet/dry transitions (:func:`qcpipe.tide.companion.step_lag`); the lag against them
    plus the probe's transition offset is the logger's own clock error.  Recorded as
    ``clock_companion_*`` attributes; nothing for probes, barometers and loggers without
    temperature, nor at stations whose probe has no suspected clock error.
    """
    if p.store.kind in ("immersion_probe", "barometer"):
        return
    found = _station_probe(ctx, p.dep)
    if found is None:
        return
    probe, row = found
    ds = read_dataset(row["path"])
    if int(ds.attrs.get("clock_error_suspected", 0) or 0) != 1:
        return
    probe_offset = float(ds.attrs.get("clock_transition_offset_s", float("nan")))
    a = {"clock_companion_probe": f"{probe.id} v{row['version']:03d}"}
    temp = p.conv.variables.get("temperature")
    if temp is None or "transition_time" not in ds:
        a.update(clock_companion_found=0, clock_companion_note="no temperature record or no probe transitions")
    else:
        lag = step_lag(p.store.time, temp, np.sort(ds["transition_time"].values.astype("datetime64[ns]")))
        a.update(clock_companion_found=int(lag.found), clock_companion_steps_matched=lag.n_matched,
                 clock_companion_transitions=lag.n_transitions, clock_companion_contrast=_r(lag.contrast, 2))
        if lag.found:
            a.update(clock_companion_step_lag_s=_r(lag.lag_s), clock_companion_lag_spread_s=_r(lag.spread_s),
                     clock_companion_offset_s=_r(lag.lag_s + probe_offset),
                     clock_companion_shares_probe_error=int(shares_error(lag.lag_s, probe_offset)))
        else:
            a["clock_companion_note"] = "no clear temperature steps at the probe's transitions"
    p.tide_attrs.update({k: v for k, v in a.items() if v is not None})


def _r(x: float, nd: int = 1) -> float | None:
    return round(float(x), nd) if np.isfinite(x) else None


def note_companions(ctx: Context, results: list, run_id: int | None = None) -> None:
    """Name the station's other loggers, with their own clock lags, in a probe's clock notice (in place, and in
    the catalog's record of run ``run_id``'s notices)."""
    for r in results:
        i = next((i for i, n in enumerate(r.notices) if n.kind == "clock" and n.deployment == r.deployment), None)
        if i is None:
            continue
        others = []
        for d in ctx.register.station_companions(r.deployment):
            row = ctx.catalog.latest_dataset(d)
            attrs = read_attrs(row["path"]) if row is not None and Path(row["path"]).exists() else {}
            others.append((d, {k: v for k, v in attrs.items() if k.startswith("clock_companion_")}))
        n, extra = r.notices[i], companion_clock_text(r.deployment, others)
        if n.text.endswith(extra):          # a task tried again: the recorded notice has it already
            continue
        r.notices[i] = Notice("clock", f"{n.text}; {extra}", n.station, n.deployment)
        if run_id is not None:
            ctx.catalog.replace_notice_text(run_id, r.deployment, "clock", r.notices[i].text)
