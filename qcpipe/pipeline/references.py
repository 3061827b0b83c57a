"""What a deployment is compared with: its site's barometer, tide reference and its station's immersion state."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import lineage
from ..archive.ncio import read_dataset
from ..config.constituents import load_constituents
from ..convert.by_kind import BarometerSeries
from ..derive.products import site_fitted_constants
from ..tide_reference import (IMMERSION_PROBE, IMMERSION_UNKNOWN, SiteTide, immersion_source_from_reference,
                              state_from_level)
from ..tide.exposure import immersion_at
from .context import Context


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

def site_tide(ctx: Context, site_id: str) -> SiteTide:
    """The site's tide reference: its observed gauge and harmonic constants.

    The gauge is every pressure-logger deployment at the site, from its latest
    dataset version, without samples whose aggregate flag is fail or missing.
    The constants are those the register names; where it names none, those
    fitted to all the site's gauge records (:func:`qcpipe.derive.products.site_fitted_constants`,
    read back while the gauge datasets are unchanged).
    """
    path = ctx.register.constituents_path(site_id)
    constants = load_constituents(path) if path is not None else None
    gauges = lineage.site_gauges(ctx.register, site_id)
    found = _latest_valid(ctx, gauges, "water_level")
    tide = SiteTide(site_id, constants)
    if found is not None:
        t, levels, rows = found
        tide.gauge_time, tide.gauge_level = t, levels
        tide.gauge_name = ", ".join(f"{d} (v{version:03d})" for d, version in rows)
    if constants is None:
        if found is None:
            tide.why_no_fit = ("the register names no harmonic constants for the site and it has no gauge "
                               "(pressure logger) record to fit them to")
        else:
            site = ctx.register.site_by_id(site_id)
            lat = ctx.register.station_by_id(ctx.register.deployment_by_id(rows[0][0]).station).latitude
            rows_now = {d: ctx.catalog.latest_dataset(d) for d, _ in rows}
            sources = {d: {"dataset": Path(r["path"]).name, "sha256": r.get("sha256")} for d, r in rows_now.items()}
            tide.fitted, tide.fitted_from, why = site_fitted_constants(
                ctx, site, t, levels, lineage.site_gauge_datasets(ctx, site_id), latitude=lat, sources=sources)
            if why:
                tide.why_no_fit = f"the register names no harmonic constants for the site and {why}"
    return tide


DEFAULT_SWASH_MARGIN_M = 0.1


def swash_margin(ctx: Context, station_id: str) -> float:
    """The band either side of a station's elevation where a water level alone cannot tell wet from dry, m:
    its probe's ``immersion_consistency.margin_m`` rule, else 0.1 m (common practice, no source)."""
    rules = ctx.rules.for_variable("wetness", station_id)
    if rules is not None and rules.immersion_consistency is not None:
        return float(rules.immersion_consistency.margin_m)
    return DEFAULT_SWASH_MARGIN_M


def state_from_reference(ctx: Context, station, times, tide: SiteTide | None) -> tuple[np.ndarray, np.ndarray]:
    """Immersion state of a station from the reference level against its elevation (unknown within the
    swash margin or without a reference) and its per-sample source (:data:`IMMERSION_SOURCE_MEANINGS`)."""
    t = np.asarray(times, dtype="datetime64[ns]")
    if tide is None:
        return np.full(t.size, 2, np.int8), np.full(t.size, IMMERSION_UNKNOWN, np.int8)
    level, source = tide.level_and_source(t)
    state = state_from_level(t, level, elevation_m=station.elevation_m, margin_m=swash_margin(ctx, station.id))
    return state, np.where(state == 2, IMMERSION_UNKNOWN, immersion_source_from_reference(source)).astype(np.int8)


def station_immersion(ctx: Context, station, times, tide: SiteTide | None) -> tuple[np.ndarray, np.ndarray, str]:
    """Immersion state of a station at ``times``, its per-sample source and a sentence saying what it is made of.

    The station's immersion probe, from its latest dataset, gives the state of the
    nearest preceding probe sample (within three probe sampling intervals, at most
    1 h), with the source the probe's dataset records for it (a probe judged
    unreliable for a period carries the reference's state there).  Where the probe
    gives none (no probe, outside its record, its gaps), the reference level
    against the station elevation decides (:func:`state_from_reference`).
    """
    t = np.asarray(times, dtype="datetime64[ns]")
    state, source = state_from_reference(ctx, station, t, tide)
    what = []
    for dep in ctx.register.deployment:
        if dep.station != station.id or ctx.register.kind_of(dep.id) != "immersion_probe":
            continue
        latest = ctx.catalog.latest_dataset(dep.id)
        if latest is None or not Path(latest["path"]).exists():
            continue
        ds = read_dataset(latest["path"])
        pt = ds["time"].values
        if pt.size < 2 or t.size == 0 or pt[-1] < t[0] or pt[0] > t[-1]:
            continue
        step = float(np.median(np.diff(pt)).astype("timedelta64[ns]").astype(np.int64)) / 1e9
        from_probe = immersion_at(t, pt, ds["immersion"].values, max_gap_s=min(3 * step, 3600.0))
        have = from_probe != 2
        j = np.clip(np.searchsorted(pt, t, side="right") - 1, 0, pt.size - 1)
        probe_source = (ds["immersion_source"].values[j] if "immersion_source" in ds
                        else np.full(t.size, IMMERSION_PROBE, np.int8))
        state[have], source[have] = from_probe[have], probe_source[have]
        what.append(f"immersion probe deployment {dep.id} (version {latest['version']})")
    if np.any(source > IMMERSION_PROBE):
        where = " where the probe gives no state" if what else ""
        what.append(f"the reference water level against the station elevation{where} (unknown within "
                    f"{swash_margin(ctx, station.id):g} m of it): {tide.describe(source[source > IMMERSION_PROBE] - 1)}")
    if not what:
        return state, source, "unknown (no immersion probe and no water level at this site)"
    return state, source, "; ".join(what)
