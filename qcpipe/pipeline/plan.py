"""Planning a run: what it has to do, which deployments to QC, in dependency order, and which are stale.

:func:`pending_work` is the one definition of "anything to do": the command asks it
before starting the orchestrator, and the run asks it again to do the work.  It
imports nothing heavy (no xarray, pandas or orchestrator), so asking is quick.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from .. import lineage, progress
from ..archive.ncio import read_attrs
from ..errors import ConfigError
from ..ingest.discover import RawFile
from .context import Context
from .inbox import find_new_files


@dataclass
class Work:
    """What a run has to do, from the catalog, the inbox's content hashes and the configuration's fingerprints."""
    new_files: list[RawFile]          # inbox files whose content the catalog does not have
    inbox: dict                       # counts from the inbox: seen, known, repeated_in_inbox
    reread: list[str]                 # deployments whose store was built with other ingest inputs
    stale: dict[str, list[str]]       # deployments whose latest dataset came from other QC inputs: why

    @property
    def nothing(self) -> bool:
        return not (self.new_files or self.reread or self.stale)


def pending_work(ctx: Context, *, inbox: bool = True) -> Work:
    """What a run has to do now: new inbox files (``inbox=False``: the inbox is not looked at, as
    in a re-run), stores to read again, stale deployments.  Call it under the archive's lock."""
    new, counts = find_new_files(ctx) if inbox else ([], {"seen": 0, "known": 0, "repeated_in_inbox": []})
    return Work(new, counts, changed_ingest(ctx), stale_deployments(ctx))


def changed_ingest(ctx: Context) -> list[str]:
    """Deployments whose pre-QC store was built with another register entry or layout."""
    out = []
    for d in ctx.register.deployment:
        path = ctx.paths.ingested(d.station, d.id)
        if path.exists() and read_attrs(path).get("ingest_key", "") != lineage.ingest_key(ctx, d.id):
            out.append(d.id)
    return out


@dataclass
class QcPlan:
    """Deployments to (re-)QC, in dependency order: barometers, gauges, then stations (probe first)."""
    gauges: list[str]
    stations: dict[str, list[str]]
    sites: list[str]
    barometers: list[str] = field(default_factory=list)
    causes: dict[str, list[str]] = field(default_factory=dict)   # deployments QC'd as dependents: why


def plan_qc(ctx: Context, touched: set[str]) -> QcPlan:
    """Which deployments a run must QC, given those that received new data.

    A new barometer record changes the air pressure of the level loggers at its
    site; a new gauge record changes the tide reference (observed level, and
    constants fitted to it) of every other instrument at its site; a new probe record changes the immersion state of every instrument at
    its station: their datasets are re-QC'd from the stored pre-QC level.
    """
    reg = ctx.register
    have_store = {d.id for d in reg.deployment if ctx.paths.ingested(d.station, d.id).exists()} | set(touched)
    todo = set(touched)
    causes: dict[str, list[str]] = {}

    def depend(deployment: str, why: str) -> None:
        todo.add(deployment)
        if deployment not in touched and why not in causes.get(deployment, []):
            causes.setdefault(deployment, []).append(why)

    site_of = {d.id: reg.station_by_id(d.station).site for d in reg.deployment}
    barometers = sorted(d for d in todo if ctx.register.kind_of(d) == "barometer")
    for d in sorted(have_store):
        for b in sorted(set(lineage.barometers_for(reg, d)) & set(barometers)):
            depend(d, f"barometer {b} is QC'd in this run (its air pressure is subtracted)")
    gauges = sorted(d for d in todo if ctx.register.kind_of(d) == "pressure")
    for d in sorted(have_store):
        if ctx.register.kind_of(d) not in ("pressure", "barometer"):
            for g in (g for g in gauges if site_of[g] == site_of[d]):
                depend(d, f"gauge {g} at site {site_of[d]} is QC'd in this run (the site's tide reference)")
    probes = sorted(d for d in todo if ctx.register.kind_of(d) == "immersion_probe")
    for d in sorted(have_store):
        for p in (p for p in probes if p != d and reg.deployment_by_id(p).station == reg.deployment_by_id(d).station):
            depend(d, f"immersion probe {p} of the station is QC'd in this run (the station's immersion state)")
    order = {"pressure": 0, "immersion_probe": 1}
    gauges = sorted(d for d in todo if ctx.register.kind_of(d) == "pressure")
    stations: dict[str, list[str]] = {}
    for d in sorted(todo - set(gauges) - set(barometers), key=lambda d: (order.get(ctx.register.kind_of(d), 2), d)):
        stations.setdefault(reg.deployment_by_id(d).station, []).append(d)
    progress.expect("qc", len(todo))
    return QcPlan(gauges, dict(sorted(stations.items())), sorted({site_of[d] for d in todo}), barometers,
                  {d: causes[d] for d in sorted(causes)})




def check_deployment_ids(ctx: Context, ids) -> None:
    """ConfigError naming the first id that is not a deployment with stored data."""
    known = {d.id: d for d in ctx.register.deployment}
    for d in ids:
        if d not in known:
            raise ConfigError(f"{ctx.register.path}: no deployment {d!r}; see 'qcpipe holdings' for the ids")
        if not ctx.paths.ingested(known[d].station, d).exists():
            raise ConfigError(f"deployment {d!r} has no stored data in {ctx.paths.root}; run 'qcpipe process' first")


def unchanged_since_latest(ctx: Context, deployment_id: str) -> bool:
    """Whether a deployment's latest dataset was made from exactly what a re-QC would use now: its file is
    there, its QC key is the current one and its raw files are those of the pre-QC store."""
    latest = ctx.catalog.latest_dataset(deployment_id)
    dep = ctx.register.deployment_by_id(deployment_id)
    store = ctx.paths.ingested(dep.station, dep.id)
    if latest is None or not store.exists() or not Path(latest["path"]).exists():
        return False
    if latest.get("qc_key") != lineage.qc_key(ctx, deployment_id):
        return False
    if read_attrs(store).get("ingest_key", "") != lineage.ingest_key(ctx, deployment_id):
        return False
    return list(latest.get("raw_sha256") or []) == str(read_attrs(store).get("source_sha256", "")).split()


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
