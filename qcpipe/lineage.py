"""What a dataset was made from, as content hashes: the basis of targeted re-runs.

* the *ingest key* of a deployment covers what turns its raw files into the
  pre-QC store (its time window, clock offset, checks and confirmed correction, its layout): when it
  changes, the raw files are read again;
* the *QC key* covers what turns the store into a dataset (the effective rules of
  its variables, the immersion and timing settings, its register entries, the
  site's harmonic constants, its station's annotations, the software version):
  when it changes, the deployment is re-QC'd from the store.
"""

from __future__ import annotations

from pathlib import Path

from . import __version__
from .config.loading import content_sha256
from .files import sha256_of_file

#: variables each instrument kind produces and the rule set is consulted for
KIND_VARIABLES = {
    "immersion_probe": ("wetness",),
    "temperature": ("temperature",),
    "ph": ("ph", "temperature"),
    "conductivity": ("conductivity", "temperature"),
    "pressure": ("temperature", "pressure", "water_level"),
    "barometer": ("air_pressure", "temperature"),
}


def _file_sha256(path: Path | None) -> str | None:
    if path is None or not Path(path).exists():
        return None
    return sha256_of_file(path)


def _dump(model) -> dict:
    return model.model_dump(mode="json", by_alias=True)


def _dump_deployment(dep) -> dict:
    """A deployment's register entry; ``clock_correction`` only when it has one, so that keys made
    before the entry existed stay the same."""
    d = _dump(dep)
    if d.get("clock_correction") is None:
        d.pop("clock_correction", None)
    return d


def ingest_inputs(ctx, deployment_id: str) -> dict:
    """What the pre-QC store of a deployment depends on (besides its raw files)."""
    reg = ctx.register
    dep = reg.deployment_by_id(deployment_id)
    inst = reg.instrument_by_serial(dep.instrument)
    d = _dump_deployment(dep)
    clock = {k: d[k] for k in ("start", "end", "clock_offset", "clock_set", "clock_check", "clock_correction")
             if k in d}
    return {"deployment": clock, "instrument": _dump(inst), "layout": ctx.layouts.hashes.get(inst.layout)}


def ingest_key(ctx, deployment_id: str) -> str:
    return content_sha256(ingest_inputs(ctx, deployment_id))


def barometers_for(register, deployment_id: str) -> list[str]:
    """Barometer deployments whose air pressure a pressure-logger deployment subtracts (sorted ids).

    Those at any station of the logger's site that overlap its deployment in
    time; none for other kinds, vented loggers and ``use_barometer = false``.
    """
    dep = register.deployment_by_id(deployment_id)
    if register.instrument_by_serial(dep.instrument).kind != "pressure":
        return []
    if dep.pressure is not None and not dep.pressure.uses_barometer:
        return []
    site = register.station_by_id(dep.station).site
    return sorted(d.id for d in register.deployment
                  if register.instrument_by_serial(d.instrument).kind == "barometer"
                  and register.station_by_id(d.station).site == site and d.start < dep.end and d.end > dep.start)


def site_gauges(register, site_id: str) -> list[str]:
    """The water-level (pressure logger) deployments at a site: its observed tide record (sorted ids)."""
    return sorted(d.id for d in register.deployment
                  if register.station_by_id(d.station).site == site_id and register.kind_of(d.id) == "pressure")


def site_gauge_datasets(ctx, site_id: str) -> dict:
    """What made the latest dataset of each gauge deployment at a site (QC key and raw files, as catalogued):
    the identity of the site's observed tide record and of any constants fitted to it."""
    latest = {g: ctx.catalog.latest_dataset(g) or {} for g in site_gauges(ctx.register, site_id)}
    return {g: {"qc_key": row.get("qc_key"), "raw_sha256": row.get("raw_sha256")} for g, row in latest.items() if row}


def qc_inputs(ctx, deployment_id: str) -> dict:
    """Everything besides the store that decides a deployment's QC'd dataset.

    A level logger that subtracts a barometer's air pressure depends on what
    made that barometer's latest dataset (its QC key and raw files, as the
    catalog recorded them; not the file's own hash, which carries the run's
    timestamps): a new barometer record re-QCs the level logger.  Likewise every
    other instrument at a site depends on the site's gauge datasets (its tide
    reference: the observed level, and constants fitted to it where the register
    names none).
    """
    reg = ctx.register
    dep = reg.deployment_by_id(deployment_id)
    station = reg.station_by_id(dep.station)
    site = reg.site_by_id(station.site)
    inst = reg.instrument_by_serial(dep.instrument)
    rules = {v: ctx.rules.effective_dict(v, station.id) for v in KIND_VARIABLES[inst.kind]}
    baro = barometers_for(reg, deployment_id)
    extra = {}
    if baro:
        latest = {b: ctx.catalog.latest_dataset(b) or {} for b in baro}
        extra["barometer_datasets"] = {b: {"qc_key": row.get("qc_key"), "raw_sha256": row.get("raw_sha256")}
                                       for b, row in latest.items()}
    if inst.kind not in ("pressure", "barometer"):
        # the site's tide reference: its observed gauge record and any constants fitted to it
        extra["site_gauge_datasets"] = site_gauge_datasets(ctx, site.id)
    return {**extra,
        "rules": rules,
        "rule_settings": {"immersion": _dump(ctx.rules.immersion), "tide_timing": _dump(ctx.rules.tide_timing)},
        "register": {"deployment": _dump_deployment(dep), "station": _dump(station), "site": _dump(site),
                     "instrument": _dump(inst)},
        "tide_constants_sha256": _file_sha256(reg.constituents_path(site.id)),
        "annotations": [a.as_dict() for a in ctx.annotations.for_station(station.id)],
        "software_version": __version__,
    }


def qc_key(ctx, deployment_id: str) -> str:
    return content_sha256(qc_inputs(ctx, deployment_id))


def differences(old: dict, new: dict, prefix: str = "") -> list[str]:
    """Human-readable differences between two nested dicts: 'rules.temperature.spike.suspect: 4.0 -> 5.0'."""
    out = []
    for key in sorted(set(old) | set(new)):
        a, b = old.get(key, "(absent)"), new.get(key, "(absent)")
        path = f"{prefix}{key}"
        if isinstance(a, dict) and isinstance(b, dict):
            out += differences(a, b, path + ".")
        elif a != b:
            out.append(f"{path}: {a} -> {b}")
    return out
