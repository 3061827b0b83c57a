"""Conversions from raw readings to physical quantities (pure, vectorised).

Names follow the ``quantity_from_input`` pattern; units are in the docstrings.
"""

from __future__ import annotations

import numpy as np

from ..arrays import EMERSED, IMMERSED, UNKNOWN


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
    out = np.where(w >= threshold, IMMERSED, EMERSED).astype(np.int8)
    out[np.isnan(w)] = UNKNOWN
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
    is returned as computed and left to the checks.  ``air_pressure_pa`` may
    be a scalar or one value per sample; a vented (gauge-pressure) logger
    has the air already subtracted: pass ``air_pressure_pa=0``.
    """
    p = np.asarray(pressure_pa, dtype=np.float64)
    return sensor_elevation_m + (p - air_pressure_pa) / (np.asarray(density) * gravity)


def air_pressure_at(times, barometer_times, barometer_pa, *, max_gap_s: float) -> np.ndarray:
    """A barometer's air pressure at ``times`` (Pa), NaN where it has no value.

    Linear interpolation between the barometer samples either side of a time,
    ``p(t) = p0 + (p1 - p0) (t - t0) / (t1 - t0)``, where ``t1 - t0 <= max_gap_s``;
    a time equal to a barometer sample takes that sample's value.  NaN where the
    two samples around a time are more than ``max_gap_s`` apart, and before the
    first or after the last barometer sample (no extrapolation).  Barometer
    samples that are NaN are left out first (their absence is a gap); of
    samples with the same time the first is kept.  ``times`` and
    ``barometer_times`` are datetime64 (or int64 ns), ``barometer_pa`` in Pa,
    ``max_gap_s`` in seconds (finite, > 0).  Common practice, no source.
    """
    if not np.isfinite(max_gap_s) or max_gap_s <= 0:
        raise ValueError(f"air_pressure_at: max_gap_s must be a finite number of seconds above 0, got {max_gap_s!r}")
    t = np.asarray(times, dtype="datetime64[ns]").astype(np.int64)
    bt = np.asarray(barometer_times, dtype="datetime64[ns]").astype(np.int64)
    bp = np.asarray(barometer_pa, dtype=np.float64)
    if bt.shape != bp.shape:
        raise ValueError(f"air_pressure_at: barometer_times {bt.shape} and barometer_pa {bp.shape} differ in shape")
    ok = np.isfinite(bp)
    bt, bp = bt[ok], bp[ok]
    order = np.argsort(bt, kind="stable")
    bt, first = np.unique(bt[order], return_index=True)
    bp = bp[order][first]
    out = np.full(t.shape, np.nan)
    if bt.size == 0 or t.size == 0:
        return out
    i = np.searchsorted(bt, t, side="right")          # bt[i-1] <= t < bt[i]
    exact = (i > 0) & (bt[np.clip(i - 1, 0, None)] == t)
    out[exact] = bp[i[exact] - 1]
    inside = (i > 0) & (i < bt.size) & ~exact
    j = i[inside]
    t0, t1 = bt[j - 1], bt[j]
    close = (t1 - t0) <= np.int64(round(max_gap_s * 1e9))
    frac = (t[inside] - t0) / (t1 - t0).astype(np.float64)
    out[np.flatnonzero(inside)[close]] = (bp[j - 1] + (bp[j] - bp[j - 1]) * frac)[close]
    return out


def nernst_slope_mv(temperature_c) -> np.ndarray:
    """Ideal Nernst slope of a pH electrode, mV per pH unit (negative).

    ``S(T) = -ln(10) R T / F`` with ``T`` in kelvin, the molar gas constant
    ``R`` and the Faraday constant ``F`` (CODATA values from
    ``scipy.constants``); about -59.16 mV/pH at 25 degC.
    """
    from scipy.constants import R, physical_constants

    faraday = physical_constants["Faraday constant"][0]
    t_k = np.asarray(temperature_c, dtype=np.float64) + 273.15
    return -np.log(10.0) * R * t_k / faraday * 1000.0


def ph_calibration_from_buffers(buffers) -> tuple[float, float]:
    """Electrode offset and slope efficiency from a two- or three-point buffer calibration.

    ``buffers`` is a sequence of ``(pH, millivolts, temperature_c)``.  Each
    buffer's potential is divided by the Nernst slope at its own temperature,
    so a straight line
    ``E / S(T) = a + b * pH`` is fitted by least squares (exact for two
    points).  Returns ``(e0_over_s, efficiency)`` with ``efficiency = b``
    (1.0 for an ideal electrode; 0.95-1.02 is common practice for a good
    one, no source) and the electrode's zero-potential pH ``-a / b``.
    """
    arr = np.asarray(buffers, dtype=np.float64)
    if arr.ndim != 2 or arr.shape[1] != 3 or not 2 <= arr.shape[0] <= 5:
        raise ValueError("buffers must be 2 to 5 rows of (pH, millivolts, temperature_c)")
    ph, mv, t = arr.T
    if np.ptp(ph) < 1.0:
        raise ValueError("calibration buffers must span at least 1 pH unit")
    y = mv / nernst_slope_mv(t)
    b, a = np.polyfit(ph, y, 1)
    return float(a), float(b)


def ph_from_millivolts(millivolts, temperature_c, *, buffers) -> np.ndarray:
    """pH from electrode potential with buffer calibration and temperature compensation.

    The electrode follows ``E = S(T) * (a + b * pH)`` where ``S(T)`` is the
    Nernst slope at the sample temperature (:func:`nernst_slope_mv`) and
    ``a, b`` come from :func:`ph_calibration_from_buffers`, so

        pH = (E / S(T) - a) / b

    ``millivolts`` in mV, ``temperature_c`` in degC (the sonde's own
    temperature; automatic temperature compensation of the slope only, the
    buffers' own temperature dependence is taken as their nominal values).
    Nernst equation as in IUPAC recommendations on pH measurement (Buck et al.
    2002, Pure Appl. Chem. 74, 2169), from memory.
    """
    a, b = ph_calibration_from_buffers(buffers)
    e = np.asarray(millivolts, dtype=np.float64)
    return (e / nernst_slope_mv(temperature_c) - a) / b
