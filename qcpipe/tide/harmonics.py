"""Astronomical arguments, equilibrium arguments with nodal corrections, tide prediction,
and the site constituents file.

The tide at a site is predicted as

.. math::

    h(t) = Z_0 + \\sum_i f_i H_i \\cos(V_i(t) + u_i - g_i)

with :math:`H_i, g_i` the amplitude and Greenwich phase lag of constituent *i*,
:math:`V_i` its equilibrium argument at Greenwich and :math:`f_i, u_i` its nodal
factor and angle ([Schureman1958]_, Table 2 and the nodal formulas cited in
:mod:`qcpipe.tide.constituents`).

Time handling: times are numpy ``datetime64`` in UTC (any unit; NaT gives NaN).
The mean astronomical arguments are Schureman's polynomials in Julian centuries
from Greenwich mean noon of 1899 December 31 ([Schureman1958]_ Table 1); the
difference between UT and the ephemeris time of those polynomials (about a minute)
moves M2 by well under 0.05 degree and is ignored.  For efficiency the samples are
grouped by UTC day: the arguments, ``V + u`` and ``f`` are evaluated at 12:00 UTC of
each day and ``V`` is carried to each sample with the constituent's speed, which is
exact to the polynomials' curvature (under 1e-6 degree over half a day).  ``f`` and
``u`` change with the 18.6-year node cycle, so one value a day is far finer than
needed; predictions for any length of record therefore use per-day nodal
corrections, never one value for the whole period.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import numpy as np

from .constituents import CONSTITUENTS, constituent, nodal_corrections

#: Greenwich mean noon, 1899 December 31: origin of Schureman's polynomials
EPOCH = np.datetime64("1899-12-31T12:00:00", "us")
_US_PER_DAY = 86_400_000_000.0
_CHUNK = 32_768  # samples per block of the prediction (bounds memory to chunk x constituents)


@dataclass(frozen=True)
class AstronomicalArguments:
    """Mean astronomical arguments in degrees, each reduced to [0, 360).

    T: hour angle of the mean sun at Greenwich; tau: mean lunar time
    (T + h - s); s, h, p: mean longitudes of the moon, the sun and the lunar
    perigee; N: longitude of the moon's ascending node; p1: longitude of the
    solar perigee.
    """

    T: np.ndarray
    tau: np.ndarray
    s: np.ndarray
    h: np.ndarray
    p: np.ndarray
    N: np.ndarray
    p1: np.ndarray


@dataclass(frozen=True)
class HarmonicConstant:
    """Amplitude (m) and Greenwich phase lag (degrees, UTC) of one constituent."""

    name: str
    amplitude_m: float
    phase_deg: float
    amplitude_se_m: float | None = None
    phase_se_deg: float | None = None


@dataclass(frozen=True)
class Inference:
    """How an inferred constituent was set: its amplitude is ``amplitude_ratio`` times
    that of ``reference`` and its Greenwich phase lag that of ``reference`` plus
    ``phase_difference_deg`` (degrees)."""

    reference: str
    amplitude_ratio: float
    phase_difference_deg: float = 0.0


@dataclass(frozen=True)
class TideConstants:
    """Harmonic constants of a site (file format: :mod:`qcpipe.config.constituents`).

    The fit metadata are optional (None: not known, as for published constants):
    ``record_days`` the length of the record fitted (days, first to last valid
    sample); ``resolved`` the constituents fitted on their own; ``inferred`` the
    constituents set from a resolved one (name -> :class:`Inference`; also in
    ``constituents``); ``dropped`` those left out, name -> the constituent (or
    ``"Z0"``, the mean level) the record could not separate them from.
    """

    site: str
    datum: str
    mean_level_m: float
    constituents: tuple[HarmonicConstant, ...]
    source: str = ""
    epoch_note: str = "Greenwich phase lags, UTC"
    latitude_deg: float | None = None
    record_days: float | None = None
    resolved: tuple[str, ...] | None = None
    inferred: dict[str, Inference] | None = None
    dropped: dict[str, str] | None = None


def days_from_epoch(times) -> np.ndarray:
    """Days (float) since Greenwich mean noon 1899-12-31 of UTC datetime64 times; NaT -> NaN."""
    t = np.asarray(times)
    if not np.issubdtype(t.dtype, np.datetime64):
        raise TypeError(f"times must be numpy datetime64 (UTC); got dtype {t.dtype}")
    t = t.astype("datetime64[us]")
    days = (t - EPOCH).astype("int64") / _US_PER_DAY
    days = np.where(np.isnat(t), np.nan, days)
    return days


def astronomical_arguments_from_days(days) -> AstronomicalArguments:
    """Mean astronomical arguments at ``days`` since 1899-12-31 12:00 UTC.

    Notes
    -----
    Polynomials of [Schureman1958]_ Table 1 in Julian centuries ``c`` from that
    epoch (coefficients from memory):

    - s  = 270.434164 + 481267.8831 c - 0.001133 c^2 + 0.0000019 c^3
    - h  = 279.696678 + 36000.768925 c + 0.000303 c^2
    - p  = 334.329556 + 4069.034033 c - 0.010325 c^2 - 0.0000125 c^3
    - N  = 259.183275 - 1934.142008 c + 0.002078 c^2 + 0.0000022 c^3
    - p1 = 281.220844 + 1.719175 c + 0.000453 c^2 + 0.0000033 c^3

    and T = 360 deg x (fraction of the day since Greenwich noon).
    """
    d = np.asarray(days, dtype=float)
    c = d / 36525.0
    s = 270.434164 + 481267.8831 * c - 0.001133 * c**2 + 0.0000019 * c**3
    h = 279.696678 + 36000.768925 * c + 0.000303 * c**2
    p = 334.329556 + 4069.034033 * c - 0.010325 * c**2 - 0.0000125 * c**3
    N = 259.183275 - 1934.142008 * c + 0.002078 * c**2 + 0.0000022 * c**3
    p1 = 281.220844 + 1.719175 * c + 0.000453 * c**2 + 0.0000033 * c**3
    T = 360.0 * np.mod(d, 1.0)
    tau = T + h - s
    m = lambda x: np.mod(x, 360.0)  # noqa: E731
    return AstronomicalArguments(m(T), m(tau), m(s), m(h), m(p), m(N), m(p1))


def astronomical_arguments(times) -> AstronomicalArguments:
    """Mean astronomical arguments (degrees) at UTC datetime64 ``times``; see
    :func:`astronomical_arguments_from_days`."""
    return astronomical_arguments_from_days(days_from_epoch(times))


def _names(names) -> list[str]:
    return [constituent(n).name for n in names]


def _arguments_at_days(names: list[str], days: np.ndarray):
    """V (deg, without u), u (deg) and f at ``days``: arrays (len(days), len(names))."""
    a = astronomical_arguments_from_days(days)
    cons = [CONSTITUENTS[n] for n in names]
    coef = np.array([c.doodson for c in cons], dtype=float)            # (k, 6)
    const = np.array([c.phase_deg for c in cons])
    args = np.stack([a.tau, a.s, a.h, a.p, -a.N, a.p1], axis=-1)     # (m, 6)
    V = np.mod(args @ coef.T + const, 360.0)
    f, u = nodal_corrections(names, a.N, a.p)
    return V, u, f


def equilibrium_arguments(names, times) -> tuple[np.ndarray, np.ndarray]:
    """Equilibrium argument plus nodal angle, ``V + u`` (degrees in [0, 360)), and nodal
    factor ``f`` of each constituent at each time.

    Parameters
    ----------
    names : sequence of str
        Constituent names (see :data:`qcpipe.tide.CONSTITUENTS`).
    times : array_like of datetime64, shape (n,)
        UTC times.

    Returns
    -------
    vu_deg, f : numpy.ndarray, shape (n, len(names))

    Notes
    -----
    ``V`` from the Doodson coefficients and Schureman's constant phases; ``f, u``
    from [Schureman1958]_ evaluated at 12:00 UTC of each sample's day (module notes).
    """
    names = _names(names)
    days = np.atleast_1d(days_from_epoch(times))
    blocks = day_blocks(names, days)
    vu = np.mod(np.rad2deg(blocks.dt_hours[:, None] * blocks.speed_rad[None, :]
                           + blocks.vu_rad[blocks.index]), 360.0)
    return vu, blocks.f[blocks.index]


@dataclass
class _Blocks:
    index: np.ndarray      # (n,) day block of each valid sample
    dt_hours: np.ndarray   # (n,) hours from the block's reference time
    vu_rad: np.ndarray     # (nblocks, k) V + u at the reference time, radians
    f: np.ndarray          # (nblocks, k)
    speed_rad: np.ndarray  # (k,) radians per hour


def day_blocks(names: list[str], days: np.ndarray) -> _Blocks:
    """Group finite ``days`` by UTC day (reference 12:00 UTC) and evaluate V + u and f."""
    ref = np.round(days)                 # days count from noon: round() gives that day's noon
    uniq, index = np.unique(ref, return_inverse=True)
    V, u, f = _arguments_at_days(names, uniq)
    speeds = np.array([CONSTITUENTS[n].speed_deg_per_hour for n in names])
    return _Blocks(index.reshape(-1), (days - ref) * 24.0, np.deg2rad(V + u), f, np.deg2rad(speeds))


def constants_list(constituents) -> list[HarmonicConstant]:
    """Normalise a mapping {name: (amplitude_m, phase_deg)} or a sequence of
    HarmonicConstant / (name, amplitude_m, phase_deg) into a checked list."""
    if isinstance(constituents, TideConstants):
        raise TypeError("pass constants.constituents and mean_level=constants.mean_level_m, "
                        "not the TideConstants object itself")
    if isinstance(constituents, Mapping):
        items = [HarmonicConstant(k, *map(float, v)) for k, v in constituents.items()]
    elif isinstance(constituents, Iterable):
        items = [c if isinstance(c, HarmonicConstant) else HarmonicConstant(c[0], float(c[1]), float(c[2]))
                 for c in constituents]
    else:
        raise TypeError(f"constituents must be a mapping or a sequence; got {type(constituents).__name__}")
    seen: set[str] = set()
    out = []
    for c in items:
        try:
            name = constituent(c.name).name
        except KeyError as err:
            raise ValueError(err.args[0]) from None
        if name in seen:
            raise ValueError(f"constituent {name} is given twice; give each constituent once")
        seen.add(name)
        if not (math.isfinite(c.amplitude_m) and math.isfinite(c.phase_deg)):
            raise ValueError(f"constituent {name}: amplitude {c.amplitude_m!r} m and phase "
                             f"{c.phase_deg!r} deg must be finite")
        if c.amplitude_m < 0:
            raise ValueError(f"constituent {name}: amplitude {c.amplitude_m!r} m is negative; "
                             "use its absolute value and add 180 to the phase")
        out.append(HarmonicConstant(name, c.amplitude_m, c.phase_deg, c.amplitude_se_m, c.phase_se_deg))
    return out


def predict_tide(times, constituents, *, mean_level: float = 0.0) -> np.ndarray:
    """Predicted tide (m) at UTC ``times`` from harmonic constants.

    Parameters
    ----------
    times : array_like of datetime64, shape (n,)
        UTC times, in any order, regular or not; NaT gives NaN.
    constituents : mapping or sequence
        ``{name: (amplitude_m, greenwich_phase_deg)}``, or a sequence of
        :class:`HarmonicConstant` or ``(name, amplitude_m, greenwich_phase_deg)``.
        Phases are Greenwich phase lags referred to UTC.
    mean_level : float, default 0.0
        Z0, the mean level above the datum, m.

    Returns
    -------
    numpy.ndarray of float, shape (n,)
        Tide height above the datum, m.

    Notes
    -----
    :math:`h(t) = Z_0 + \\sum_i f_i H_i \\cos(V_i(t) + u_i - g_i)`, [Schureman1958]_,
    with ``f, u`` per UTC day (module notes).  Computed in blocks of
    32768 samples x constituents.
    """
    consts = constants_list(constituents)
    days = np.atleast_1d(days_from_epoch(times)).astype(float).reshape(-1)
    out = np.full(days.shape, np.nan)
    ok = np.isfinite(days)
    if not ok.any():
        return out
    if not consts:
        out[ok] = mean_level
        return out
    names = [c.name for c in consts]
    amp = np.array([c.amplitude_m for c in consts])
    g = np.deg2rad([c.phase_deg for c in consts])
    b = day_blocks(names, days[ok])
    phase0 = b.vu_rad - g[None, :]           # (nblocks, k)
    famp = b.f * amp[None, :]
    valid = np.empty(b.index.size)
    for start in range(0, b.index.size, _CHUNK):
        sl = slice(start, start + _CHUNK)
        idx = b.index[sl]
        arg = b.dt_hours[sl, None] * b.speed_rad[None, :]
        arg += phase0[idx]
        np.cos(arg, out=arg)
        arg *= famp[idx]
        valid[sl] = arg.sum(axis=1)
    out[ok] = valid + mean_level
    return out
