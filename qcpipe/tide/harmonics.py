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

import json
import math
import os
import tempfile
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pydantic

from ..errors import ConfigError
from .constituents import ARGUMENT_RATES, CONSTITUENTS, constituent, nodal_corrections

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
class TideConstants:
    """The contents of a site constituents file (see :func:`load_constituents`)."""

    site: str
    datum: str
    mean_level_m: float
    constituents: tuple[HarmonicConstant, ...]
    source: str = ""
    epoch_note: str = "Greenwich phase lags, UTC"
    latitude_deg: float | None = None


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
    blocks = _day_blocks(names, days)
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


def _day_blocks(names: list[str], days: np.ndarray) -> _Blocks:
    """Group finite ``days`` by UTC day (reference 12:00 UTC) and evaluate V + u and f."""
    ref = np.round(days)                 # days count from noon: round() gives that day's noon
    uniq, index = np.unique(ref, return_inverse=True)
    V, u, f = _arguments_at_days(names, uniq)
    speeds = np.array([np.dot(CONSTITUENTS[n].doodson, ARGUMENT_RATES) for n in names])
    return _Blocks(index.reshape(-1), (days - ref) * 24.0, np.deg2rad(V + u), f, np.deg2rad(speeds))


def _constants_list(constituents) -> list[HarmonicConstant]:
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
    consts = _constants_list(constituents)
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
    b = _day_blocks(names, days[ok])
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


# ---------------------------------------------------------------- constituents file

class _ConstituentEntry(pydantic.BaseModel):
    model_config = pydantic.ConfigDict(extra="forbid")

    name: str
    amplitude_m: float = pydantic.Field(ge=0.0, allow_inf_nan=False)
    phase_deg: float = pydantic.Field(allow_inf_nan=False)
    amplitude_se_m: float | None = pydantic.Field(default=None, ge=0.0, allow_inf_nan=False)
    phase_se_deg: float | None = pydantic.Field(default=None, ge=0.0, allow_inf_nan=False)

    @pydantic.field_validator("name")
    @classmethod
    def _known(cls, value: str) -> str:
        key = value.strip().upper()
        if key not in CONSTITUENTS:
            import difflib

            close = difflib.get_close_matches(key, list(CONSTITUENTS), n=3)
            hint = f" (closest: {', '.join(close)})" if close else ""
            raise ValueError(f"unknown constituent {value!r}{hint}; use a name listed in "
                             "qcpipe.tide.CONSTITUENTS")
        return key


class _TideSection(pydantic.BaseModel):
    model_config = pydantic.ConfigDict(extra="forbid")

    site: str
    datum: str
    mean_level_m: float = pydantic.Field(allow_inf_nan=False)
    source: str = ""
    epoch_note: str = "Greenwich phase lags, UTC"
    latitude_deg: float | None = pydantic.Field(default=None, ge=-90.0, le=90.0)
    constituent: list[_ConstituentEntry] = pydantic.Field(min_length=1)


class _TideFile(pydantic.BaseModel):
    model_config = pydantic.ConfigDict(extra="forbid")

    tide: _TideSection


_HINTS = {
    "missing": "add this key",
    "extra_forbidden": "remove it or check its spelling",
    "greater_than_equal": "must be >= {ge}",
    "less_than_equal": "must be <= {le}",
    "too_short": "give at least one [[tide.constituent]] table",
    "finite_number": "give a finite number",
}


def _location(loc: tuple, data: dict) -> str:
    """'[[tide.constituent]] entry 3 (name 'M2'), key amplitude_m' or 'key tide.site'."""
    if len(loc) >= 3 and loc[:2] == ("tide", "constituent") and isinstance(loc[2], int):
        i = loc[2]
        try:
            name = data["tide"]["constituent"][i].get("name")
        except (KeyError, IndexError, TypeError, AttributeError):
            name = None
        where = f"[[tide.constituent]] entry {i + 1}" + (f" (name {name!r})" if name else "")
        rest = ".".join(str(x) for x in loc[3:])
        return f"{where}, key {rest}" if rest else where
    return "key " + (".".join(str(x) for x in loc) or "(top level)")


def load_constituents(path) -> TideConstants:
    """Read a site constituents file (TOML) into :class:`TideConstants`.

    The file holds one ``[tide]`` table (``site``, ``datum``, ``mean_level_m``,
    optional ``source``, ``epoch_note``, ``latitude_deg``) and one
    ``[[tide.constituent]]`` table per constituent (``name``, ``amplitude_m`` >= 0,
    ``phase_deg`` Greenwich phase lag in degrees referred to UTC, optional
    ``amplitude_se_m`` and ``phase_se_deg``).  Names are case-insensitive and
    stored upper-case.

    Raises
    ------
    qcpipe.errors.ConfigError
        One line naming the file, the key or ``[[tide.constituent]]`` entry (1-based)
        and name, what is wrong and how to fix it.
    """
    from ..config._load import read_toml

    path = Path(path)
    data = read_toml(path)
    try:
        model = _TideFile.model_validate(data)
    except pydantic.ValidationError as exc:
        errs = exc.errors(include_url=False)
        first = errs[0]
        where = _location(tuple(first["loc"]), data)
        msg = first["msg"].removeprefix("Value error, ")
        kind = first.get("type", "")
        bad = ""
        if kind not in ("missing", "value_error") and not isinstance(first.get("input"), (dict, list)):
            bad = f" (got {first.get('input')!r})"
        hint = _HINTS.get(kind, "correct the value").format(**(first.get("ctx") or {}))
        if kind == "greater_than_equal" and where.endswith("amplitude_m"):
            hint += ": give the size and add 180 to phase_deg"
        more = f" (and {len(errs) - 1} more)" if len(errs) > 1 else ""
        tail = "" if kind == "value_error" else f"; {hint}"
        raise ConfigError(f"{path}: {where}: {msg}{bad}{tail}{more}") from None
    first_at: dict[str, int] = {}
    for i, entry in enumerate(model.tide.constituent):
        if entry.name in first_at:
            raise ConfigError(
                f"{path}: [[tide.constituent]] entry {i + 1} (name {entry.name!r}): duplicate of "
                f"entry {first_at[entry.name] + 1}; keep one entry per constituent")
        first_at[entry.name] = i
    t = model.tide
    return TideConstants(
        site=t.site, datum=t.datum, mean_level_m=t.mean_level_m, source=t.source,
        epoch_note=t.epoch_note, latitude_deg=t.latitude_deg,
        constituents=tuple(HarmonicConstant(e.name, e.amplitude_m, e.phase_deg,
                                            e.amplitude_se_m, e.phase_se_deg)
                           for e in t.constituent))


def _toml_str(value: str) -> str:
    return json.dumps(str(value), ensure_ascii=False).replace("\x7f", "\\u007f")


def _toml_float(value: float) -> str:
    value = float(value)
    if not math.isfinite(value):
        raise ValueError(f"cannot write non-finite number {value!r} to a constituents file")
    return repr(value)


def write_constituents(path, constants: TideConstants) -> Path:
    """Write ``constants`` as a site constituents file (TOML) atomically.

    The text goes to a temporary file in the same folder, is flushed to disk and
    then renamed over ``path`` (``os.replace``), so a reader sees the old file or
    the new one, never a part.  Floats are written with ``repr`` so that
    :func:`load_constituents` gives back the same values.
    """
    path = Path(path)
    consts = _constants_list(constants.constituents)
    if not consts:
        raise ValueError("a constituents file needs at least one constituent")
    lines = [
        "# Tidal harmonic constants: Greenwich phase lags, amplitudes in metres.",
        "[tide]",
        f"site = {_toml_str(constants.site)}",
        f"datum = {_toml_str(constants.datum)}",
        f"mean_level_m = {_toml_float(constants.mean_level_m)}",
        f"source = {_toml_str(constants.source)}",
        f"epoch_note = {_toml_str(constants.epoch_note)}",
    ]
    if constants.latitude_deg is not None:
        lines.append(f"latitude_deg = {_toml_float(constants.latitude_deg)}")
    for c in consts:
        lines += ["", "[[tide.constituent]]", f"name = {_toml_str(c.name)}",
                  f"amplitude_m = {_toml_float(c.amplitude_m)}",
                  f"phase_deg = {_toml_float(c.phase_deg)}"]
        if c.amplitude_se_m is not None:
            lines.append(f"amplitude_se_m = {_toml_float(c.amplitude_se_m)}")
        if c.phase_se_deg is not None:
            lines.append(f"phase_se_deg = {_toml_float(c.phase_se_deg)}")
    text = "\n".join(lines) + "\n"
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path
