"""Raw variables of one instrument kind to the physical variables qcpipe stores."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..units import to_stored_units
from .sensors import (gravity_from_latitude, ph_from_millivolts, immersion_from_wetness, seawater_density_from_temperature,
                      water_level_from_pressure, wetness_from_reading)

STANDARD_ATMOSPHERE_PA = 101325.0  # ISO 2533 standard atmosphere at sea level


@dataclass
class Converted:
    variables: dict[str, np.ndarray]
    immersion: np.ndarray | None = None
    notes: dict[str, str] = field(default_factory=dict)       # per-variable comment attribute
    attrs: dict[str, object] = field(default_factory=dict)    # extra global attributes


def physical_from_raw(kind: str, values: dict[str, np.ndarray], units: dict[str, str], *,
                      deployment, station) -> Converted:
    """Convert one deployment's raw series (raw units) to stored physical variables."""
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
    if kind == "pressure":
        p = to_stored_units(values["pressure"], units["pressure"])
        out["pressure"] = p
        settings = deployment.pressure
        air_pa = (settings.air_pressure_hpa * 100.0) if settings else STANDARD_ATMOSPHERE_PA
        salinity = settings.salinity if settings else 35.0
        temp = out.get("temperature")
        if temp is None or np.all(np.isnan(temp)):
            temp = np.full_like(p, 10.0)
            temp_note = "an assumed 10 degC"
        else:
            temp = np.where(np.isnan(temp), np.nanmean(temp), temp)
            temp_note = "the logger's own temperature"
        sea_dbar = (p - air_pa) / 1.0e4
        rho = seawater_density_from_temperature(temp, salinity=salinity, sea_pressure_dbar=sea_dbar,
                                                latitude=station.latitude, longitude=station.longitude)
        g = gravity_from_latitude(station.latitude)
        out["water_level"] = water_level_from_pressure(p, air_pressure_pa=air_pa, density=rho, gravity=g,
                                                       sensor_elevation_m=station.elevation_m)
        notes["water_level"] = (f"hydrostatic: z_sensor + (p - p_air)/(rho g); p_air = {air_pa:.1f} Pa "
                                f"(configured constant), rho from TEOS-10 (gsw) with practical salinity "
                                f"{salinity:g} and {temp_note} (mean {np.nanmean(rho):.2f} kg m-3), "
                                f"g = {g:.5f} m s-2 (gsw.grav), z_sensor = {station.elevation_m:g} m")
        attrs.update(water_level_air_pressure_pa=air_pa, water_level_salinity=salinity,
                     water_level_mean_density_kg_m3=round(float(np.nanmean(rho)), 3),
                     water_level_gravity_m_s2=round(g, 6))
    return Converted(out, immersion, notes, attrs)
