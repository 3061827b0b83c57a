"""A second invented shore for end-to-end tests: Saltmarrow Point (fictional), seeded and deterministic.

``make_second_shore(root)`` writes a complete qcpipe workspace into ``root``
(``workspace.toml``, ``register.toml``, ``layouts.toml``, ``rules.toml`` and
``inbox/`` with one recovery download) and returns a :class:`Scenario` holding the
truth the tests compare with.  Everything is invented: the site, its coordinates
(open South Pacific, pointing at no shore), stations, serial numbers, the three raw
file layouts (our own, unlike the demo's) and the data.

What makes it a different shore from the demo (tests/test_second_shore.py checks
what qcpipe makes of it; issue 15 section 4):

* no harmonic constants in the register (nothing published for the site);
* a tide dominated by the diurnal constituents: form factor
  ``F = (K1 + O1) / (M2 + S2)`` about 2.6 (Courtier's classes, from memory: 1.5 to 3
  mixed, mainly diurnal), daily range about 0.9 to 2.2 m over the record;
* optionally (``with_gauge``) a vented pressure logger (gauge pressure in dbar:
  the air is already subtracted, so no barometer) on a mooring below the lowest water;
* four shore stations at different heights, each with a capacitive immersion
  probe and a temperature logger;
* the probe of ``sp-gully`` fouls for three days in the middle of the record
  (its wet readings sag toward the dry level, then the fouling is scoured off);
* both loggers of ``sp-shelf`` run one hour fast; the register declares
  ``clock_offset = "+00:00"`` and has no clock check for them (undeclared error).

Physics, kept simple on purpose:

* sea level ``z(t) = tide(t) + r(t)``: the tide is a harmonic prediction from
  :data:`CONSTITUENTS` (``qcpipe.tide.predict_tide``, nodal corrections included),
  ``r`` a slow weather residual of a few centimetres (two sinusoids of 4.3 and 1.7 days);
* a spot is immersed while ``z > elevation``; the truth is undefined (2) within
  :data:`TRUTH_BAND_M` of its elevation, where wave run-up wets it on and off;
* a probe reads ``dry + (wet - dry) * f * (1 - sag)`` plus noise: ``f`` is the wetted
  fraction (a water film that fills in about a minute and drains in about four,
  and run-up of half-normal height, sd :data:`RUNUP_SD_M`), ``sag`` the fouling
  (0 outside the fouled period; rises to about 0.8 within :data:`FOUL_ONSET_H` hours);
* temperature loggers follow the water under water and the air (daily cycle, sun on
  the rock) out of it, through a first-order lag (4 min wet, 12 min dry);
* the gauge's gauge pressure is ``rho g (z - z_sensor)`` with rho from TEOS-10 (gsw)
  at the water temperature and the register's salinity, g from gsw.grav.

Each logger samples on a regular grid of its own clock (``logger = utc + actual offset``);
bench samples before deployment and after recovery are in the files, as in real downloads.
"""

from __future__ import annotations

import datetime as dt
import functools
import importlib.util
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

SEED = 20270202
DEMO_GENERATOR = Path(__file__).resolve().parents[2] / "tools" / "make_demo_data.py"
UTC = dt.timezone.utc

SITE_ID = "saltmarrow-point"
SITE_NAME = "Saltmarrow Point (fictional)"
DATUM = "Saltmarrow Point survey datum (fictional)"
LATITUDE, LONGITUDE = -38.7142, -118.4306      # open ocean on purpose

MEAN_LEVEL_M = 1.30
#: name, amplitude (m), speed (degrees per hour, standard speeds), Greenwich phase lag (degrees)
CONSTITUENTS = (
    ("K1", 0.52, 15.0410686, 205.0),
    ("O1", 0.37, 13.9430356, 185.0),
    ("P1", 0.17, 14.9589314, 203.0),
    ("Q1", 0.07, 13.3986609, 170.0),
    ("M2", 0.24, 28.9841042, 290.0),
    ("S2", 0.10, 30.0000000, 320.0),
    ("N2", 0.05, 28.4397295, 270.0),
    ("K2", 0.03, 30.0821373, 318.0),
)
#: weather residual of the sea level: (amplitude m, period days, phase rad)
RESIDUAL = ((0.045, 4.3, 0.7), (0.025, 1.7, 2.1))

#: the truth is undefined where the still-water level is within this of a station's elevation (m)
TRUTH_BAND_M = 0.05
#: wave run-up above the still-water level near a crossing: half-normal with this sd (m)
RUNUP_SD_M = 0.03

#: fouling: sag toward the dry level reached after the onset (fraction of wet - dry), and the onset time (h)
FOUL_SAG = 0.8
FOUL_ONSET_H = 6.0
FOUL_DAYS = 3.0

FAST_BY_S = 3600.0
#: a probe writes a battery note line after every this many records
BATTERY_NOTE_EVERY = 1440
SALINITY = 34.6

#: station id, name, elevation (m above the datum), sun heating of an emersed logger (degC at full sun)
SHORE_STATIONS = (
    ("sp-crest", "Saltmarrow Point crest", 1.95, 9.0),
    ("sp-shelf", "Saltmarrow Point shelf", 1.55, 8.0),
    ("sp-gully", "Saltmarrow Point gully", 1.15, 7.0),
    ("sp-fringe", "Saltmarrow Point weed fringe", 0.70, 6.0),
)
GAUGE_STATION = ("sp-mooring", "Saltmarrow Point mooring gauge", -0.50)
FOULED_STATION = "sp-gully"
FAST_STATION = "sp-shelf"

PROBE_INTERVAL_S = 300
TEMP_INTERVAL_S = 600
GAUGE_INTERVAL_S = 600

DEPLOY_START = dt.datetime(2027, 2, 2, 8, 10, tzinfo=UTC)
BENCH_BEFORE_H = 2.5
BENCH_AFTER_H = 2.0


@dataclass(frozen=True)
class LoggerTruth:
    """One logger's samples as written: their true UTC, the UTC qcpipe reads them at, and the truth there."""
    deployment: str
    station: str
    serial: str
    kind: str
    true_time: np.ndarray            # datetime64[ns], true UTC of each sample in the file
    read_time: np.ndarray            # datetime64[ns], the stamp put on UTC with the register's clock_offset
    immersed: np.ndarray             # int8: 1 immersed, 0 emersed, 2 undefined (swash band, or off the shore)
    start: np.datetime64 = None      # the deployment window (UTC)
    end: np.datetime64 = None

    def _index(self, times) -> np.ndarray:
        t = np.asarray(times, dtype="datetime64[ns]")
        i = np.clip(np.searchsorted(self.read_time, t), 0, self.read_time.size - 1)
        if not np.array_equal(self.read_time[i], t):
            raise ValueError(f"{self.deployment}: {np.count_nonzero(self.read_time[i] != t)} times are not "
                             "sample times of this logger")
        return i

    def truth_at(self, times) -> np.ndarray:
        """The true immersion state of the samples qcpipe stamps with ``times`` (each must be a read_time)."""
        return self.immersed[self._index(times)]

    def true_time_at(self, times) -> np.ndarray:
        """The true UTC of the samples qcpipe stamps with ``times`` (each must be a read_time)."""
        return self.true_time[self._index(times)]


@dataclass(frozen=True)
class StationTruth:
    id: str
    name: str
    elevation_m: float
    deployments: tuple[str, ...]     # probe first, then the temperature logger (or the gauge alone)


@dataclass
class Scenario:
    """The truth behind a written second-shore workspace."""
    root: Path
    workspace: Path
    inbox: Path
    seed: int
    days: float
    with_gauge: bool
    site_id: str
    stations: dict[str, StationTruth]
    loggers: dict[str, LoggerTruth]          # by deployment id
    constituents: tuple = CONSTITUENTS       # (name, amplitude m, speed deg/h, phase deg)
    mean_level_m: float = MEAN_LEVEL_M
    fouled_station: str = FOULED_STATION
    fouled_deployment: str = ""
    fouled_period: tuple = ()                # (start, end) datetime64[ns], true UTC
    fast_station: str = FAST_STATION
    fast_deployments: tuple = ()
    fast_by_s: float = FAST_BY_S
    gauge_station: str | None = None
    files: list[Path] = field(default_factory=list)

    def tide(self, times) -> np.ndarray:
        """The true (harmonic) tide at UTC ``times``, m above the site datum."""
        return _tide(times)

    def sea_level(self, times) -> np.ndarray:
        """The true sea level (tide plus weather residual) at UTC ``times``, m above the site datum."""
        return _sea_level(times)

    def amplitude(self, name: str) -> float:
        return {n: a for n, a, _, _ in self.constituents}[name]

    @property
    def form_factor(self) -> float:
        """(K1 + O1) / (M2 + S2) of the constituents used."""
        a = self.amplitude
        return (a("K1") + a("O1")) / (a("M2") + a("S2"))

    def probe_of(self, station: str) -> str:
        return self.stations[station].deployments[0]

    def companion_of(self, station: str) -> str:
        return self.stations[station].deployments[1]


# ----------------------------------------------------------------- physics

def _ns(t) -> np.ndarray:
    return np.asarray(t, dtype="datetime64[ns]")


def _tide(times) -> np.ndarray:
    from qcpipe.tide import predict_tide

    return predict_tide(_ns(times), {n: (a, g) for n, a, _, g in CONSTITUENTS}, mean_level=MEAN_LEVEL_M)


def _days(times) -> np.ndarray:
    return (_ns(times) - np.datetime64("2027-01-01T00:00", "ns")).astype(np.int64) / 86400e9


def _sea_level(times) -> np.ndarray:
    d = _days(times)
    return _tide(times) + sum(a * np.sin(2 * np.pi * d / p + ph) for a, p, ph in RESIDUAL)


def _lag(target: np.ndarray, tau_min: np.ndarray, start: float) -> np.ndarray:
    """First-order lag on a 1-min grid, y' = (target - y) / tau: the demo generator's (tools/make_demo_data.py)."""
    return _demo_generator().lag(target, tau_min, start)


@functools.cache
def _demo_generator():
    spec = importlib.util.spec_from_file_location("make_demo_data", DEMO_GENERATOR)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _np_time(t: dt.datetime) -> np.datetime64:
    return np.datetime64(t.astimezone(UTC).replace(tzinfo=None), "ns")


def _toml_time(t: dt.datetime) -> str:
    return t.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


@dataclass
class _Dep:
    id: str
    station: str
    serial: str
    kind: str
    layout: str
    start: dt.datetime
    end: dt.datetime
    interval_s: int
    actual_offset_s: float = 0.0
    extra: str = ""                 # extra register lines
    file_name: str = ""


class _World:
    """Truth on a 1-min UTC grid: sea level, air and water temperature, sun."""

    def __init__(self, t0: dt.datetime, t1: dt.datetime, rng: np.random.Generator):
        self.t = np.arange(_np_time(t0), _np_time(t1) + np.timedelta64(1, "m"), np.timedelta64(1, "m"))
        self.z = _sea_level(self.t)
        minutes = (self.t - self.t[0]).astype(np.int64) / 60e9
        n_days = int(minutes[-1] // 1440) + 3
        utc_hour = ((self.t - self.t.astype("datetime64[D]")).astype(np.int64) / 3600e9)
        local = (utc_hour + LONGITUDE / 15.0) % 24.0                       # mean solar time
        day_x = minutes / 1440.0
        days_at = np.arange(n_days) - 0.5
        sun_day = rng.uniform(0.2, 1.0, n_days)
        weather = rng.normal(0.0, 1.3, n_days)
        sun = np.interp(day_x, days_at, sun_day)
        self.air = 20.0 + np.interp(day_x, days_at, weather) + (2.5 + 3.0 * sun) * np.cos(2 * np.pi * (local - 15.0) / 24.0)
        x = (local - 13.0) / 6.5
        self.solar = sun * np.clip(np.cos(np.pi / 2 * x), 0.0, None) ** 1.5 * (np.abs(x) < 1)
        wander = np.cumsum(rng.normal(0.0, 0.004, self.t.size))
        wander -= np.linspace(0.0, wander[-1], self.t.size)
        self.water = 17.8 + 0.3 * np.cos(2 * np.pi * (local - 16.0) / 24.0) + wander
        self.bench = 22.0 + 0.5 * np.sin(2 * np.pi * (utc_hour - 9.0) / 24.0)

    def at(self, arr: np.ndarray, t: np.ndarray) -> np.ndarray:
        x = (self.t - self.t[0]).astype(np.int64)
        return np.interp((t - self.t[0]).astype(np.int64), x, arr)

    def on(self, dep: _Dep) -> np.ndarray:
        return (self.t >= _np_time(dep.start)) & (self.t <= _np_time(dep.end))


def _sample_times(dep: _Dep) -> tuple[np.ndarray, np.ndarray]:
    """(true UTC, logger clock) of every sample from bench launch to stop; samples on the logger clock's grid."""
    step = np.timedelta64(dep.interval_s, "s")
    off = np.timedelta64(int(dep.actual_offset_s), "s")
    launch = _np_time(dep.start - dt.timedelta(hours=BENCH_BEFORE_H)) + off
    stop = _np_time(dep.end + dt.timedelta(hours=BENCH_AFTER_H)) + off
    first = launch.astype("datetime64[s]").astype(np.int64)
    first = -(-first // dep.interval_s) * dep.interval_s
    clock = np.arange(np.datetime64(int(first), "s"), stop.astype("datetime64[s]") + step, step)
    clock = clock[clock <= stop].astype("datetime64[ns]")
    return clock - off, clock


def _truth(world: _World, dep: _Dep, elevation: float, true_time: np.ndarray) -> np.ndarray:
    z = world.at(world.z, true_time)
    out = np.full(true_time.size, 2, np.int8)
    on = (true_time >= _np_time(dep.start)) & (true_time <= _np_time(dep.end))
    out[on & (z > elevation + TRUTH_BAND_M)] = 1
    out[on & (z < elevation - TRUTH_BAND_M)] = 0
    return out


def _fouling_sag(t: np.ndarray, period: tuple, rng: np.random.Generator) -> np.ndarray:
    """0 outside the fouled period; rises linearly to about FOUL_SAG within FOUL_ONSET_H, scoured off at the end."""
    start, end = period
    h = (t - start).astype(np.int64) / 3600e9
    level = FOUL_SAG + rng.normal(0.0, 0.03, t.size)
    sag = np.clip(h / FOUL_ONSET_H, 0.0, 1.0) * level
    return np.where((t >= start) & (t < end), sag, 0.0)


def _probe_values(world, dep, elevation, true_time, dry, wet, foul_period, rng) -> np.ndarray:
    wet_grid = (world.z > elevation).astype(float)
    film = _lag(wet_grid, np.where(wet_grid > 0, 1.0, 4.0), start=0.0)
    frac = world.at(film, true_time)
    runup = np.abs(rng.normal(0.0, RUNUP_SD_M, true_time.size))
    splash = world.at(world.z, true_time) + runup > elevation
    frac = np.where(splash, np.maximum(frac, rng.uniform(0.85, 1.0, true_time.size)), frac)
    on = (true_time >= _np_time(dep.start)) & (true_time <= _np_time(dep.end))
    frac = np.where(on, frac, 0.0)
    sag = _fouling_sag(true_time, foul_period, rng) if foul_period else 0.0
    return dry + (wet - dry) * frac * (1.0 - sag) + rng.normal(0.0, 1.2, true_time.size)


def _temperature_values(world, dep, elevation, gain, true_time, rng) -> np.ndarray:
    wet = world.z > elevation
    on = world.on(dep)
    target = np.where(on, np.where(wet, world.water, world.air + gain * world.solar), world.bench)
    truth = _lag(target, np.where(on & wet, 4.0, 12.0), start=float(world.bench[0]))
    return world.at(truth, true_time) + rng.normal(0.0, 0.02, true_time.size)


def _gauge_values(world, dep, elevation, true_time, rng) -> tuple[np.ndarray, np.ndarray]:
    import gsw

    on_grid = world.on(dep)
    temp = _lag(np.where(on_grid, world.water, world.bench), np.full(world.t.size, 6.0), start=float(world.bench[0]))
    t = world.at(temp, true_time)
    on = (true_time >= _np_time(dep.start)) & (true_time <= _np_time(dep.end))
    depth = np.where(on, world.at(world.z, true_time) - elevation, 0.0)
    p_dbar = np.maximum(depth, 0.0)                    # first guess for the density's pressure
    sa = gsw.SA_from_SP(SALINITY, p_dbar, LONGITUDE, LATITUDE)
    rho = gsw.rho(sa, gsw.CT_from_t(sa, t, p_dbar), p_dbar)
    g = float(gsw.grav(LATITUDE, 0.0))
    dbar = rho * g * depth / 1.0e4 + rng.normal(0.0, 0.004, true_time.size)
    return dbar, t + rng.normal(0.0, 0.01, true_time.size)


# ----------------------------------------------------------------- files

def _fmt(x: float, nd: int) -> str:
    s = f"{x:.{nd}f}"
    return "0." + "0" * nd if s == "-0." + "0" * nd else s


def _text_times(clock: np.ndarray, fmt: str) -> list[str]:
    return [dt.datetime.fromtimestamp(int(c), UTC).strftime(fmt) for c in clock.astype("datetime64[s]").astype(np.int64)]


def _probe_file(dep: _Dep, clock: np.ndarray, values: np.ndarray) -> str:
    lines = ["CAPSENSE field log", f"unit #{dep.serial}", "capacitance in pF", f"sample every {dep.interval_s} s",
             "=== begin log ===", "yday      hhmm   cap"]
    days = _text_times(clock, "%Y-%j")
    clocks = _text_times(clock, "%H:%M")
    volts = 3.6
    for k, (d, c, v) in enumerate(zip(days, clocks, values)):
        if k and k % BATTERY_NOTE_EVERY == 0:            # the logger notes its battery among the records
            volts -= 0.03
            lines.append(f"* battery {volts:.2f} V")
        lines.append(f"{d}  {c}  {_fmt(v, 2)}")
    return "\n".join(lines) + "\n"


def _temperature_file(dep: _Dep, clock: np.ndarray, values_c: np.ndarray) -> str:
    lines = [f'"Thermal button {dep.serial}","offload"', '"one record per sample","units F"', '"Stamp","Temp F"']
    stamps = _text_times(clock, "%m/%d/%y %I:%M %p")
    lines += [f'"{s}","{_fmt(c * 9.0 / 5.0 + 32.0, 2)}"' for s, c in zip(stamps, values_c)]
    return "\r\n".join(lines) + "\r\n"


def _gauge_file(dep: _Dep, clock: np.ndarray, dbar: np.ndarray, temp: np.ndarray) -> str:
    lines = ["[recorder]", f"instrument={dep.serial}", "pressure=gauge (vented)", "units=dbar;degC", "[data]"]
    days = _text_times(clock, "%Y%m%d")
    hm = _text_times(clock, "%H%M")
    lines += [f"{d};{h};{_fmt(p, 3).replace('.', ',')};{_fmt(t, 2).replace('.', ',')}"
              for d, h, p, t in zip(days, hm, dbar, temp)]
    return "\n".join(lines) + "\n"


LAYOUTS_TOML = r'''# Logger layouts of the second test shore (Saltmarrow Point, fictional); written by
# tests/scenarios/second_shore.py. Each layout is our own invention and differs from the
# demo's: runs of spaces with day-of-year stamps, battery notes among the records and the unit
# in the header; quoted CRLF fields with 12-hour US-style stamps in Fahrenheit; and a
# ';'-separated decimal-comma recorder dump without column names.

[layout.capsense]
description = "Capacitive immersion probe log: columns split by runs of spaces, header up to a '=== begin log ===' line, year and day-of-year stamps, battery notes among the records, the unit stated in the header"
file_glob = "*.cap"
delimiter = "whitespace"
header_ends = "^=+ begin log =+$"
column_names = true
missing = ["-"]
skip_lines = ["^\\* "]
time = { columns = ["yday", "hhmm"], format = "%Y-%j %H:%M" }
serial = { source = "header", pattern = "^unit\\s+#(\\S+)$" }
[layout.capsense.header_values]
cap_unit = "^capacitance in (\\S+)$"
[layout.capsense.variables]
probe_reading = { column = "cap", units = "pF", units_from = "cap_unit" }

[layout.thermodump]
description = "Temperature button offload: quoted ','-separated fields, CRLF, month/day/2-digit-year 12-hour stamps, degrees Fahrenheit, serial in the file name"
file_glob = "TH-*_offload.txt"
delimiter = ","
quote = '"'
header_lines = 2
column_names = true
missing = ["", "--"]
time = { columns = ["Stamp"], format = "%m/%d/%y %I:%M %p" }
serial = { source = "filename", pattern = "^(TH-[0-9]+)_offload\\.txt$" }
[layout.thermodump.variables]
temperature = { column = "Temp F", units = "degF" }

[layout.depthrec]
description = "Vented depth recorder: ';'-separated, decimal comma, no column-name row (date, hhmm, dbar gauge pressure, degC), header up to '[data]'"
file_glob = "*.dpt"
delimiter = ";"
decimal = ","
header_ends = "^\\[data\\]$"
column_names = false
missing = ["", "#"]
time = { columns = [0, 1], format = "%Y%m%d %H%M" }
serial = { source = "header", pattern = "^instrument=(\\S+)$" }
[layout.depthrec.variables]
pressure = { column = 2, units = "dbar" }
temperature = { column = 3, units = "degC" }
'''

RULES_TOML = r'''# Rule set of the second test shore (Saltmarrow Point, fictional); written by
# tests/scenarios/second_shore.py. Southern summer (Jan-Mar), rock heated by the sun at low
# water, a vented gauge (gauge pressure about 0 in air).

[rule_set]
name = "saltmarrow-point"
description = "Summer rules for a fictional rocky shore with a mainly diurnal tide and a vented mooring gauge"

[variable.temperature]
units = "degC"
gross_range = { sensor_min = -20.0, sensor_max = 60.0, expected_min = 5.0, expected_max = 42.0 }
spike = { half_window = "25 min", suspect = 5.0, fail = 9.0 }
rate_of_change = { window = "25 h", n_sigma = 4.0 }
flat_line = { tolerance = 0.005, suspect_after = "3 h", fail_after = "6 h" }
gap = { max_gap = "25 min" }
when_emersed = { spike = { half_window = "25 min", suspect = 7.0, fail = 12.0 } }

[[variable.temperature.climatology]]
months = [1, 2, 3]
min = 8.0
max = 42.0

[variable.pressure]
units = "Pa"
gross_range = { sensor_min = -5000.0, sensor_max = 200000.0, expected_min = 0.0, expected_max = 60000.0 }
spike = { half_window = "25 min", suspect = 1500.0, fail = 4000.0 }
rate_of_change = { window = "25 h", n_sigma = 3.0 }
flat_line = { tolerance = 1.0, suspect_after = "2 h", fail_after = "4 h" }
gap = { max_gap = "25 min" }

[variable.water_level]
units = "m"
gross_range = { sensor_min = -0.6, sensor_max = 10.0, expected_min = -0.3, expected_max = 3.5 }
spike = { half_window = "25 min", suspect = 0.15, fail = 0.4 }
rate_of_change = { window = "25 h", n_sigma = 3.0 }
flat_line = { tolerance = 0.0001, suspect_after = "2 h", fail_after = "4 h" }
gap = { max_gap = "25 min" }
tide_residual = { suspect = 0.3, fail = 0.6 }

[variable.wetness]
units = "1"
gross_range = { sensor_min = -0.5, sensor_max = 1.5, expected_min = -0.1, expected_max = 1.1 }
gap = { max_gap = "15 min" }
immersion_consistency = { margin_m = 0.15, fail_after = "45 min" }

[immersion]
hysteresis_fraction = 0.1
min_state = "10 min"
min_separation = 6.0

[tide_timing]
clock_error_threshold = "20 min"
elevation_tolerance_m = 0.15
max_offset = "3 h"
'''

WORKSPACE_TOML = '''# Workspace of the second test shore (Saltmarrow Point, fictional). Paths are relative to this file.
[paths]
register = "register.toml"
layouts = "layouts.toml"
rules = "rules.toml"
inbox = "inbox"
archive = "archive"
'''


def _constants_toml() -> str:
    rows = "\n".join(f'    {{ name = "{n}", amplitude_m = {a}, phase_deg = {g} }},' for n, a, _, g in CONSTITUENTS)
    return (f"# The true harmonic constants of the fictional site (tests/scenarios/second_shore.py).\n[tide]\n"
            f'site = "{SITE_NAME}"\ndatum = "{DATUM}"\nmean_level_m = {MEAN_LEVEL_M}\n'
            f'source = "the scenario\'s own constants (a control: the real site publishes none)"\n'
            f'epoch_note = "Greenwich phase lags, UTC"\nconstituent = [\n{rows}\n]\n')


def _register_toml(deps: list[_Dep], stations: list[tuple[str, str, float]], constants: str | None) -> str:
    out = [
        "# Station register of the second test shore; written by tests/scenarios/second_shore.py.",
        "# Everything here is invented: Saltmarrow Point does not exist, and its coordinates lie in",
        "# open ocean on purpose. No harmonic constants are published for it (no tide_constituents).",
        "",
        "[register]",
        'name = "Saltmarrow Point intertidal test shore"',
        'description = "A fictional rocky point with a mainly diurnal tide, used by qcpipe\'s tests."',
        'institution = "qcpipe test team (fictional)"',
        'creator_name = "qcpipe tests"',
        'creator_email = "tests@example.org"',
        "",
        "[[site]]",
        f'id = "{SITE_ID}"',
        f'name = "{SITE_NAME}"',
        f'vertical_datum = "{DATUM}"',
        'description = "Invented exposed point; mixed, mainly diurnal tide, range up to about 2.2 m."',
    ]
    if constants:
        out.append(f'tide_constituents = "{constants}"')
    for k, (sid, name, elev) in enumerate(stations):
        out += ["", "[[station]]", f'id = "{sid}"', f'site = "{SITE_ID}"', f'name = "{name} (fictional)"',
                f"latitude = {LATITUDE + 0.0006 * k:.4f}", f"longitude = {LONGITUDE + 0.0005 * k:.4f}",
                f"elevation_m = {elev}"]
    kinds = {"immersion_probe": "capacitive immersion probe", "temperature": "temperature button",
             "pressure": "vented depth recorder"}
    for d in deps:
        out += ["", "[[instrument]]", f'serial = "{d.serial}"', f'kind = "{d.kind}"', f'layout = "{d.layout}"',
                f'description = "{kinds[d.kind]}, {d.station}"']
    out += ["", "# start/end UTC; clock_offset is the logger clock minus UTC as the field team recorded it."]
    for d in deps:
        out += ["", "[[deployment]]", f'id = "{d.id}"', f'station = "{d.station}"', f'instrument = "{d.serial}"',
                f"start = {_toml_time(d.start)}", f"end = {_toml_time(d.end)}", 'clock_offset = "+00:00"']
        if d.extra:
            out.append(d.extra)
    return "\n".join(out) + "\n"


# ----------------------------------------------------------------- the scenario

def make_second_shore(root: Path, *, seed: int = SEED, days: float = 28.0, with_gauge: bool = True,
                      name_true_constants: bool = False) -> Scenario:
    """Write the Saltmarrow Point workspace into ``root`` and return its truth (deterministic for a seed).

    ``name_true_constants`` is a control, not the scenario: it writes the true harmonic
    constants to ``tide/`` and names them in the register, as if they were published.
    """
    root = Path(root)
    rng = np.random.default_rng(seed)
    duration = dt.timedelta(days=days)
    deps: list[_Dep] = []
    station_rows: list[tuple[str, str, float]] = []
    stations: dict[str, StationTruth] = {}
    probe_levels = {}
    for k, (sid, name, elev, _gain) in enumerate(SHORE_STATIONS):
        start = DEPLOY_START + dt.timedelta(minutes=25 * k)
        end = start + duration - dt.timedelta(minutes=30 + 5 * k)
        offset = FAST_BY_S if sid == FAST_STATION else 0.0
        n = 1101 + k
        dry, wet = float(rng.uniform(48.0, 56.0)), float(rng.uniform(180.0, 196.0))
        probe_levels[sid] = (dry, wet)
        check = "" if sid == FAST_STATION else (
            f"clock_check = {{ logger_time = {(end + dt.timedelta(minutes=40)).strftime('%Y-%m-%dT%H:%M:00')}, "
            f"reference_time = {_toml_time(end + dt.timedelta(minutes=40))} }}")
        probe = _Dep(f"{sid}-probe-2027-02", sid, f"CS-{n}", "immersion_probe", "capsense", start, end,
                     PROBE_INTERVAL_S, offset,
                     "\n".join(filter(None, [check, f"probe_reference = {{ air = {dry + 1.5:.1f}, water = {wet - 2.0:.1f} }}"])),
                     f"CS-{n}.cap")
        temp = _Dep(f"{sid}-temp-2027-02", sid, f"TH-{30410 + k}", "temperature", "thermodump", start, end,
                    TEMP_INTERVAL_S, offset, check, f"TH-{30410 + k}_offload.txt")
        deps += [probe, temp]
        station_rows.append((sid, name, elev))
        stations[sid] = StationTruth(sid, name, elev, (probe.id, temp.id))
    if with_gauge:
        sid, name, elev = GAUGE_STATION
        start = DEPLOY_START - dt.timedelta(minutes=30)
        end = DEPLOY_START + duration + dt.timedelta(minutes=90)
        gauge = _Dep(f"{sid}-level-2027-02", sid, "DR-0577", "pressure", "depthrec", start, end, GAUGE_INTERVAL_S, 0.0,
                     f"clock_check = {{ logger_time = {(end + dt.timedelta(minutes=20)).strftime('%Y-%m-%dT%H:%M:00')}, "
                     f"reference_time = {_toml_time(end + dt.timedelta(minutes=20))} }}\n"
                     f"pressure = {{ vented = true, salinity = {SALINITY} }}", "DR-0577.dpt")
        deps.insert(0, gauge)
        station_rows.insert(0, (sid, name, elev))
        stations[sid] = StationTruth(sid, name, elev, (gauge.id,))

    # the world's span does not depend on which loggers there are, so its random draws do not either
    world = _World(DEPLOY_START - dt.timedelta(days=1), DEPLOY_START + duration + dt.timedelta(days=1), rng)
    fouled_probe = stations[FOULED_STATION].deployments[0]
    fdep = next(d for d in deps if d.id == fouled_probe)
    f0 = _np_time(fdep.start) + np.timedelta64(int(round(days * 0.45 * 86400 + 5 * 3600)), "s")
    foul_period = (f0, f0 + np.timedelta64(int(FOUL_DAYS * 86400), "s"))

    inbox = root / "inbox"
    download = inbox / f"{(DEPLOY_START + duration + dt.timedelta(days=1)).date().isoformat()}_recovery"
    download.mkdir(parents=True, exist_ok=True)
    loggers: dict[str, LoggerTruth] = {}
    files = []
    gains = {s[0]: s[3] for s in SHORE_STATIONS}
    for d in deps:
        true_time, clock = _sample_times(d)
        elev = stations[d.station].elevation_m
        rng = np.random.default_rng([seed, int("".join(c for c in d.serial if c.isdigit()))])   # one per logger:
        # the shore's files are the same with and without the gauge
        if d.kind == "immersion_probe":
            dry, wet = probe_levels[d.station]
            values = _probe_values(world, d, elev, true_time, dry, wet,
                                   foul_period if d.id == fouled_probe else None, rng)
            text = _probe_file(d, clock, values)
        elif d.kind == "temperature":
            text = _temperature_file(d, clock, _temperature_values(world, d, elev, gains[d.station], true_time, rng))
        else:
            dbar, temp = _gauge_values(world, d, elev, true_time, rng)
            text = _gauge_file(d, clock, dbar, temp)
        path = download / d.file_name
        path.write_bytes(text.encode("utf-8"))
        files.append(path)
        loggers[d.id] = LoggerTruth(d.id, d.station, d.serial, d.kind, true_time, clock,
                                    _truth(world, d, elev, true_time), _np_time(d.start), _np_time(d.end))

    constants = None
    if name_true_constants:
        constants = f"tide/{SITE_ID}.toml"
        (root / "tide").mkdir(parents=True, exist_ok=True)
        (root / constants).write_text(_constants_toml(), encoding="utf-8")
    (root / "register.toml").write_text(_register_toml(deps, station_rows, constants), encoding="utf-8")
    (root / "layouts.toml").write_text(LAYOUTS_TOML, encoding="utf-8")
    (root / "rules.toml").write_text(RULES_TOML, encoding="utf-8")
    (root / "workspace.toml").write_text(WORKSPACE_TOML, encoding="utf-8")
    return Scenario(root=root, workspace=root / "workspace.toml", inbox=inbox, seed=seed, days=days,
                    with_gauge=with_gauge, site_id=SITE_ID, stations=stations, loggers=loggers,
                    fouled_deployment=fouled_probe, fouled_period=foul_period,
                    fast_deployments=stations[FAST_STATION].deployments,
                    gauge_station=GAUGE_STATION[0] if with_gauge else None, files=files)
