"""Site harmonic-constants files (TOML, our own format): read, validate, write.

::

    [tide]
    site = "Kelpwhistle Cove"
    datum = "chart datum"
    mean_level_m = 2.0                 # Z0 above the datum
    source = "..."                     # optional: where the constants come from
    epoch_note = "Greenwich phase lags, UTC"
    latitude_deg = -41.5               # optional

    [[tide.constituent]]               # one table per constituent
    name = "M2"                        # a name of qcpipe.tide.constituents.CONSTITUENTS (any case)
    amplitude_m = 1.6                  # >= 0
    phase_deg = 123.0                  # Greenwich phase lag, degrees, referred to UTC
    amplitude_se_m = 0.001             # optional standard errors
    phase_se_deg = 0.1
"""

from __future__ import annotations

import math
from pathlib import Path

import pydantic

from ..errors import ConfigError
from ..files import toml_text, write_text_atomic
from ..tide.constituents import CONSTITUENTS
from ..tide.harmonics import HarmonicConstant, TideConstants, constants_list
from .loading import read_toml, validate


class _ConstituentEntry(pydantic.BaseModel):
    model_config = pydantic.ConfigDict(extra="forbid")

    name: str
    amplitude_m: float = pydantic.Field(allow_inf_nan=False)
    phase_deg: float = pydantic.Field(allow_inf_nan=False)
    amplitude_se_m: float | None = pydantic.Field(default=None, ge=0.0, allow_inf_nan=False)
    phase_se_deg: float | None = pydantic.Field(default=None, ge=0.0, allow_inf_nan=False)

    @pydantic.field_validator("amplitude_m")
    @classmethod
    def _size(cls, value: float) -> float:
        if value < 0:
            raise ValueError(f"amplitude {value!r} is negative; give the size and add 180 to phase_deg")
        return value

    @pydantic.field_validator("name")
    @classmethod
    def _known(cls, value: str) -> str:
        key = value.strip().upper()
        if key not in CONSTITUENTS:
            import difflib

            close = difflib.get_close_matches(key, list(CONSTITUENTS), n=3)
            hint = f" (closest: {', '.join(close)})" if close else ""
            raise ValueError(f"unknown constituent {value!r}{hint}; use a name listed in "
                             "qcpipe.tide.constituents.CONSTITUENTS")
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


def load_constituents(path) -> TideConstants:
    """Read a site constituents file into :class:`~qcpipe.tide.harmonics.TideConstants`.

    Names are case-insensitive and stored upper-case.  Any problem is one
    :class:`~qcpipe.errors.ConfigError` line naming the file, the key (constituent entries
    by their name), what is wrong and how to fix it.
    """
    path = Path(path)
    data = read_toml(path)
    model = validate(_TideFile, data, path)
    first_at: dict[str, int] = {}
    for i, entry in enumerate(model.tide.constituent):
        if entry.name in first_at:
            raise ConfigError(
                f"{path}: key tide.constituent[{i}] (name {entry.name!r}): duplicate of "
                f"tide.constituent[{first_at[entry.name]}]; keep one entry per constituent")
        first_at[entry.name] = i
    t = model.tide
    return TideConstants(
        site=t.site, datum=t.datum, mean_level_m=t.mean_level_m, source=t.source,
        epoch_note=t.epoch_note, latitude_deg=t.latitude_deg,
        constituents=tuple(HarmonicConstant(e.name, e.amplitude_m, e.phase_deg,
                                            e.amplitude_se_m, e.phase_se_deg)
                           for e in t.constituent))


def write_constituents(path, constants: TideConstants) -> Path:
    """Write ``constants`` as a site constituents file, atomically (:func:`qcpipe.files.atomic_path`).

    Floats are written so that :func:`load_constituents` gives back the same values.
    """
    consts = constants_list(constants.constituents)
    if not consts:
        raise ValueError("a constituents file needs at least one constituent")
    numbers = [constants.mean_level_m, constants.latitude_deg or 0.0]
    numbers += [x for c in consts for x in (c.amplitude_m, c.phase_deg, c.amplitude_se_m or 0.0, c.phase_se_deg or 0.0)]
    bad = next((x for x in numbers if not math.isfinite(float(x))), None)
    if bad is not None:
        raise ValueError(f"cannot write non-finite number {bad!r} to a constituents file")
    tide = {"site": constants.site, "datum": constants.datum, "mean_level_m": float(constants.mean_level_m),
            "source": constants.source, "epoch_note": constants.epoch_note,
            "latitude_deg": None if constants.latitude_deg is None else float(constants.latitude_deg),
            "constituent": [{"name": c.name, "amplitude_m": float(c.amplitude_m), "phase_deg": float(c.phase_deg),
                             "amplitude_se_m": c.amplitude_se_m, "phase_se_deg": c.phase_se_deg} for c in consts]}
    return write_text_atomic(path, toml_text(
        {"tide": tide}, comment="Tidal harmonic constants: Greenwich phase lags, amplitudes in metres."))
