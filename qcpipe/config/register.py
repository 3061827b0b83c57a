"""The station register: sites, stations, instruments and deployments.

File format (TOML, our own)::

    [register]
    name = "..."                       # free text
    institution, creator_name, creator_email, creator_url, license, naming_authority   # ACDD attributes
    publisher_name, publisher_email, publisher_url   # optional: who distributes the outputs (default: the creator)
    acknowledgement = "..."; comment = "..."          # optional: ACDD acknowledgement, comment on every output
    [[site]]
    id = "..."; name = "..."; vertical_datum = "..."
    tide_constituents = "tide/site.toml"   # optional harmonic constants (path relative to this file)
    [[station]]
    id, site, name, latitude, longitude, elevation_m   # sensing point above the site's datum
    [[instrument]]
    serial, kind, layout               # kind: immersion_probe | temperature | ph | conductivity | pressure | barometer
    [[deployment]]
    id, station, instrument, start, end, clock_offset   # start/end UTC; clock_offset "+01:00"
    clock_check = { logger_time = 2026-10-20T11:02:10, reference_time = 2026-10-20T10:00:00Z }
    probe_reference = { air = 410.0, water = 1180.0 }   # immersion probes only
    ph_calibration = { buffers = [[7.0, -3.2, 20.0], [4.01, 168.5, 20.0]] }  # sondes logging millivolts
    pressure = { air_pressure_hpa = 1013.25, salinity = 34.0 }  # pressure loggers only
    # air pressure: the site's barometers (kind "barometer", deployed at any station of
    # the same site) where they have a valid value, else air_pressure_hpa;
    # use_barometer = false always subtracts the constant; barometer_max_gap is the
    # longest step between barometer samples interpolated across ("2 h" by default);
    # vented = true: the logger measures gauge pressure, nothing is subtracted
    pressure = { vented = true, salinity = 34.0 }
    # a confirmed clock correction (written by 'qcpipe apply-clock'): the logger's times were
    # shift_s seconds ahead of true time after clock_offset and the clock check; ingest subtracts it
    clock_correction = { shift_s = 3600.0, confirmed_by = "A. Reviewer", confirmed_on = 2026-11-02, verdict = "...", evidence = "kc-mid-probe-2026-09 v001" }
"""

from __future__ import annotations

import datetime as dt
import re
from pathlib import Path
from typing import Literal

from pydantic import AwareDatetime, BaseModel, ConfigDict, Field, field_validator, model_validator

from ..errors import ConfigError
from ..units import seconds_from_duration
from .loading import DeploymentId, Serial, SiteId, StationId, content_sha256, read_toml, validate

InstrumentKind = Literal["immersion_probe", "temperature", "ph", "conductivity", "pressure", "barometer"]

_OFFSET_RE = re.compile(r"^([+-])(\d{2}):(\d{2})$")
#: years a deployment's times may lie in (UTC): far inside what datetime64[ns] can hold
YEARS = (1900, 2199)
#: the largest clock drift a clock check may imply (seconds per day); more is a wrong offset or a typo
MAX_DRIFT_S_PER_DAY = 3600.0


def _in_years(v: dt.datetime, what: str) -> dt.datetime:
    if not YEARS[0] <= v.year <= YEARS[1] or (v.utcoffset() is not None and
                                              not YEARS[0] <= (v.replace(tzinfo=None) - v.utcoffset()).year <= YEARS[1]):
        raise ValueError(f"{what} {v.isoformat()} is not in the years {YEARS[0]} to {YEARS[1]}")
    return v


def _naive_utc(v: dt.datetime) -> dt.datetime:
    return v.replace(tzinfo=None) - v.utcoffset()


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


_EMAIL_RE = re.compile(r"^[^@\s]+@[^@\s]+\.[^@\s]+$")
_URL_RE = re.compile(r"^https?://[^\s/]+\.[^\s]+$")


class RegisterInfo(_Strict):
    """The register's own table: who made the data and who publishes them (ACDD-1.3 attributes of every output)."""
    name: str
    description: str = ""
    institution: str = ""
    creator_name: str = ""
    creator_email: str = ""
    creator_url: str = ""
    publisher_name: str = Field("", description="who distributes the outputs (default: institution, else creator)")
    publisher_email: str = Field("", description="publisher's contact address (default: creator_email)")
    publisher_url: str = Field("", description="publisher's web page (default: creator_url)")
    acknowledgement: str = Field("", description="funding and support to acknowledge, on every output")
    comment: str = Field("", description="a remark written into every output's comment")
    license: str = "CC-BY-4.0"
    naming_authority: str = "org.example.qcpipe"

    @field_validator("publisher_email", "publisher_url")
    @classmethod
    def _address(cls, v: str, info) -> str:
        pattern, what, example = ((_EMAIL_RE, "an e-mail address", "name@domain.org") if info.field_name.endswith("email")
                                  else (_URL_RE, "a web address", "https://domain.org/..."))
        if v and not pattern.match(v):
            raise ValueError(f"{v!r} is not {what}; write it as {example}, or leave the key out")
        return v

    @property
    def publisher(self) -> tuple[str, str, str]:
        """(name, email, url) of the publisher: the publisher keys, else the institution or creator's."""
        return (self.publisher_name or self.institution or self.creator_name,
                self.publisher_email or self.creator_email, self.publisher_url or self.creator_url)


class Site(_Strict):
    id: SiteId
    name: str
    vertical_datum: str = Field(description="name of the vertical datum that elevations refer to")
    description: str = ""
    tide_constituents: str | None = Field(None, description="harmonic constants file (relative to the register)")



class Station(_Strict):
    id: StationId
    site: str
    name: str
    latitude: float = Field(ge=-90, le=90)
    longitude: float = Field(ge=-180, le=180)
    elevation_m: float = Field(description="sensing point above the site's vertical datum, metres")
    description: str = ""



class Instrument(_Strict):
    serial: Serial
    kind: InstrumentKind
    layout: str
    description: str = ""



class ClockCheck(_Strict):
    """Logger clock read against a reference clock at recovery."""
    logger_time: dt.datetime = Field(description="what the logger showed, in its own clock (no offset)")
    reference_time: AwareDatetime

    @field_validator("logger_time")
    @classmethod
    def _naive(cls, v: dt.datetime) -> dt.datetime:
        if v.tzinfo is not None:
            raise ValueError("logger_time is the logger's own clock reading; write it without an offset")
        return _in_years(v, "logger_time")

    @field_validator("reference_time")
    @classmethod
    def _years(cls, v: dt.datetime) -> dt.datetime:
        return _in_years(v, "reference_time")


#: the largest clock correction accepted (seconds); more is a date or clock_offset mistake
MAX_CLOCK_CORRECTION_S = 86400.0


class ClockCorrection(_Strict):
    """A clock error confirmed by a person (the deployment's ``clock_correction`` table).

    ``shift_s`` is how far the logger's times are still ahead of true time after the
    register's ``clock_offset`` and clock-check drift are applied (positive: ahead, the
    sign of a probe's clock verdict); ingest subtracts it from every sample time.
    """
    shift_s: float = Field(description="logger time minus true time left after clock_offset and drift, s")
    confirmed_by: str = Field(min_length=1, description="who confirmed the correction")
    confirmed_on: dt.date = Field(description="when it was confirmed (a TOML date)")
    verdict: str = Field("", description="the clock verdict the correction came from (text)")
    evidence: str = Field("", description="the dataset the verdict was read from (deployment and version)")

    @field_validator("shift_s")
    @classmethod
    def _size(cls, v: float) -> float:
        if v == 0 or abs(v) > MAX_CLOCK_CORRECTION_S:
            raise ValueError(f"shift_s must be non-zero and at most {MAX_CLOCK_CORRECTION_S:.0f} s in size; "
                             "a larger error is a date or clock_offset mistake: correct those instead")
        return v

    @field_validator("confirmed_by")
    @classmethod
    def _named(cls, v: str) -> str:
        if not v.strip():
            raise ValueError("confirmed_by is empty; name the person who confirmed the correction")
        return v


class ProbeReference(_Strict):
    """Immersion-probe readings taken in air and in water (raw units)."""
    air: float
    water: float

    @model_validator(mode="after")
    def _distinct(self):
        if self.air == self.water:
            raise ValueError("air and water readings are equal; the probe cannot tell wet from dry")
        return self


class PhCalibration(_Strict):
    """Buffer readings of a pH sonde that logs electrode millivolts."""
    buffers: list[tuple[float, float, float]] = Field(
        min_length=2, max_length=5, description="(pH of buffer, millivolts read, buffer temperature degC)")

    @model_validator(mode="after")
    def _span(self):
        phs = [b[0] for b in self.buffers]
        if max(phs) - min(phs) < 1.0:
            raise ValueError("calibration buffers must span at least 1 pH unit (e.g. pH 7 and 4 or 10)")
        return self


class PressureSettings(_Strict):
    """How a pressure logger's readings become water level (the deployment's ``pressure`` table)."""
    air_pressure_hpa: float = Field(1013.25, gt=500, lt=1100, description="air pressure subtracted where no "
                                    "barometer value is used (hPa)")
    salinity: float = Field(35.0, ge=0, le=42, description="practical salinity used for density")
    vented: bool = Field(False, description="the logger measures gauge pressure (air already subtracted)")
    use_barometer: bool = Field(True, description="subtract the site's barometer series where it has a valid value")
    barometer_max_gap: float = Field(7200.0, description="longest step between barometer samples that is "
                                     "interpolated across, seconds (text such as '2 h' in the file)")

    @field_validator("barometer_max_gap", mode="before")
    @classmethod
    def _gap(cls, v):
        if isinstance(v, float) and v > 0:            # the default
            return v
        if not isinstance(v, str):
            raise ValueError(f"barometer_max_gap is a duration as text, e.g. '2 h', got {v!r}")
        s = seconds_from_duration(v)
        if not 0 < s < float("inf"):
            raise ValueError(f"barometer_max_gap {v!r} must be longer than zero")
        return s

    @model_validator(mode="after")
    def _vented(self):
        if self.vented and {"air_pressure_hpa", "use_barometer", "barometer_max_gap"} & self.model_fields_set:
            raise ValueError("a vented logger has the air pressure already subtracted; remove air_pressure_hpa, "
                             "use_barometer and barometer_max_gap, or set vented = false")
        return self

    @property
    def uses_barometer(self) -> bool:
        return self.use_barometer and not self.vented


class Deployment(_Strict):
    id: DeploymentId
    station: str
    instrument: str
    start: AwareDatetime
    end: AwareDatetime
    clock_offset: str = Field("+00:00", description="logger clock minus UTC, '+HH:MM'")
    clock_set: AwareDatetime | None = Field(None, description="when the clock was last set (default: start)")
    clock_check: ClockCheck | None = None
    probe_reference: ProbeReference | None = None
    pressure: PressureSettings | None = None
    ph_calibration: PhCalibration | None = None
    clock_correction: ClockCorrection | None = None

    @field_validator("start", "end", "clock_set")
    @classmethod
    def _years(cls, v, info):
        return v if v is None else _in_years(v, info.field_name)

    @field_validator("clock_offset")
    @classmethod
    def _offset(cls, v: str) -> str:
        m = _OFFSET_RE.match(v)
        if not m or int(m.group(3)) >= 60 or int(m.group(2)) > 14:
            raise ValueError("clock_offset must look like '+01:00' or '-03:30' (logger clock minus UTC)")
        return v

    @model_validator(mode="after")
    def _window(self):
        if self.end <= self.start:
            raise ValueError(f"deployment end {self.end.isoformat()} is not after start {self.start.isoformat()}; swap or correct them")
        if self.clock_check is not None:
            # the drift correction runs from clock_set to the clock check, on the UTC axis
            clock_set = _naive_utc(self.clock_set or self.start)
            check = self.clock_check.logger_time - dt.timedelta(seconds=self.offset_seconds)
            span = (check - clock_set).total_seconds()
            if span <= 0:
                raise ValueError(f"clock_check.logger_time {self.clock_check.logger_time.isoformat()} (logger clock) "
                                 f"is not after clock_set {clock_set.isoformat()} UTC; correct the clock check, "
                                 "clock_set or clock_offset")
            error = (check - _naive_utc(self.clock_check.reference_time)).total_seconds()
            per_day = abs(error) / span * 86400.0
            if per_day > MAX_DRIFT_S_PER_DAY:
                raise ValueError(f"clock_check implies a clock drift of {per_day:.0f} s per day since clock_set, more "
                                 f"than {MAX_DRIFT_S_PER_DAY:.0f}; check clock_offset and the clock check times")
        return self

    @property
    def correction_seconds(self) -> float:
        """The confirmed clock correction subtracted from the UTC times (0 without one)."""
        return 0.0 if self.clock_correction is None else float(self.clock_correction.shift_s)

    @property
    def offset_seconds(self) -> float:
        m = _OFFSET_RE.match(self.clock_offset)
        sign = 1 if m.group(1) == "+" else -1
        return sign * (int(m.group(2)) * 3600 + int(m.group(3)) * 60)


class Register(_Strict):
    info: RegisterInfo = Field(alias="register")
    site: list[Site]
    station: list[Station]
    instrument: list[Instrument]
    deployment: list[Deployment] = []

    @model_validator(mode="after")
    def _links(self):
        def unique(items, attr, what):
            seen = set()
            for i, it in enumerate(items):
                key = getattr(it, attr)
                if key in seen:
                    raise ValueError(f"{what} {key!r} appears twice ([{i}]); give each a unique {attr}")
                seen.add(key)
            return seen
        sites = unique(self.site, "id", "site")
        stations = unique(self.station, "id", "station")
        serials = unique(self.instrument, "serial", "instrument")
        unique(self.deployment, "id", "deployment")
        for st in self.station:
            if st.site not in sites:
                raise ValueError(f"station {st.id!r} names site {st.site!r}, which is not in [[site]]")
        kinds = {i.serial: i.kind for i in self.instrument}
        for d in self.deployment:
            if d.station not in stations:
                raise ValueError(f"deployment {d.id!r} names station {d.station!r}, which is not in [[station]]")
            if d.instrument not in serials:
                raise ValueError(f"deployment {d.id!r} names instrument {d.instrument!r}, which is not in [[instrument]]")
            if d.probe_reference is not None and kinds[d.instrument] != "immersion_probe":
                raise ValueError(f"deployment {d.id!r}: probe_reference is only for immersion probes")
            if d.pressure is not None and kinds[d.instrument] != "pressure":
                raise ValueError(f"deployment {d.id!r}: the pressure table is only for pressure loggers "
                                 f"(instrument {d.instrument!r} is a {kinds[d.instrument]}); remove it")
        by_inst: dict[str, list[Deployment]] = {}
        for d in self.deployment:
            by_inst.setdefault(d.instrument, []).append(d)
        for serial, deps in by_inst.items():
            deps = sorted(deps, key=lambda d: d.start)
            for a, b in zip(deps, deps[1:]):
                if b.start < a.end:
                    raise ValueError(f"deployments {a.id!r} and {b.id!r} of instrument {serial!r} overlap in time; "
                                     "an instrument can be in one place at a time")
        return self

    # lookups -------------------------------------------------------------
    def station_by_id(self, station_id: str) -> Station:
        return next(s for s in self.station if s.id == station_id)

    def site_by_id(self, site_id: str) -> Site:
        return next(s for s in self.site if s.id == site_id)

    def instrument_by_serial(self, serial: str) -> Instrument | None:
        return next((i for i in self.instrument if i.serial == serial), None)

    def deployment_by_id(self, dep_id: str) -> Deployment:
        return next(d for d in self.deployment if d.id == dep_id)

    def deployments_of(self, serial: str) -> list[Deployment]:
        return [d for d in self.deployment if d.instrument == serial]

    def station_companions(self, dep_id: str) -> list[str]:
        """The other deployments of a deployment's station that overlap it in time (sorted ids)."""
        dep = self.deployment_by_id(dep_id)
        return sorted(d.id for d in self.deployment
                      if d.station == dep.station and d.id != dep.id and d.start < dep.end and d.end > dep.start)

    def kind_of(self, dep_id: str) -> str:
        """The instrument kind of a deployment (``immersion_probe``, ``pressure``, ``barometer``, ...)."""
        return self.instrument_by_serial(self.deployment_by_id(dep_id).instrument).kind


class LoadedRegister:
    """A validated register with the path and content hash it came from."""

    def __init__(self, model: Register, path: Path, sha256: str):
        self.model, self.path, self.sha256 = model, path, sha256

    def __getattr__(self, name):
        if name == "model":        # not set yet (unpickling): no recursion through self.model
            raise AttributeError(name)
        return getattr(self.model, name)

    def constituents_path(self, site_id: str) -> Path | None:
        """The site's harmonic-constants file, resolved against the register's folder."""
        site = self.model.site_by_id(site_id)
        return None if site.tide_constituents is None else (self.path.parent / site.tide_constituents).resolve()


def load_register(path: str | Path) -> LoadedRegister:
    """Read and validate a station register; raise ConfigError naming file and key."""
    path = Path(path)
    data = read_toml(path)
    model = validate(Register, data, path)
    return LoadedRegister(model, path, content_sha256(data))


__all__ = ["Register", "Site", "Station", "Instrument", "Deployment", "ClockCheck", "ClockCorrection",
           "ProbeReference", "PressureSettings", "load_register", "LoadedRegister", "ConfigError"]
