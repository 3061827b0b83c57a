"""Conversions from raw readings to physical quantities (pure, vectorised).

Names follow the ``quantity_from_input`` pattern; units are in the docstrings.
"""

from __future__ import annotations

import numpy as np

IMMERSION_EMERSED = np.int8(0)
IMMERSION_IMMERSED = np.int8(1)
IMMERSION_UNKNOWN = np.int8(2)


def wetness_from_reading(reading, *, air: float, water: float) -> np.ndarray:
    """Wetness index 0..1 of a capacitive immersion probe from its raw reading.

    ``w = (r - r_air) / (r_water - r_air)``, clipped to [0, 1], where
    ``r_air`` and ``r_water`` are the probe's readings in air and in water
    (any raw unit: counts, volts, picofarads).  The capacitance of the probe
    rises with the permittivity around it (water about 80 times air), so
    readings between the two references are partly wet (splash, a film of
    water, or the water line at the sensing point).  Common practice, no source.
    NaN readings stay NaN.
    """
    r = np.asarray(reading, dtype=np.float64)
    w = (r - air) / (water - air)
    return np.clip(w, 0.0, 1.0)


def immersion_from_wetness(wetness, *, threshold: float = 0.5) -> np.ndarray:
    """Immersion state: 1 immersed where ``wetness >= threshold``, 0 emersed, 2 unknown (NaN)."""
    w = np.asarray(wetness, dtype=np.float64)
    out = np.where(w >= threshold, IMMERSION_IMMERSED, IMMERSION_EMERSED).astype(np.int8)
    out[np.isnan(w)] = IMMERSION_UNKNOWN
    return out


def seawater_density_from_temperature(temperature, *, salinity, sea_pressure_dbar, latitude, longitude):
    """In-situ seawater density (kg m-3) by TEOS-10.

    ``SA = SA_from_SP(SP, p, lon, lat)``; ``CT = CT_from_t(SA, t, p)``;
    ``rho = rho(SA, CT, p)`` with the TEOS-10 Gibbs function (IOC, SCOR and
    IAPSO, 2010: The international thermodynamic equation of seawater - 2010;
    PyPI ``gsw``).  ``temperature`` in degC (ITS-90), ``salinity`` practical
    salinity, ``sea_pressure_dbar`` sea pressure (absolute minus 10.1325 dbar).
    """
    import gsw

    t = np.asarray(temperature, dtype=np.float64)
    p = np.clip(np.asarray(sea_pressure_dbar, dtype=np.float64), 0.0, None)
    sa = gsw.SA_from_SP(salinity, p, longitude, latitude)
    ct = gsw.CT_from_t(sa, t, p)
    return np.asarray(gsw.rho(sa, ct, p), dtype=np.float64)


def gravity_from_latitude(latitude: float) -> float:
    """Gravitational acceleration (m s-2) at the sea surface, TEOS-10 ``gsw.grav``."""
    import gsw

    return float(gsw.grav(latitude, 0.0))


def water_level_from_pressure(pressure_pa, *, air_pressure_pa, density, gravity, sensor_elevation_m):
    """Water level above the datum from an absolute pressure logger (m).

    Hydrostatic balance: ``h = z_sensor + (p - p_air) / (rho * g)`` with
    ``p`` absolute pressure and ``p_air`` atmospheric pressure in Pa, ``rho``
    seawater density in kg m-3, ``g`` in m s-2 and ``z_sensor`` the surveyed
    elevation of the pressure port above the datum in m.  Where the logger
    is out of water (``p <= p_air``) the level is at or below the sensor; it
    is returned as computed and left to the checks.
    """
    p = np.asarray(pressure_pa, dtype=np.float64)
    return sensor_elevation_m + (p - air_pressure_pa) / (np.asarray(density) * gravity)
