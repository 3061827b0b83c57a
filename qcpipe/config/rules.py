"""Rule sets: the parameters of each QC check, per variable and optionally per station.

File format (TOML, our own)::

    [rule_set]
    name = "..."
    [variable.temperature]
    units = "degC"                      # the units every threshold below is in
    gross_range = { sensor_min = -5, sensor_max = 45, expected_min = -2, expected_max = 38 }
    spike = { half_window = "30 min", suspect = 2.0, fail = 5.0 }
    rate_of_change = { window = "25 h", n_sigma = 5 }
    flat_line = { tolerance = 0.001, suspect_after = "2 h", fail_after = "6 h" }   # reference, mode optional
    gap = { max_gap = "45 min" }
    [[variable.temperature.climatology]]
    months = [12, 1, 2]; min = 2.0; max = 18.0
    [station.<station id>.variable.temperature]  # per-station overrides, merged key by key
    spike = { suspect = 3.0 }

Durations are text ("45 min"); thresholds are numbers in the variable's ``units``.
"""

from __future__ import annotations

import copy
import math
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from ..errors import ConfigError
from ..units import seconds_from_duration
from .loading import check_safe_id, content_sha256, read_toml, safe_id, shown, shown_key, validate

#: stored units of each variable the checks can see
VARIABLE_UNITS = {
    "temperature": "degC",
    "ph": "1",
    "conductivity": "S m-1",
    "pressure": "Pa",
    "water_level": "m",
    "wetness": "1",
    "air_pressure": "Pa",
}
#: rule-set keys that are not per-variable (hashed with every variable's rules)
GLOBAL_KEYS = ("immersion", "tide_timing")


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


#: the longest duration a rule set may give (a window, a settling time, a gap): a year of 366 days.
#: Loggers are recovered every few weeks to months; a check's window beyond a year is a typing error.
MAX_DURATION_S = 366 * 86400.0
#: the most samples a count parameter (min_samples, min_neighbours...) may ask for
MAX_COUNT = 100_000
#: the largest water-level threshold (m): more than any tidal range on Earth (about 16 m)
MAX_LEVEL_M = 20.0


def _duration(v: Any) -> float:
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        raise ValueError(f"durations are text with a unit, e.g. '{v} min'")
    s = seconds_from_duration(v)
    if not math.isfinite(s):
        raise ValueError(f"duration {v!r} is not a finite length of time")
    if s <= 0:
        raise ValueError(f"duration {v!r} must be longer than zero")
    if s > MAX_DURATION_S:
        raise ValueError(f"duration {v!r} is longer than a year (366 d), the longest a rule set allows; "
                         "give a shorter one")
    return s


def _seconds_or_duration(v: Any) -> float:
    """Seconds given as a float (the defaults) or a duration text; either must be finite, positive and at
    most :data:`MAX_DURATION_S`."""
    if isinstance(v, float):
        if not math.isfinite(v) or not 0 < v <= MAX_DURATION_S:
            raise ValueError(f"duration {v!r} s must be finite, longer than zero and at most a year (366 d)")
        return v
    return _duration(v)


class GrossRange(_Strict):
    sensor_min: float
    sensor_max: float
    expected_min: float | None = None
    expected_max: float | None = None

    @model_validator(mode="after")
    def _order(self):
        if self.sensor_min >= self.sensor_max:
            raise ValueError(f"sensor_min {self.sensor_min} must be below sensor_max {self.sensor_max}")
        if (self.expected_min is None) != (self.expected_max is None):
            raise ValueError("give both expected_min and expected_max, or neither")
        if self.expected_min is not None:
            if self.expected_min >= self.expected_max:
                raise ValueError(f"expected_min {self.expected_min} must be below expected_max {self.expected_max}")
            if self.expected_min < self.sensor_min or self.expected_max > self.sensor_max:
                raise ValueError("expected limits must lie inside the sensor limits")
        return self


class Season(_Strict):
    months: list[int] = Field(min_length=1)
    min: float
    max: float

    @field_validator("months")
    @classmethod
    def _months(cls, v):
        bad = [m for m in v if not 1 <= m <= 12]
        if bad:
            raise ValueError(f"months must be 1..12, got {bad}")
        return v

    @model_validator(mode="after")
    def _order(self):
        if self.min >= self.max:
            raise ValueError(f"min {self.min} must be below max {self.max}")
        return self


class Spike(_Strict):
    half_window: float = Field(description="seconds either side (text in the file)")
    suspect: float = Field(gt=0)
    fail: float = Field(gt=0)
    min_neighbours: int = Field(2, ge=1, le=MAX_COUNT)
    one_sided_edges: bool = Field(False, strict=True, description="also evaluate samples with neighbours "
                                  "on one side only (record ends, beside gaps); else they are not evaluated")

    _d = field_validator("half_window", mode="before")(classmethod(lambda cls, v: _duration(v)))

    @model_validator(mode="after")
    def _order(self):
        if self.fail < self.suspect:
            raise ValueError(f"fail {self.fail} must not be below suspect {self.suspect}")
        return self


class RateOfChange(_Strict):
    window: float
    n_sigma: float = Field(gt=0, le=100)
    min_samples: int = Field(3, ge=2, le=MAX_COUNT)

    _d = field_validator("window", mode="before")(classmethod(lambda cls, v: _duration(v)))


class FlatLine(_Strict):
    tolerance: float = Field(ge=0)
    suspect_after: float
    fail_after: float
    reference: Literal["current", "previous"] = Field("current", description="earlier values compared with "
                                                      "the current one, or each value with the previous one")
    mode: Literal["delayed", "real_time"] = Field("delayed", description="whole record at hand (a stuck "
                                                  "stretch flagged from its first sample), or look back only")

    _d = field_validator("suspect_after", "fail_after", mode="before")(classmethod(lambda cls, v: _duration(v)))

    @model_validator(mode="after")
    def _order(self):
        if self.fail_after < self.suspect_after:
            raise ValueError("fail_after must not be shorter than suspect_after")
        return self


class Gap(_Strict):
    max_gap: float

    _d = field_validator("max_gap", mode="before")(classmethod(lambda cls, v: _duration(v)))


class ImmersionConsistency(_Strict):
    """Immersion-probe state against the reference water level (wetness only)."""
    margin_m: float = Field(ge=0, le=MAX_LEVEL_M, description="swash/wave band either side of the sensor elevation, m")
    fail_after: float

    _d = field_validator("fail_after", mode="before")(classmethod(lambda cls, v: _duration(v)))


class ImmersionGating(_Strict):
    """Sensors that only work under water (pH, conductivity): fail in air, suspect while settling."""
    settle: float

    _d = field_validator("settle", mode="before")(classmethod(lambda cls, v: _duration(v)))


class TideResidual(_Strict):
    """Observed water level against the harmonic prediction (water_level only), m."""
    suspect: float = Field(gt=0, le=MAX_LEVEL_M)
    fail: float = Field(gt=0, le=MAX_LEVEL_M)

    @model_validator(mode="after")
    def _order(self):
        if self.fail < self.suspect:
            raise ValueError(f"fail {self.fail} must not be below suspect {self.suspect}")
        return self


#: checks whose parameters may be given per immersion state (when_immersed / when_emersed)
STATE_AWARE = ("gross_range", "climatology", "spike", "rate_of_change", "flat_line")


class _StateRules(_Strict):
    gross_range: GrossRange | None = None
    climatology: list[Season] | None = None
    spike: Spike | None = None
    rate_of_change: RateOfChange | None = None
    flat_line: FlatLine | None = None


class VariableRules(_Strict):
    units: str
    gross_range: GrossRange | None = None
    climatology: list[Season] | None = None
    spike: Spike | None = None
    rate_of_change: RateOfChange | None = None
    flat_line: FlatLine | None = None
    gap: Gap | None = None
    immersion_consistency: ImmersionConsistency | None = None
    immersion_gating: ImmersionGating | None = None
    tide_residual: TideResidual | None = None
    when_immersed: _StateRules | None = None
    when_emersed: _StateRules | None = None

    def checks(self) -> list[str]:
        return [name for name in CHECK_ORDER if getattr(self, name) is not None]

    def for_state(self, state: str) -> "VariableRules":
        """These rules with the ``when_<state>`` parameters in place of the base ones."""
        over = getattr(self, f"when_{state}")
        if over is None:
            return self
        return self.model_copy(update={k: getattr(over, k) for k in STATE_AWARE if getattr(over, k) is not None})

    @property
    def state_aware(self) -> bool:
        return self.when_immersed is not None or self.when_emersed is not None


CHECK_ORDER = ("gross_range", "climatology", "spike", "rate_of_change", "flat_line", "gap",
               "immersion_consistency", "immersion_gating", "tide_residual")


class ImmersionSettings(_Strict):
    """How immersion-probe readings become a wet/dry state (rule-set table [immersion])."""
    hysteresis_fraction: float = Field(0.1, ge=0, lt=0.5, description="half-band around the threshold as a "
                                       "fraction of the distance between the dry and wet class means")
    min_state: float = 600.0
    min_separation: float = Field(6.0, gt=0, description="below this separation of the two classes (Ashman's D, "
                                  "robust) the probe is not clearly bimodal: its immersion series is flagged suspect")
    min_class_samples: int = Field(6, ge=1, le=MAX_COUNT, description="fewest readings of the rarer state, in runs of two or more, "
                                   "before the probe is believed to show two states; fewer: suspect")
    reference_tolerance: float = Field(0.25, gt=0, lt=1, description="allowed difference between the automatic "
                                       "threshold and the midpoint of the air/water references, as a fraction "
                                       "of their distance")
    health_window: float = Field(24.8412 * 3600.0, description="window of the time-local health measure "
                                 "(default one mean tidal day)")
    level_band: float = Field(0.2, gt=0, lt=0.5, description="a reading within this fraction of the class "
                              "distance of a class level is at that level; others are between")
    max_level_shift: float = Field(0.05, gt=0, lt=0.5, description="shift of a window's class level, as a "
                                   "fraction of the class distance, that makes the window suspect")
    min_between_run: float = Field(1800.0, description="readings held between the levels this long are a "
                                   "fouling sign (wetting and draining pass the band faster)")
    min_window_samples: int = Field(6, ge=1, le=MAX_COUNT, description="fewest readings of the kind a window counts before "
                                    "it gets a verdict")
    min_period: float = Field(86400.0, description="shortest unreliable period reported and flagged")

    _d = field_validator("min_state", "health_window", "min_between_run", "min_period",
                         mode="before")(classmethod(lambda cls, v: _seconds_or_duration(v)))

    @model_validator(mode="before")
    @classmethod
    def _renamed(cls, data):
        if isinstance(data, dict) and "min_bimodality" in data:
            raise ValueError("min_bimodality (Otsu's separability) was replaced by min_separation (Ashman's D "
                             "between the two classes, default 6) and min_class_samples (default 6): remove "
                             "min_bimodality")
        return data

    @model_validator(mode="after")
    def _band(self):
        if self.max_level_shift >= self.level_band:
            raise ValueError(f"max_level_shift = {self.max_level_shift} must be below level_band = "
                             f"{self.level_band} (a shift that large moves readings out of their band)")
        return self


class TideTiming(_Strict):
    """Transition-timing and effective-elevation checks (rule-set table [tide_timing])."""
    clock_error_threshold: float = 1200.0
    elevation_tolerance_m: float = Field(0.15, gt=0, le=MAX_LEVEL_M)
    max_offset: float = 3 * 3600.0

    _d = field_validator("clock_error_threshold", "max_offset", mode="before")(classmethod(
        lambda cls, v: _seconds_or_duration(v)))


class RuleSetInfo(_Strict):
    name: safe_id("rule set name")
    description: str = ""



class _RuleFile(_Strict):
    rule_set: RuleSetInfo
    immersion: ImmersionSettings = ImmersionSettings()
    tide_timing: TideTiming = TideTiming()
    variable: dict[str, dict[str, Any]] = {}
    station: dict[str, dict[str, Any]] = {}


def _merge(base: dict, over: dict) -> dict:
    out = copy.deepcopy(base)
    for k, v in over.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _merge(out[k], v)
        else:
            out[k] = copy.deepcopy(v)
    return out


class RuleSet:
    """A validated rule set: effective rules per (station, variable) and their hashes."""

    def __init__(self, path: Path, data: dict, info: RuleSetInfo, effective: dict, raw_effective: dict,
                 immersion: "ImmersionSettings | None" = None, tide_timing: "TideTiming | None" = None):
        self.path, self.data, self.info = path, data, info
        self.immersion = immersion or ImmersionSettings()
        self.tide_timing = tide_timing or TideTiming()
        self._effective = effective          # (station or None, variable) -> VariableRules
        self._raw = raw_effective            # same keys -> merged dict (for hashing)
        self.sha256 = content_sha256(data)

    @property
    def name(self) -> str:
        return self.info.name

    @property
    def stations(self) -> list[str]:
        """Station ids that have overrides, in the order written."""
        return list(dict.fromkeys(st for st, _ in self._effective if st is not None))

    def for_variable(self, variable: str, station: str | None = None) -> VariableRules | None:
        return self._effective.get((station, variable)) or self._effective.get((None, variable))

    def effective_dict(self, variable: str, station: str | None = None) -> dict | None:
        """The rules of ``variable`` at ``station`` as written (station overrides merged in)."""
        return self._raw.get((station, variable), self._raw.get((None, variable)))

    def effective_sha256(self, variable: str, station: str | None = None) -> str | None:
        raw = self._raw.get((station, variable), self._raw.get((None, variable)))
        return None if raw is None else content_sha256(raw)


def _validate_variable(path: Path, where: str, name: str, body: dict) -> VariableRules:
    if name not in VARIABLE_UNITS:
        raise ConfigError(f"{path}: key {where}: unknown variable {shown(repr(name))}; "
                          f"use one of {', '.join(sorted(VARIABLE_UNITS))}")
    try:
        rules = validate(VariableRules, body, path)
    except ConfigError as err:
        raise ConfigError(str(err).replace(f"{path}: key ", f"{path}: key {where}.", 1)) from None
    if rules.units != VARIABLE_UNITS[name]:
        raise ConfigError(f"{path}: key {where}.units: thresholds for {name} must be in "
                          f"{VARIABLE_UNITS[name]!r}, got {shown(repr(rules.units))}; convert them and set units = "
                          f"\"{VARIABLE_UNITS[name]}\"")
    return rules


def load_rules(path: str | Path) -> RuleSet:
    """Read and validate a rule set; raise ConfigError naming file and key."""
    path = Path(path)
    data = read_toml(path)
    top = validate(_RuleFile, data, path)
    effective, raw = {}, {}
    for var, body in top.variable.items():
        effective[(None, var)] = _validate_variable(path, f"variable.{shown_key(var)}", var, body)
        raw[(None, var)] = body
    for st, stbody in top.station.items():
        try:
            check_safe_id(st, "station id")
        except ValueError as err:
            raise ConfigError(f"{path}: key station.{shown_key(st)}: {shown(err)}; use the station's id "
                              "from the register") from None
        extra = set(stbody) - {"variable"}
        if extra:
            raise ConfigError(f"{path}: key station.{st}: unknown key(s) {shown(sorted(extra))}; only 'variable' "
                              "tables go here")
        variables = stbody.get("variable", {})
        if not isinstance(variables, dict) or not all(isinstance(b, dict) for b in variables.values()):
            raise ConfigError(f"{path}: key station.{st}.variable: must be tables of rules per variable; "
                              f"write [station.{st}.variable.<variable>] tables")
        for var, body in variables.items():
            merged = _merge(top.variable.get(var, {}), body)
            effective[(st, var)] = _validate_variable(path, f"station.{st}.variable.{shown_key(var)}", var, merged)
            raw[(st, var)] = merged
    for (st, var), rules in effective.items():
        where = f"station.{st}.variable.{shown_key(var)}" if st else f"variable.{shown_key(var)}"
        for key, allowed in (("immersion_consistency", {"wetness"}), ("tide_residual", {"water_level"}),
                             ("immersion_gating", {"ph", "conductivity"})):
            if getattr(rules, key) is not None and var not in allowed:
                raise ConfigError(f"{path}: key {where}.{key}: applies only to {', '.join(sorted(allowed))}; "
                                  "move it to that variable's table")
    return RuleSet(path, data, top.rule_set, effective, raw, top.immersion, top.tide_timing)
