"""What a deployment is compared with: its site's barometer, tide reference and its station's immersion state."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import lineage
from ..archive.ncio import read_dataset
from ..config.constituents import load_constituents
from ..convert.by_kind import BarometerSeries
from ..tide_reference import SiteTide, state_from_level
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
    """The site's harmonic constants (if the register names a file) and its observed gauge.

    The gauge is every pressure-logger deployment at the site, from its latest
    dataset version, without samples whose aggregate flag is fail or missing.
    """
    path = ctx.register.constituents_path(site_id)
    constants = load_constituents(path) if path is not None else None
    gauges = [d.id for d in ctx.register.deployment
              if ctx.register.station_by_id(d.station).site == site_id and ctx.register.kind_of(d.id) == "pressure"]
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
        state = immersion_at(t, pt, ds["immersion"].values, max_gap_s=min(3 * step, 3600.0))
        return state, f"immersion probe deployment {dep.id} (version {latest['version']})"
    if tide is not None:
        level, source = tide.reference(t)
        if level is not None:
            return (state_from_level(t, level, elevation_m=station.elevation_m, margin_m=0.1),
                    f"water level ({source}) against the station elevation, unknown within 0.1 m")
    return np.full(t.size, 2, np.int8), "unknown (no immersion probe and no water level at this site)"
