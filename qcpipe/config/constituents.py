"""Site harmonic-constants files (TOML, our own format): read, validate, write.

::

    [tide]
    site = "Kelpwhistle Cove"
    datum = "chart datum"
    mean_level_m = 2.0                 # Z0 above the datum
    source = "..."                     # optional: where the constants come from
    epoch_note = "Greenwich phase lags, UTC"
    latitude_deg = -41.5               # optional

    # optional fit metadata (written by qcpipe's fit; published constants leave them out)
    record_days = 40.0                 # length of the record fitted, days
    resolved = ["M2", "K1", "S2"]      # constituents fitted on their own
    dropped = { MO3 = "2MK3" }         # left out: name = the one it could not be separated from

    [tide.inferred.K2]                 # optional: one table per inferred constituent
    reference = "S2"                   # resolved constituent it was set from
    amplitude_ratio = 0.272            # its amplitude / the reference's
    phase_difference_deg = 0.0         # its phase lag - the reference's

    [[tide.constituent]]               # one table per constituent (inferred ones too)
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
from ..tide.harmonics import HarmonicConstant, Inference, TideConstants, constants_list
from .loading import read_toml, validate


def _known_name(value: str) -> str:
    """Upper-case constituent name, or a ValueError naming the closest known ones."""
    key = value.strip().upper()
    if key not in CONSTITUENTS:
        import difflib

        close = difflib.get_close_matches(key, list(CONSTITUENTS), n=3)
        hint = f" (closest: {', '.join(close)})" if close else ""
        raise ValueError(f"unknown constituent {value!r}{hint}; use a name listed in "
                         "qcpipe.tide.constituents.CONSTITUENTS")
    return key


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
        return _known_name(value)


class _InferredEntry(pydantic.BaseModel):
    model_config = pydantic.ConfigDict(extra="forbid")

    reference: str
    amplitude_ratio: float = pydantic.Field(ge=0.0, allow_inf_nan=False)
    phase_difference_deg: float = pydantic.Field(default=0.0, allow_inf_nan=False)

    @pydantic.field_validator("reference")
    @classmethod
    def _known(cls, value: str) -> str:
        return _known_name(value)


def _names(values: list[str]) -> list[str]:
    return [_known_name(v) for v in values]


def _dropped(values: dict[str, str]) -> dict[str, str]:
    return {_known_name(k): ("Z0" if v.strip().upper() == "Z0" else _known_name(v)) for k, v in values.items()}


class _TideSection(pydantic.BaseModel):
    model_config = pydantic.ConfigDict(extra="forbid")

    site: str
    datum: str
    mean_level_m: float = pydantic.Field(allow_inf_nan=False)
    source: str = ""
    epoch_note: str = "Greenwich phase lags, UTC"
    latitude_deg: float | None = pydantic.Field(default=None, ge=-90.0, le=90.0)
    record_days: float | None = pydantic.Field(default=None, ge=0.0, allow_inf_nan=False)
    resolved: list[str] | None = None
    dropped: dict[str, str] | None = None
    inferred: dict[str, _InferredEntry] | None = None
    constituent: list[_ConstituentEntry] = pydantic.Field(min_length=1)

    @pydantic.field_validator("resolved")
    @classmethod
    def _resolved_names(cls, value: list[str] | None) -> list[str] | None:
        return None if value is None else _names(value)

    @pydantic.field_validator("dropped")
    @classmethod
    def _dropped_names(cls, value: dict[str, str] | None) -> dict[str, str] | None:
        return None if value is None else _dropped(value)


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
    inferred = None
    if t.inferred is not None:
        inferred = {}
        for key, e in t.inferred.items():
            try:
                name = _known_name(key)
            except ValueError as err:
                raise ConfigError(f"{path}: key tide.inferred.{key}: {err}") from None
            if name not in first_at:
                raise ConfigError(f"{path}: key tide.inferred.{key}: no [[tide.constituent]] entry named "
                                  f"{name}; add its constants or remove this table")
            inferred[name] = Inference(e.reference, e.amplitude_ratio, e.phase_difference_deg)
    return TideConstants(
        site=t.site, datum=t.datum, mean_level_m=t.mean_level_m, source=t.source,
        epoch_note=t.epoch_note, latitude_deg=t.latitude_deg,
        constituents=tuple(HarmonicConstant(e.name, e.amplitude_m, e.phase_deg,
                                            e.amplitude_se_m, e.phase_se_deg)
                           for e in t.constituent),
        record_days=t.record_days, resolved=None if t.resolved is None else tuple(t.resolved),
        inferred=inferred, dropped=t.dropped)


def write_constituents(path, constants: TideConstants) -> Path:
    """Write ``constants`` as a site constituents file, atomically (:func:`qcpipe.files.atomic_path`).

    Floats are written so that :func:`load_constituents` gives back the same values.
    """
    consts = constants_list(constants.constituents)
    if not consts:
        raise ValueError("a constituents file needs at least one constituent")
    numbers = [constants.mean_level_m, constants.latitude_deg or 0.0, constants.record_days or 0.0]
    numbers += [x for i in (constants.inferred or {}).values() for x in (i.amplitude_ratio, i.phase_difference_deg)]
    numbers += [x for c in consts for x in (c.amplitude_m, c.phase_deg, c.amplitude_se_m or 0.0, c.phase_se_deg or 0.0)]
    bad = next((x for x in numbers if not math.isfinite(float(x))), None)
    if bad is not None:
        raise ValueError(f"cannot write non-finite number {bad!r} to a constituents file")
    tide = {"site": constants.site, "datum": constants.datum, "mean_level_m": float(constants.mean_level_m),
            "source": constants.source, "epoch_note": constants.epoch_note,
            "latitude_deg": None if constants.latitude_deg is None else float(constants.latitude_deg),
            "record_days": None if constants.record_days is None else float(constants.record_days),
            "resolved": None if constants.resolved is None else list(constants.resolved),
            "dropped": None if constants.dropped is None else dict(constants.dropped),
            "inferred": None if constants.inferred is None else {
                name: {"reference": i.reference, "amplitude_ratio": float(i.amplitude_ratio),
                       "phase_difference_deg": float(i.phase_difference_deg)}
                for name, i in constants.inferred.items()},
            "constituent": [{"name": c.name, "amplitude_m": float(c.amplitude_m), "phase_deg": float(c.phase_deg),
                             "amplitude_se_m": c.amplitude_se_m, "phase_se_deg": c.phase_se_deg} for c in consts]}
    return write_text_atomic(path, toml_text(
        {"tide": tide}, comment="Tidal harmonic constants: Greenwich phase lags, amplitudes in metres."))
