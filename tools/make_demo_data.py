#!/usr/bin/env python3
"""Write the demo's raw field downloads (an invented rocky shore) and their answer key.

Run from the repository root::

    python tools/make_demo_data.py              # rewrites sample_raw/inbox and sample_raw/injected.json
    python tools/make_demo_data.py --out /tmp/x # writes /tmp/x/inbox and /tmp/x/injected.json

The scenario (stations, instruments, deployments, clock offsets and clock checks)
is read from ``sample_raw/register.toml``; the file layouts (delimiter, decimal
mark, time format, encoding) from ``sample_raw/layouts.toml``. Everything else —
the physics, the field visits and the injected faults — is set here. The output is
deterministic: one fixed seed, fixed draw order, fixed number formatting, so two
runs give byte-identical files.

Physics, kept simple on purpose:

* tide: ``z(t) = Z0 + sum_i A_i cos(w_i (t - epoch) - g_i)`` with five
  constituents (no nodal corrections), metres above the site's chart datum;
* a spot is immersed while ``z > elevation`` (probes also see wave splash near
  the crossing, and a film of water that drains within minutes);
* temperature loggers follow water temperature under water and air temperature
  plus sun heating in the air, through a first-order thermal lag;
* the pH sonde reads about 8.0 under water and drifts in 6.5–7.5 when dry;
* the pier gauge reads atmospheric pressure plus ``rho g (z - z_sensor)``, kPa absolute;
* atmospheric pressure: a few slow weather systems plus a passing low of
  ``LOW_DEPTH_HPA`` (Gaussian in time), read by a barometric logger on the pier
  deck in hPa. The sea does not respond to the low here (no inverse-barometer
  effect): the demo's sea follows the harmonic tide, so a water level that
  subtracts the barometer's air pressure matches the prediction, and one that
  subtracts the constant is off by about 1 cm per hPa.

Each logger samples on a regular grid of its own clock:
``logger = utc + clock_offset + r (utc - clock_set)``, with ``r`` taken from the
register's clock check (zero for all but one logger). One logger's clock is set to
a different offset than the register says (see ``ACTUAL_OFFSET``).
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import shutil
import sys
import tomllib
from pathlib import Path

import numpy as np

SEED = 20260914
ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_raw"
UTC = dt.timezone.utc
EPOCH = dt.datetime(2026, 1, 1, tzinfo=UTC)

# ----------------------------------------------------------------- the tide
MEAN_LEVEL_M = 2.0
#: name, amplitude (m), speed (degrees per hour), Greenwich phase lag (degrees); the site's
#: "published" harmonic constants, written to sample_raw/tide/ and predicted with qcpipe.tide
#: (nodal corrections and astronomical arguments included), so the demo's truth is exactly
#: what the site's own prediction gives
CONSTITUENTS = [
    ("M2", 1.60, 28.9841042, 40.0),
    ("S2", 0.55, 30.0000000, 75.0),
    ("N2", 0.30, 28.4397295, 20.0),
    ("K2", 0.15, 30.0821373, 72.0),
    ("K1", 0.08, 15.0410686, 110.0),
    ("O1", 0.07, 13.9430356, 300.0),
    ("P1", 0.025, 14.9589314, 105.0),
    ("M4", 0.04, 57.9682084, 130.0),
]
TIDE_FILE = SAMPLE / "tide" / "kelpwhistle-cove.toml"
RHO_SEAWATER = 1025.5   # kg m-3, roughly salinity 34 at 14 degC
G = 9.81                # m s-2

# ----------------------------------------------------------------- field work


def _t(text: str) -> dt.datetime:
    return dt.datetime.fromisoformat(text.replace("Z", "+00:00"))


DOWNLOADS = ["2026-10-05_download", "2026-10-26_download"]

#: per logger: sampling interval, when it was started on the bench (UTC), the first
#: field download (UTC), how far back (hours) the second download reaches, when it
#: was stopped after recovery (UTC), and the file names in each download.
LOGGERS = {
    "WD-0412": dict(interval_s=300, launch="2026-09-14T05:00:00Z", dl1="2026-10-05T16:52:10Z",
                    back_h=47.0, stop="2026-10-26T12:30:00Z", files=["high_probe.wet", "high_probe.wet"]),
    "WD-0417": dict(interval_s=300, launch="2026-09-14T05:00:00Z", dl1="2026-10-05T17:14:40Z",
                    back_h=48.5, stop="2026-10-26T12:35:00Z", files=["mid_probe.wet", "mid_probe.wet"]),
    "WD-0423": dict(interval_s=300, launch="2026-09-14T05:00:00Z", dl1="2026-10-05T17:38:20Z",
                    back_h=46.0, stop="2026-10-26T12:40:00Z", files=["low_probe.wet", "low_probe.wet"]),
    "TL7-20931": dict(interval_s=600, launch="2026-09-14T05:30:00Z", dl1="2026-10-05T16:55:40Z",
                      back_h=49.0, stop="2026-10-26T12:50:00Z",
                      files=["TL7-20931_temp.csv", "TL7-20931_temp.csv"]),
    "TL7-20934": dict(interval_s=600, launch="2026-09-14T05:30:00Z", dl1="2026-10-05T17:18:05Z",
                      back_h=47.5, stop="2026-10-26T12:50:00Z",
                      files=["TL7-20934_temp.csv", "TL7-20934_temp.csv"]),
    "TL7-20940": dict(interval_s=600, launch="2026-09-14T05:30:00Z", dl1="2026-10-05T17:41:30Z",
                      back_h=48.0, stop="2026-10-26T12:50:00Z",
                      files=["TL7-20940_temp.csv", "TL7-20940_temp.csv"]),
    "PHS-88A1": dict(interval_s=600, launch="2026-09-14T06:00:00Z", dl1="2026-10-05T17:45:50Z",
                     back_h=48.0, stop="2026-10-26T13:00:00Z", files=["low_sonde.tsv", "low_sonde.tsv"]),
    "LVL-3306": dict(interval_s=360, launch="2026-09-14T06:00:00Z", dl1="2026-10-05T18:05:50Z",
                     back_h=47.0, stop="2026-10-26T13:12:00Z",
                     files=["LVL-3306_20261005.lvl", "LVL-3306_20261026_2.lvl"]),
    "BAR-0107": dict(interval_s=1800, launch="2026-09-14T06:00:00Z", dl1="2026-10-05T18:12:30Z",
                     back_h=48.0, stop="2026-10-26T13:15:00Z",
                     files=["pier_air_20261005.air", "pier_air_20261026.air"]),
}

#: the passing low: depth (hPa), time of its deepest point (UTC) and its e-folding half-width (hours)
LOW_DEPTH_HPA = 30.0
LOW_CENTRE = "2026-10-18T06:00:00Z"
LOW_SIGMA_H = 14.0

#: clocks set differently from what the register says (logger clock minus UTC, hours)
ACTUAL_OFFSET = {"WD-0417": 1.0}   # forgotten summer-time setting; register says +00:00

#: sun heating of an emersed logger, degC at full sun (higher on the shore = more exposed)
SUN_GAIN = {"kc-high": 7.0, "kc-mid": 6.0, "kc-low": 5.0, "kc-pier": 0.0, "kc-deck": 0.0}

GRID_START = _t("2026-09-14T00:00:00Z")
GRID_END = _t("2026-10-26T18:00:00Z")


# ----------------------------------------------------------------- helpers

def secs(t: dt.datetime) -> float:
    return (t - EPOCH).total_seconds()


def from_secs(s: float) -> dt.datetime:
    return EPOCH + dt.timedelta(seconds=float(s))


def iso_z(s: float) -> str:
    """UTC text; fractional seconds only when the time is not on a whole second."""
    t = from_secs(round(float(s), 3))
    if t.microsecond:
        return t.strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def naive_text(s: float, fmt: str) -> str:
    return from_secs(s).strftime(fmt)


def tide(s: np.ndarray) -> np.ndarray:
    """Water level above chart datum (m) at UTC seconds since EPOCH (harmonic prediction)."""
    from qcpipe.tide import predict_tide

    s = np.asarray(s, dtype=float)
    epoch = np.datetime64(EPOCH.replace(tzinfo=None), "ns")
    times = epoch + np.rint(s * 1e9).astype("timedelta64[ns]")
    return predict_tide(times.ravel(), {n: (a, g) for n, a, _, g in CONSTITUENTS},
                        mean_level=MEAN_LEVEL_M).reshape(s.shape)


def tide_constants():
    from qcpipe.tide import HarmonicConstant, TideConstants

    return TideConstants(site="Kelpwhistle Cove (fictional)", datum="Kelpwhistle Cove chart datum (fictional)",
                         mean_level_m=MEAN_LEVEL_M,
                         constituents=tuple(HarmonicConstant(n, a, g) for n, a, _, g in CONSTITUENTS),
                         source="invented harmonic constants of the fictional demo site (tools/make_demo_data.py)")


def daily_values(rng, n_days: int, lo: float, hi: float) -> np.ndarray:
    """One random value per day (plus one either side), for daily_interp."""
    return rng.uniform(lo, hi, n_days + 2)


def daily_interp(s: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Interpolate one value per UTC day (centred at noon) to times s."""
    day0 = secs(GRID_START) - 86400 + 43200
    x = day0 + 86400 * np.arange(values.size)
    return np.interp(s, x, values)


def lag(target: np.ndarray, tau_min: np.ndarray, start: float) -> np.ndarray:
    """First-order lag on the 1-min grid: y' = (target - y) / tau."""
    a = 1.0 - np.exp(-1.0 / tau_min)
    y = np.empty_like(target)
    v = start
    for k in range(target.size):
        v += (target[k] - v) * a[k]
        y[k] = v
    return y


# ----------------------------------------------------------------- the world


class World:
    """Truth on a 1-min UTC grid: tide, air and water temperature, weather."""

    def __init__(self, rng: np.random.Generator):
        self.s = np.arange(secs(GRID_START), secs(GRID_END) + 1, 60.0)
        s = self.s
        self.z = tide(s)
        n_days = int((GRID_END - GRID_START).days) + 1
        hour = (s / 3600.0) % 24.0
        frac = (s - s[0]) / (s[-1] - s[0])
        # sunshine 0..1 per day, air temperature daily mean and range
        self.sun_day = daily_values(rng, n_days, 0.0, 1.0)
        sun = daily_interp(s, self.sun_day)
        mean_air = 15.0 - 4.0 * frac + daily_interp(s, rng.normal(0.0, 1.2, n_days + 2))
        amp_air = 2.0 + 4.5 * sun
        self.air = mean_air + amp_air * np.cos(2 * np.pi * (hour - 14.5) / 24.0)
        # sun on the rock: daylight ~07:00-19:00 UTC, shrinking through the autumn
        half_day = 6.2 - 1.0 * frac
        x = (hour - 13.0) / half_day
        self.solar = sun * np.clip(np.cos(np.pi / 2 * x), 0.0, None) ** 1.5 * (np.abs(x) < 1)
        # water temperature: slow autumn cooling, small daily cycle, slow wander
        wander = np.cumsum(rng.normal(0.0, 0.004, s.size))
        wander -= np.linspace(0.0, wander[-1], s.size)
        self.water = 15.2 - 2.2 * frac + 0.25 * np.cos(2 * np.pi * (hour - 16.0) / 24.0) + wander
        # indoor bench before and after deployment
        self.bench = 20.5 + 0.6 * np.sin(2 * np.pi * (hour - 9.0) / 24.0)
        # atmospheric pressure, hPa: a few weather systems
        p = np.zeros(s.size)
        for period_d, amp in ((6.3, 7.0), (3.1, 4.0), (11.0, 5.0)):
            p += amp * np.sin(2 * np.pi * (s / 86400.0) / period_d + rng.uniform(0, 2 * np.pi))
        low = LOW_DEPTH_HPA * np.exp(-0.5 * ((s - secs(_t(LOW_CENTRE))) / (LOW_SIGMA_H * 3600.0)) ** 2)
        self.atm_hpa = 1013.0 + p - low

    def at(self, arr: np.ndarray, s: np.ndarray) -> np.ndarray:
        return np.interp(s, self.s, arr)


def deployed_mask(world: World, dep: dict) -> np.ndarray:
    return (world.s >= secs(dep["start"])) & (world.s <= secs(dep["end"]))


def temperature_truth(world: World, station: dict, dep: dict) -> np.ndarray:
    """What a temperature sensor at the station reads (1-min grid), lag included."""
    wet = world.z > station["elevation_m"]
    air_eff = world.air + SUN_GAIN[station["id"]] * world.solar
    target = np.where(wet, world.water, air_eff)
    on = deployed_mask(world, dep)
    target = np.where(on, target, world.bench)
    tau = np.where(on & wet, 4.0, 14.0)
    return lag(target, tau, start=float(world.bench[0]))


# ----------------------------------------------------------------- loggers


class Logger:
    """One instrument: its clock, its sample times (true UTC) and the rows it wrote."""

    def __init__(self, serial: str, spec: dict, dep: dict, inst: dict):
        self.serial, self.spec, self.dep, self.inst = serial, spec, dep, inst
        self.interval = float(spec["interval_s"])
        declared = dep["offset_s"]
        self.offset = ACTUAL_OFFSET.get(serial, declared / 3600.0) * 3600.0
        self.clock_set = secs(dep.get("clock_set") or dep["start"])
        self.rate = 0.0
        check = dep.get("clock_check")
        if check is not None:
            ref = secs(check["reference_time"])
            shown = (check["logger_time"].replace(tzinfo=UTC) - EPOCH).total_seconds()
            self.rate = (shown - (ref + declared)) / (ref - self.clock_set)
        # sample grid in the logger's own clock, from launch to stop
        l0 = self.clock(secs(_t(spec["launch"])))
        l0 = np.ceil(l0 / self.interval) * self.interval
        l1 = self.clock(secs(_t(spec["stop"])))
        self.logger_s = np.arange(l0, l1 + 1e-6, self.interval)
        self.utc_s = self.utc(self.logger_s)

    def clock(self, u):
        return u + self.offset + self.rate * (u - self.clock_set)

    def utc(self, logger):
        return (logger - self.offset + self.rate * self.clock_set) / (1.0 + self.rate)

    def index_near(self, when: str) -> int:
        return int(np.argmin(np.abs(self.utc_s - secs(_t(when)))))


def make_values(world: World, lg: Logger, station: dict, rng: np.random.Generator) -> dict:
    """Raw readings of one logger at its sample times (floats; formatting happens later)."""
    u = lg.utc_s
    dep = lg.dep
    on = (u >= secs(dep["start"])) & (u <= secs(dep["end"]))
    kind = lg.inst["kind"]
    elev = station["elevation_m"]
    out: dict[str, np.ndarray] = {}
    if kind in ("temperature", "ph", "pressure"):
        truth = temperature_truth(world, station, dep) if kind != "pressure" else None
        if kind == "pressure":   # the pile is always under water: water temperature when deployed
            target = np.where(deployed_mask(world, dep), world.water, world.bench)
            truth = lag(target, np.full(target.size, 6.0), start=float(world.bench[0]))
        out["temperature"] = world.at(truth, u) + rng.normal(0.0, 0.015, u.size)
    if kind == "immersion_probe":
        ref = dep["probe_reference"]
        wet_grid = (world.z > elev).astype(float)
        film = lag(wet_grid, np.where(wet_grid > 0, 0.5, 3.0), start=0.0)  # water film drains in minutes
        frac = world.at(film, u)
        splash = tide(u) + rng.normal(0.0, 0.07, u.size) > elev           # waves near the crossing
        frac = np.where(splash, np.maximum(frac, rng.uniform(0.85, 1.0, u.size)), frac)
        frac = np.where(on, frac, 0.0)
        out["probe_reading"] = ref["air"] + (ref["water"] - ref["air"]) * frac + rng.normal(0.0, 3.0, u.size)
    if kind == "ph":
        wet = world.z > elev
        hour = (world.s / 3600.0) % 24.0
        ph_water = 8.02 + 0.06 * np.cos(2 * np.pi * (hour - 15.0) / 24.0)
        dry_target = 7.0 + 0.45 * np.sin(2 * np.pi * world.s / (5.3 * 3600.0)) * np.cos(world.s / 86400.0)
        on_grid = deployed_mask(world, dep)
        target = np.where(on_grid, np.where(wet, ph_water, dry_target), 6.95)   # storage cap off the shore
        tau = np.where(on_grid & wet, 3.0, 25.0)
        ph = lag(target, tau, start=6.95)
        ph_s = world.at(ph, u)
        dry_s = ~(tide(u) > elev) & on
        noise = np.where(dry_s, rng.normal(0.0, 0.05, u.size), rng.normal(0.0, 0.008, u.size))
        out["ph"] = ph_s + noise
    if kind == "barometer":     # on the pier deck: air temperature in the shade, air pressure in hPa
        out["temperature"] = world.at(world.air, u) + rng.normal(0.0, 0.05, u.size)
        out["air_pressure"] = world.at(world.atm_hpa, u) + rng.normal(0.0, 0.04, u.size)
    if kind == "pressure":
        atm = world.at(world.atm_hpa, u) * 100.0
        depth = np.where(on, tide(u) + rng.normal(0.0, 0.012, u.size) - elev, 0.0)
        out["pressure"] = (atm + RHO_SEAWATER * G * depth) / 1000.0      # kPa absolute
    return out


# ----------------------------------------------------------------- file writers


def fmt_num(v: float, nd: int, decimal: str = ".") -> str:
    text = f"{v:.{nd}f}"
    if text.startswith("-") and float(text) == 0.0:
        text = text[1:]
    return text.replace(".", decimal) if decimal != "." else text


def write_rows(lg: Logger, idx: np.ndarray, layout: dict, cols: dict, download: str) -> str:
    """Text of one raw file of logger `lg` holding samples `idx` (indices into its grid)."""
    fmt = layout["time"]["format"]
    d = layout["delimiter"].replace("\\t", "\t")
    name = lg.inst["layout"]
    t0, t1 = lg.logger_s[idx[0]], lg.logger_s[idx[-1]]
    lines: list[str] = []
    if name == "wetprobe":
        lines += [f"#probe {lg.serial}", f"#interval {int(lg.interval)} s",
                  f"#first {naive_text(t0, fmt)} last {naive_text(t1, fmt)}", "#units count",
                  d.join(["time", "reading"])]
        for i in idx:
            lines.append(d.join([naive_text(lg.logger_s[i], fmt), cols["probe_reading"][i]]))
    elif name == "shoretemp":
        lines += ["Temperature record (°C), one line per sample",
                  f"downloaded {download[:10]}, {len(idx)} samples",
                  d.join(["date", "clock", "temp_c"])]
        for i in idx:
            lines.append(d.join([naive_text(lg.logger_s[i], "%d/%m/%Y"), naive_text(lg.logger_s[i], "%H:%M"),
                                 cols["temperature"][i]]))
    elif name == "phsonde":
        lines += [f"sonde serial: {lg.serial}", "calibrated 2026-09-12 with pH 7 and pH 10 buffers",
                  f"interval {int(lg.interval // 60)} min", d.join(["stamp", "pH", "T"])]
        for i in idx:
            lines.append(d.join([naive_text(lg.logger_s[i], fmt), cols["ph"][i], cols["temperature"][i]]))
    elif name == "levelgauge":
        lines += ["LEVEL GAUGE MEMORY DUMP; fields: record, time, pressure kPa absolute, temperature degC",
                  f"records {int(idx[0]) + 1}-{int(idx[-1]) + 1} every {int(lg.interval)} s"]
        for i in idx:
            lines.append(d.join([str(int(i) + 1), naive_text(lg.logger_s[i], fmt), cols["pressure"][i],
                                 cols["temperature"][i]]))
    elif name == "airlog":
        lines += [f"barometer serial {lg.serial}", f"sampling every {int(lg.interval // 60)} minutes",
                  "pressure hPa (station level, not reduced to sea level); air temperature degC",
                  d.join(["utc_stamp", "p_hpa", "t_air"])]
        for i in idx:
            lines.append(d.join([naive_text(lg.logger_s[i], fmt), cols["air_pressure"][i], cols["temperature"][i]]))
    else:
        raise ValueError(f"no writer for layout {name!r}")
    n_header = layout.get("header_lines", 0)
    assert len(lines) == n_header + int(layout.get("column_names", True)) + len(idx), name
    return "\n".join(lines) + "\n"


def format_columns(values: dict, layout: dict) -> dict:
    dec = layout.get("decimal", ".")
    digits = {"probe_reading": 0, "temperature": 2, "ph": 2, "pressure": 3, "air_pressure": 1}
    return {k: [fmt_num(v, digits[k], dec) for v in arr] for k, arr in values.items()}


# ----------------------------------------------------------------- main


def load_scenario():
    register = tomllib.loads((SAMPLE / "register.toml").read_text("utf-8"))
    layouts = tomllib.loads((SAMPLE / "layouts.toml").read_text("utf-8"))["layout"]
    stations = {s["id"]: s for s in register["station"]}
    insts = {i["serial"]: i for i in register["instrument"]}
    deps = {}
    for d in register["deployment"]:
        off = d.get("clock_offset", "+00:00")
        sign = 1 if off[0] == "+" else -1
        d = dict(d, offset_s=sign * (int(off[1:3]) * 3600 + int(off[4:6]) * 60))
        deps[d["instrument"]] = d
    return register, layouts, stations, insts, deps


def pick_quiet(lg: Logger, truth_fn, when: str, avoid: list[tuple[float, float]], span_s=3600.0) -> int:
    """First sample at or after `when` whose neighbourhood is smooth (no tide turn)."""
    i = lg.index_near(when)
    while True:
        u = lg.utc_s[i]
        near = np.abs(lg.utc_s - u) <= span_s
        if np.ptp(truth_fn(lg.utc_s[near])) < 0.4 and not any(a <= u <= b for a, b in avoid):
            return i
        i += 1


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=SAMPLE,
                    help="folder to write inbox/ and injected.json into (default: sample_raw)")
    args = ap.parse_args(argv)
    out: Path = args.out

    register, layouts, stations, insts, deps = load_scenario()
    rng = np.random.default_rng(SEED)
    world = World(rng)

    loggers: dict[str, Logger] = {}
    values: dict[str, dict] = {}
    for k, (serial, spec) in enumerate(LOGGERS.items()):
        lg = Logger(serial, spec, deps[serial], insts[serial])
        loggers[serial] = lg
        values[serial] = make_values(world, lg, stations[lg.dep["station"]],
                                     np.random.default_rng([SEED, k]))

    faults: list[dict] = []

    def base(serial: str) -> dict:
        dep = loggers[serial].dep
        return {"serial": serial, "deployment": dep["id"], "station": dep["station"]}

    # overlap windows (UTC) of each logger: faults other than the conflict stay out of them
    def overlap_window(lg: Logger) -> tuple[float, float]:
        d1 = secs(_t(lg.spec["dl1"]))
        return d1 - lg.spec["back_h"] * 3600.0, d1

    # --- single-point temperature spikes (electrical glitches)
    for serial, when, jump in (("TL7-20931", "2026-09-19T03:20:00Z", 11.5),
                               ("TL7-20931", "2026-10-11T22:40:00Z", -9.5),
                               ("TL7-20940", "2026-09-24T14:10:00Z", 13.0),
                               ("TL7-20940", "2026-10-17T06:30:00Z", 10.5)):
        lg = loggers[serial]
        st = stations[lg.dep["station"]]
        truth = temperature_truth(world, st, lg.dep)
        i = pick_quiet(lg, lambda s: world.at(truth, s), when, [overlap_window(lg)])
        v = values[serial]["temperature"]
        faults.append(dict(kind="spike", **base(serial), variable="temperature",
                           time_utc=iso_z(lg.utc_s[i]), logger_time=naive_text(lg.logger_s[i], "%Y-%m-%dT%H:%M:%S"),
                           value=round(float(v[i] + jump), 2), value_without_fault=round(float(v[i]), 2),
                           flag=4, caught_by="spike"))
        v[i] += jump

    # --- stuck sensor: the same temperature repeated for 8 h
    lg = loggers["TL7-20940"]
    i0 = lg.index_near("2026-09-28T19:00:00Z")
    n = int(8 * 3600 / lg.interval)
    v = values["TL7-20940"]["temperature"]
    stuck = round(float(v[i0]), 2)
    v[i0:i0 + n] = stuck
    faults.append(dict(kind="stuck_value", **base("TL7-20940"), variable="temperature",
                       start_utc=iso_z(lg.utc_s[i0]), end_utc=iso_z(lg.utc_s[i0 + n - 1]), n_samples=n,
                       value=stuck, flag=4, caught_by="flat_line",
                       note="flat_line in delayed mode (the default): the whole run lasts longer than "
                            "fail_after, so every sample of it fails (4), the first one included"))

    # --- out-of-range burst: pH at the sensor limit for 30 min
    lg = loggers["PHS-88A1"]
    i0 = lg.index_near("2026-10-12T14:20:00Z")
    n = 4
    values["PHS-88A1"]["ph"][i0:i0 + n] = 15.0
    faults.append(dict(kind="out_of_range", **base("PHS-88A1"), variable="ph",
                       start_utc=iso_z(lg.utc_s[i0]), end_utc=iso_z(lg.utc_s[i0 + n - 1]), n_samples=n,
                       value=15.0, flag=4, caught_by="gross_range"))

    # --- a barometer spike (a door slammed in the pier hut): fails its own spike check, so the level
    #     loggers interpolate across it from the samples either side
    lg = loggers["BAR-0107"]
    i = lg.index_near("2026-10-21T14:00:00Z")
    v = values["BAR-0107"]["air_pressure"]
    faults.append(dict(kind="barometer_spike", **base("BAR-0107"), variable="air_pressure",
                       time_utc=iso_z(lg.utc_s[i]), value=round(float(v[i] + 6.0), 1),
                       value_without_fault=round(float(v[i]), 1), flag=4, caught_by="spike",
                       note="hPa; the water level is not affected: it interpolates between the barometer "
                            "samples either side (30 min away each)"))
    v[i] += 6.0
    barometer_failed = {i}

    # --- format every value once; faults below edit the text of one file only
    cols = {s: format_columns(values[s], layouts[loggers[s].inst["layout"]]) for s in loggers}

    # --- split into the two downloads
    files: dict[str, list[tuple[str, np.ndarray]]] = {}
    for serial, lg in loggers.items():
        dl1_logger = lg.clock(secs(_t(lg.spec["dl1"])))
        back = dl1_logger - lg.spec["back_h"] * 3600.0
        idx1 = np.flatnonzero(lg.logger_s <= dl1_logger)
        idx2 = np.flatnonzero(lg.logger_s >= back)
        files[serial] = [(lg.spec["files"][0], idx1), (lg.spec["files"][1], idx2)]

    # --- a gap: rows missing from one file (after the overlap, so the first file cannot fill it)
    def cut_rows(serial: str, start: str, end: str):
        """Drop the samples strictly between start and end (UTC) from the logger's second file."""
        lg = loggers[serial]
        g0, g1 = secs(_t(start)), secs(_t(end))
        name2, idx2 = files[serial][1]
        keep = ~((lg.utc_s[idx2] > g0) & (lg.utc_s[idx2] < g1))
        files[serial][1] = (name2, idx2[keep])
        removed = idx2[~keep]
        return lg, name2, removed, (lg.utc_s[removed[0] - 1], lg.utc_s[removed[-1] + 1])

    lg, name2, removed, (before, after) = cut_rows("WD-0423", "2026-10-14T02:02:30Z", "2026-10-14T05:27:30Z")
    faults.append(dict(kind="gap", **base("WD-0423"), variable="wetness",
                       file=f"{DOWNLOADS[1]}/{name2}", last_before_utc=iso_z(before),
                       first_after_utc=iso_z(after), n_missing=int(removed.size),
                       flag=3, caught_by="gap", note="flag 3 at the first sample after the gap"))

    # --- a barometer gap: six hours missing from its second download (battery change), longer than
    #     the level logger's barometer_max_gap, so the water levels in it use the constant
    lg, name2, removed, baro_gap = cut_rows("BAR-0107", "2026-10-09T03:10:00Z", "2026-10-09T09:10:00Z")
    faults.append(dict(kind="barometer_gap", **base("BAR-0107"), variable="air_pressure",
                       file=f"{DOWNLOADS[1]}/{name2}", last_before_utc=iso_z(baro_gap[0]),
                       first_after_utc=iso_z(baro_gap[1]), n_missing=int(removed.size), flag=3,
                       caught_by="barometer_fallback",
                       note="the level logger's water levels strictly between the two barometer samples "
                            "around the gap use the configured constant and are flagged suspect "
                            "(water_level_qc_barometer_fallback = 3); see barometer_fallback in the answer key"))

    # --- one conflicting value in one overlap (second download differs from the first)
    serial = "TL7-20931"
    lg = loggers[serial]
    a, b = overlap_window(lg)
    i = lg.index_near(iso_z((a + b) / 2))
    first_text = cols[serial]["temperature"][i]
    second_text = fmt_num(float(first_text) + 0.4, 2)
    faults.append(dict(kind="overlap_conflict", **base(serial), variable="temperature",
                       time_utc=iso_z(lg.utc_s[i]), logger_time=naive_text(lg.logger_s[i], "%Y-%m-%dT%H:%M:%S"),
                       files=[f"{DOWNLOADS[0]}/{files[serial][0][0]}", f"{DOWNLOADS[1]}/{files[serial][1][0]}"],
                       values=[float(first_text), float(second_text)], flag=3, caught_by="ingest",
                       note="overlapping records are otherwise identical; ingest should report this one"))
    conflict = (serial, 1, i, second_text)

    # --- clocks
    lg = loggers["TL7-20934"]
    check = lg.dep["clock_check"]
    faults.append(dict(kind="clock_drift", **base("TL7-20934"), flag=None, caught_by="ingest",
                       clock_offset=lg.dep["clock_offset"], clock_set_utc=iso_z(lg.clock_set),
                       check_reference_utc=iso_z(secs(check["reference_time"])),
                       drift_at_check_s=round(lg.rate * (secs(check["reference_time"]) - lg.clock_set), 3),
                       formula="logger_clock = utc + clock_offset + drift_at_check_s * (utc - clock_set) / (check_reference - clock_set)",
                       note="linear drift; the logger is fast, by 360 s at recovery; the register's clock_check shows it"))
    lg = loggers["WD-0417"]
    faults.append(dict(kind="clock_one_hour_off", **base("WD-0417"), flag=3, caught_by="tide",
                       declared_offset=lg.dep["clock_offset"], actual_offset="+01:00", correction_s=-3600,
                       note="times were written in UTC+1 while the register says +00:00 and there is no clock "
                            "check; read as declared they are 1 h late. Wet/dry transitions then disagree with "
                            "the tide and with the neighbouring stations by 1 h"))

    # --- write the inbox
    inbox = out / "inbox"
    if inbox.exists():
        shutil.rmtree(inbox)
    for dl in DOWNLOADS:
        (inbox / dl).mkdir(parents=True)
    file_records = {dl: [] for dl in DOWNLOADS}
    for serial, lg in loggers.items():
        layout = layouts[lg.inst["layout"]]
        for k, (fname, idx) in enumerate(files[serial]):
            c = cols[serial]
            if conflict[0] == serial and conflict[1] == k:
                c = {key: list(v) for key, v in c.items()}
                c["temperature"][conflict[2]] = conflict[3]
            text = write_rows(lg, idx, layout, c, DOWNLOADS[k])
            path = inbox / DOWNLOADS[k] / fname
            path.write_bytes(text.encode(layout.get("encoding", "utf-8")))
            file_records[DOWNLOADS[k]].append(dict(
                file=fname, serial=serial, layout=lg.inst["layout"], rows=int(idx.size),
                first_utc=iso_z(lg.utc_s[idx[0]]), last_utc=iso_z(lg.utc_s[idx[-1]])))

    # --- a file from a logger that is not in the register (a spare tested on the bench)
    spare = "TL7-20977"
    layout = layouts["shoretemp"]
    s0 = secs(_t("2026-10-04T08:00:00Z")) + 3600.0
    ls = s0 + 600.0 * np.arange(132)
    srng = np.random.default_rng([SEED, 99])
    temp = world.at(world.bench, ls - 3600.0) + srng.normal(0.0, 0.015, ls.size)
    lines = ["Temperature record (°C), one line per sample", f"downloaded {DOWNLOADS[0][:10]}, {ls.size} samples",
             "date,clock,temp_c"]
    lines += [f"{naive_text(x, '%d/%m/%Y')},{naive_text(x, '%H:%M')},{fmt_num(y, 2)}" for x, y in zip(ls, temp)]
    fname = f"{spare}_temp.csv"
    (inbox / DOWNLOADS[0] / fname).write_bytes(("\n".join(lines) + "\n").encode("latin-1"))
    file_records[DOWNLOADS[0]].append(dict(file=fname, serial=spare, layout="shoretemp", rows=int(ls.size),
                                           first_utc=None, last_utc=None))
    faults.append(dict(kind="unknown_serial", serial=spare, file=f"{DOWNLOADS[0]}/{fname}", flag=None,
                       caught_by="discover", note="spare logger run on the bench; not in the register: "
                                                  "quarantine with reason, process the rest"))

    # --- a file that cannot be parsed: an interrupted transfer of the pier gauge
    lg = loggers["LVL-3306"]
    good = (inbox / DOWNLOADS[1] / LOGGERS["LVL-3306"]["files"][1]).read_text("utf-8").splitlines(keepends=True)
    broken = "".join(good[:42]) + good[42][:9] + good[57][14:] + good[58][:11]
    fname = "LVL-3306_20261026_1.lvl"
    (inbox / DOWNLOADS[1] / fname).write_bytes(broken.encode("utf-8"))
    file_records[DOWNLOADS[1]].append(dict(file=fname, serial="LVL-3306", layout="levelgauge", rows=None,
                                           first_utc=None, last_utc=None))
    faults.append(dict(kind="unparseable_file", serial="LVL-3306", file=f"{DOWNLOADS[1]}/{fname}", flag=None,
                       caught_by="ingest", problem=f"line {43} is cut mid-field and joined to a later record; "
                                                   "the file ends inside a record (interrupted transfer)",
                       note="the complete download of the same logger is LVL-3306_20261026_2.lvl: quarantine "
                            "this one with its reason"))

    # --- answer key: counts per deployment
    deployments = []
    for serial, lg in loggers.items():
        dep = lg.dep
        idx = np.unique(np.concatenate([f[1] for f in files[serial]]))
        u = lg.utc_s[idx]
        start, end = secs(dep["start"]), secs(dep["end"])
        rec = dict(deployment=dep["id"], serial=serial, station=dep["station"], interval_s=int(lg.interval),
                   window_utc=[iso_z(start), iso_z(end)],
                   files=[f"{DOWNLOADS[k]}/{f[0]}" for k, f in enumerate(files[serial])],
                   rows_per_file=[int(f[1].size) for f in files[serial]],
                   duplicate_rows=int(sum(f[1].size for f in files[serial]) - idx.size),
                   unique_samples=int(idx.size),
                   samples_in_window=int(((u >= start) & (u <= end)).sum()),
                   removed_pre_deployment=int((u < start).sum()),
                   removed_post_deployment=int((u > end).sum()))
        if serial in ACTUAL_OFFSET:   # what a pipeline that trusts the register gets
            ud = lg.logger_s[idx] - dep["offset_s"]
            rec["as_declared"] = dict(samples_in_window=int(((ud >= start) & (ud <= end)).sum()),
                                      removed_pre_deployment=int((ud < start).sum()),
                                      removed_post_deployment=int((ud > end).sum()))
        deployments.append(rec)

    # --- where the level logger must fall back to the constant air pressure (its barometer_max_gap
    #     is the default 2 h): outside the barometer's deployment and across the gap; the spike is
    #     interpolated across
    lvl, bar = loggers["LVL-3306"], loggers["BAR-0107"]
    lvl_idx = np.unique(np.concatenate([f[1] for f in files["LVL-3306"]]))
    lu = lvl.utc_s[lvl_idx]
    lu = lu[(lu >= secs(lvl.dep["start"])) & (lu <= secs(lvl.dep["end"]))]
    bar_idx = np.unique(np.concatenate([f[1] for f in files["BAR-0107"]]))
    bar_idx = np.array([i for i in bar_idx if i not in barometer_failed])
    bu = bar.utc_s[bar_idx]
    bu = bu[(bu >= secs(bar.dep["start"])) & (bu <= secs(bar.dep["end"]))]
    before, after = lu < bu[0], lu > bu[-1]
    in_gap = (lu > baro_gap[0]) & (lu < baro_gap[1])
    barometer_fallback = dict(
        deployment=lvl.dep["id"], barometer=bar.dep["id"], max_gap_s=7200,
        before_first_barometer_sample=dict(last_utc=iso_z(lu[before][-1]), n=int(before.sum())),
        after_last_barometer_sample=dict(first_utc=iso_z(lu[after][0]), n=int(after.sum())),
        in_barometer_gap=dict(after_utc=iso_z(baro_gap[0]), before_utc=iso_z(baro_gap[1]), n=int(in_gap.sum())),
        total=int(before.sum() + after.sum() + in_gap.sum()),
        note="water_level_qc_barometer_fallback is 3 at exactly these samples, 1 at the others")

    key = {
        "about": "Answer key of the qcpipe demo downloads (Kelpwhistle Cove, a fictional site). "
                 "Written by tools/make_demo_data.py; do not edit by hand.",
        "seed": SEED,
        "times": "true UTC, ISO 8601 (also for the logger whose register offset is wrong); logger_time is the logger's own clock as written in the file",
        "flags": "IOC primary flags a sound QC should give: 3 suspect, 4 fail; null where the fault "
                 "is handled before QC (ingest, discover)",
        "window_rule": "a sample is in its deployment when start <= utc <= end (no sample falls on either end)",
        "tide": {
            "datum": register["site"][0]["vertical_datum"],
            "mean_level_m": MEAN_LEVEL_M,
            "epoch": iso_z(0.0),
            "formula": "harmonic prediction with nodal corrections (qcpipe.tide.predict_tide) from sample_raw/tide/kelpwhistle-cove.toml; phase_deg are Greenwich phase lags",
            "constituents": [dict(name=n, amplitude_m=a, speed_deg_per_h=w, phase_deg=g) for n, a, w, g in CONSTITUENTS],
            "seawater_density_kg_m3": RHO_SEAWATER,
            "g_m_s2": G,
        },
        "downloads": [dict(folder=dl, files=file_records[dl]) for dl in DOWNLOADS],
        "deployments": deployments,
        "faults": faults,
        "barometer_fallback": barometer_fallback,
        "passing_low": dict(depth_hpa=LOW_DEPTH_HPA, deepest_utc=LOW_CENTRE, e_folding_half_width_h=LOW_SIGMA_H),
        "not_faults": [
            "pH readings of the low-shore sonde while emersed are dry-electrode nonsense "
            "(6.5-7.5) by design: the tide consistency check, not the gross range, should flag them",
            "immersion-probe readings flicker near the wet/dry crossing (wave splash) and decay over a few "
            "minutes after emersion (water film): real behaviour, not faults",
            "intertidal temperature jumps by up to ~7 degC within one sample when the flood reaches a "
            "sun-warmed logger",
            "air pressure varies with the weather (slow systems of about +-15 hPa and a passing low of "
            f"{LOW_DEPTH_HPA:g} hPa); the pier gauge subtracts the barometer's series, so its water level "
            "follows the tide; the sea itself does not respond to the low in this demo (no inverse-barometer "
            "effect)",
        ],
    }
    (out / "injected.json").write_text(json.dumps(key, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
    from qcpipe.config.constituents import write_constituents

    (out / "tide").mkdir(parents=True, exist_ok=True)
    write_constituents(out / "tide" / TIDE_FILE.name, tide_constants())
    total = sum(p.stat().st_size for p in inbox.rglob("*") if p.is_file())
    print(f"wrote {sum(len(v) for v in file_records.values())} files ({total / 1e6:.2f} MB) to {inbox}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
