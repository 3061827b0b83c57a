"""Raw variables of one instrument kind to the physical variables qcpipe stores."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..config.register import PressureSettings
from ..units import to_stored_units
from .sensors import (air_pressure_at, gravity_from_latitude, ph_from_millivolts, immersion_from_wetness,
                      seawater_density_from_temperature, water_level_from_pressure, wetness_from_reading)

#: codes of the per-sample air-pressure source of a level logger (variable ``air_pressure_source``)
AIR_FROM_BAROMETER = np.int8(1)
AIR_FROM_CONSTANT = np.int8(2)
#: at most this many time ranges on the constant are listed in the dataset's attributes
MAX_LISTED_RANGES = 20


@dataclass(frozen=True)
class BarometerSeries:
    """The site's valid air pressure: sample times (datetime64[ns]), Pa, and where it came from."""
    time: np.ndarray
    pressure_pa: np.ndarray
    name: str


@dataclass
class Converted:
    variables: dict[str, np.ndarray]
    immersion: np.ndarray | None = None
    notes: dict[str, str] = field(default_factory=dict)       # per-variable comment attribute
    attrs: dict[str, object] = field(default_factory=dict)    # extra global attributes
    meta: dict[str, dict] = field(default_factory=dict)       # per-variable attributes in place of the defaults
    air_pressure: np.ndarray | None = None          # Pa subtracted at each sample (absolute level loggers)
    air_pressure_source: np.ndarray | None = None   # int8 per sample: AIR_FROM_BAROMETER or AIR_FROM_CONSTANT
    barometer_used: bool = False                    # a barometer series was consulted (fallback is flagged)


def runs_of(mask) -> list[tuple[int, int]]:
    """(first, last) indices of each run of True in a boolean array, in order."""
    m = np.asarray(mask, dtype=bool)
    edges = np.diff(np.concatenate([[False], m, [False]]).astype(np.int8))
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1
    return list(zip(starts.tolist(), ends.tolist()))


def _iso(t) -> str:
    return np.datetime_as_string(np.datetime64(t, "s"), unit="s") + "Z"


def ranges_text(times, mask, limit: int = MAX_LISTED_RANGES) -> str:
    """'start/end (n samples)' for each run of True in ``mask`` (ISO 8601 UTC), at most ``limit`` listed."""
    runs = runs_of(mask)
    parts = [f"{_iso(times[a])}/{_iso(times[b])} ({b - a + 1} samples)" for a, b in runs[:limit]]
    if len(runs) > limit:
        parts.append(f"and {len(runs) - limit} more ranges")
    return ", ".join(parts)


def _air_pressure(p, settings: PressureSettings, times, barometer: BarometerSeries | None):
    """Air pressure to subtract at each sample (Pa), its source codes, and the words for the metadata."""
    const = settings.air_pressure_hpa * 100.0
    if settings.vented:
        return np.zeros_like(p), None, "none: vented logger (gauge pressure, the air already subtracted)"
    if barometer is None or not settings.use_barometer:
        return np.full_like(p, const), None, f"configured constant {const:.1f} Pa"
    air = air_pressure_at(times, barometer.time, barometer.pressure_pa, max_gap_s=settings.barometer_max_gap)
    fell_back = np.isnan(air)
    air[fell_back] = const
    source = np.where(fell_back, AIR_FROM_CONSTANT, AIR_FROM_BAROMETER).astype(np.int8)
    words = (f"site barometer {barometer.name or '(no data yet)'}, interpolated linearly across steps up to "
             f"{settings.barometer_max_gap:g} s, not extrapolated; configured constant {const:.1f} Pa where it "
             "has no valid value (those levels flagged suspect by barometer_fallback)")
    return air, source, words


def physical_from_raw(kind: str, values: dict[str, np.ndarray], units: dict[str, str], *,
                      deployment, station, times=None, barometer: BarometerSeries | None = None) -> Converted:
    """Convert one deployment's raw series (raw units) to stored physical variables.

    ``times`` (datetime64[ns], the samples' UTC times) and ``barometer`` (the
    site's valid air-pressure series, or None where the site has no barometer
    for this deployment) are used by absolute pressure loggers only.
    """
    out: dict[str, np.ndarray] = {}
    notes: dict[str, str] = {}
    attrs: dict[str, object] = {}
    immersion = None
    for name in ("temperature", "ph", "conductivity"):
        if name in values:
            out[name] = to_stored_units(values[name], units[name])
    if "ph_mv" in values:
        cal = deployment.ph_calibration
        if cal is None:
            notes["ph"] = "electrode millivolts logged but no ph_calibration in the register: pH not computed"
        else:
            mv = to_stored_units(values["ph_mv"], units["ph_mv"]) * 1000.0
            temp = out.get("temperature")
            if temp is None:
                temp = np.full_like(mv, 25.0)
                where = "an assumed 25 degC"
            else:
                where = "the sonde's temperature"
            out["ph"] = ph_from_millivolts(mv, temp, buffers=cal.buffers)
            notes["ph"] = (f"from electrode millivolts with a {len(cal.buffers)}-point buffer calibration "
                           f"{[list(b) for b in cal.buffers]} and the Nernst slope at {where}")
    if kind == "immersion_probe":
        reading = values["probe_reading"]
        out["probe_reading"] = reading
        ref = deployment.probe_reference
        if ref is not None:
            out["wetness"] = wetness_from_reading(reading, air=ref.air, water=ref.water)
            immersion = immersion_from_wetness(out["wetness"])
            notes["wetness"] = (f"(reading - {ref.air:g}) / ({ref.water:g} - {ref.air:g}) from the probe's "
                                "reference readings in air and in water, clipped to 0..1; immersed where >= 0.5")
            attrs["probe_reference_air"] = ref.air
            attrs["probe_reference_water"] = ref.water
        else:
            notes["probe_reading"] = "no air/water reference readings in the register: wetness not computed"
    if kind == "barometer":
        out["air_pressure"] = to_stored_units(values["air_pressure"], units["air_pressure"])
    conv = Converted(out, immersion, notes, attrs)
    if kind == "pressure":
        _water_level(conv, to_stored_units(values["pressure"], units["pressure"]), deployment, station,
                     times, barometer)
    return conv


def _water_level(conv: Converted, p, deployment, station, times, barometer) -> None:
    """Fill ``conv`` with a pressure logger's pressure, water level and the air pressure behind it."""
    out, notes, attrs = conv.variables, conv.notes, conv.attrs
    out["pressure"] = p
    settings = deployment.pressure or PressureSettings()
    salinity = settings.salinity
    temp = out.get("temperature")
    if temp is None or np.all(np.isnan(temp)):
        temp = np.full_like(p, 10.0)
        temp_note = "an assumed 10 degC"
    else:
        temp = np.where(np.isnan(temp), np.nanmean(temp), temp)
        temp_note = "the logger's own temperature"
    if times is None and barometer is not None:
        raise ValueError("physical_from_raw: times are needed to interpolate the barometer to the samples")
    air_pa, source, air_words = _air_pressure(p, settings, times, barometer)
    sea_dbar = (p - air_pa) / 1.0e4
    rho = seawater_density_from_temperature(temp, salinity=salinity, sea_pressure_dbar=sea_dbar,
                                            latitude=station.latitude, longitude=station.longitude)
    g = gravity_from_latitude(station.latitude)
    out["water_level"] = water_level_from_pressure(p, air_pressure_pa=air_pa, density=rho, gravity=g,
                                                   sensor_elevation_m=station.elevation_m)
    notes["water_level"] = (f"hydrostatic: z_sensor + (p - p_air)/(rho g); p_air: {air_words}; rho from TEOS-10 "
                            f"(gsw) with practical salinity {salinity:g} and {temp_note} (mean "
                            f"{np.nanmean(rho):.2f} kg m-3), g = {g:.5f} m s-2 (gsw.grav), "
                            f"z_sensor = {station.elevation_m:g} m")
    attrs.update(water_level_air_pressure_source=air_words, water_level_salinity=salinity,
                 water_level_mean_density_kg_m3=round(float(np.nanmean(rho)), 3),
                 water_level_gravity_m_s2=round(g, 6))
    if settings.vented:
        conv.meta["pressure"] = dict(standard_name="sea_water_pressure_due_to_sea_water",
                                     long_name="gauge pressure at the sensor (vented logger: air pressure "
                                               "already subtracted)")
        attrs["pressure_sensor"] = "vented (gauge pressure)"
        return
    attrs["pressure_sensor"] = "absolute"
    attrs["water_level_air_pressure_pa"] = settings.air_pressure_hpa * 100.0
    conv.air_pressure = air_pa
    if source is None:
        return
    conv.air_pressure_source = source
    conv.barometer_used = True
    on_constant = source == AIR_FROM_CONSTANT
    attrs.update(water_level_air_pressure_barometer=barometer.name,
                 water_level_air_pressure_from_barometer=int(np.count_nonzero(~on_constant)),
                 water_level_air_pressure_from_constant=int(np.count_nonzero(on_constant)),
                 water_level_barometer_max_gap_s=settings.barometer_max_gap)
    if on_constant.any():
        attrs["water_level_air_pressure_constant_ranges"] = ranges_text(times, on_constant)

