"""Synthetic immersion-probe records on a synthetic tide, for the probe-health tests.

Invented test data (no real site). A tide is a sum of cosines at the speeds of the
main constituents; a probe at elevation z is wet while the level is above z. Its reading
is the air level plus the water-minus-air step times how wet it is, plus normal noise.
The truth of every fault (its start and end) is set here, by construction, never by the
code under test.

Values and their basis:
- constituent speeds, deg/h: Schureman 1958 (from memory);
- dry and wet readings 0.06 and 0.17 nF, noise 4 pF: typical of a small coated
  capacitive probe (common practice, no source; the same as tests/tide/test_immersion.py);
- the sample after each emersion reads part-wet (a water film draining): common practice,
  no source;
- a buried probe reads 10 % of the step above its air level (damp sediment against the
  electrodes has a higher permittivity than air): invented for the test.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: constituent speeds, deg/h (Schureman 1958, from memory)
SPEED = {"M2": 28.9841042, "S2": 30.0, "N2": 28.4397295, "K1": 15.0410686, "O1": 13.9430356}
#: amplitudes (m) of a semidiurnal tide, form factor (K1+O1)/(M2+S2) = 0.13
SEMIDIURNAL = {"M2": 1.0, "S2": 0.35, "N2": 0.2, "K1": 0.1, "O1": 0.08}
#: amplitudes (m) of a diurnal-dominated tide, form factor 4.8
DIURNAL = {"M2": 0.15, "S2": 0.06, "N2": 0.03, "K1": 0.6, "O1": 0.45}
TIDES = {"semidiurnal": SEMIDIURNAL, "diurnal": DIURNAL}

AIR_NF, WATER_NF, NOISE_NF = 0.06, 0.17, 0.004
DAY_S = 86400
#: mean tidal day, s (24.8412 h, Schureman 1958, from memory): the tolerance on a period's ends
TIDAL_DAY_S = 24.8412 * 3600
START = np.datetime64("2025-03-01T00:00:00", "ns")
STEP_S = 600          # 10-min sampling
DAYS = 28


@dataclass
class Record:
    times: np.ndarray          # datetime64[ns]
    t_s: np.ndarray            # seconds from START
    level: np.ndarray          # tide level, m
    elevation: float           # probe elevation, m
    readings: np.ndarray       # nF
    wet: np.ndarray            # true state, bool

    def reference_state(self, margin_m: float = 0.05) -> np.ndarray:
        """Expected state from the same tide: 1 above the elevation, 0 below, 2 within the margin."""
        s = (self.level > self.elevation).astype(np.int8)
        s[np.abs(self.level - self.elevation) < margin_m] = 2
        return s


def tide_level(t_s: np.ndarray, amplitudes: dict) -> np.ndarray:
    hours = t_s / 3600.0
    return sum(a * np.cos(np.radians(SPEED[k] * hours + 37.0 * i)) for i, (k, a) in enumerate(amplitudes.items()))


def probe_record(tide: str, wet_fraction: float, *, seed: int, fouled=None, buried=None, buried_offset=0.1,
                 gap=None) -> Record:
    """A 28-day record at 10-min sampling.

    fouled = (start_day, end_day): the water reading sags linearly from 0 to 75 % of the
    step toward the air level over the first day, stays sagged, and is clean again at
    end_day (fouling washed off). buried = (start_day, end_day): the reading is
    `buried_offset` of the step above the air level whatever the tide. gap = (start_day,
    end_day): readings missing (NaN).
    """
    rng = np.random.default_rng(seed)
    t_s = np.arange(0, DAYS * DAY_S, STEP_S, dtype=np.int64)
    level = tide_level(t_s, TIDES[tide])
    elevation = float(np.quantile(level, 1 - wet_fraction))
    wet = level > elevation
    frac = wet.astype(float)
    drained = np.flatnonzero(~wet[1:] & wet[:-1]) + 1          # first dry sample after each immersion
    frac[drained] = rng.uniform(0.0, 0.6, drained.size)
    if fouled is not None:
        a, b = fouled[0] * DAY_S, fouled[1] * DAY_S
        inside = (t_s >= a) & (t_s < b)
        sag = 0.75 * np.clip((t_s - a) / DAY_S, 0.0, 1.0)
        frac = np.where(inside, frac * (1 - sag), frac)
    if buried is not None:
        a, b = buried[0] * DAY_S, buried[1] * DAY_S
        frac = np.where((t_s >= a) & (t_s < b), buried_offset, frac)
    readings = AIR_NF + (WATER_NF - AIR_NF) * frac + rng.normal(0.0, NOISE_NF, t_s.size)
    if gap is not None:
        readings[(t_s >= gap[0] * DAY_S) & (t_s < gap[1] * DAY_S)] = np.nan
    return Record(START + t_s.astype("timedelta64[s]"), t_s, level, elevation, readings, wet)


def stuck_record(*, seed: int, n_spikes: int, spike_height: str) -> Record:
    """A probe stuck at its air level with `n_spikes` lone spikes (one sample each, never adjacent).

    spike_height "water": every spike reads the water level exactly (the worst case for a
    separation measure: a tight second class); "random": uniform between the air level and
    20 % above the water level.
    """
    rng = np.random.default_rng(seed)
    t_s = np.arange(0, DAYS * DAY_S, STEP_S, dtype=np.int64)
    readings = AIR_NF + rng.normal(0.0, NOISE_NF, t_s.size)
    spikes = np.arange(n_spikes) * (t_s.size // n_spikes) + 7        # evenly spread, isolated
    if spike_height == "water":
        readings[spikes] = WATER_NF + rng.normal(0.0, NOISE_NF, n_spikes)
    else:
        readings[spikes] = rng.uniform(AIR_NF, 1.2 * WATER_NF, n_spikes)
    level = tide_level(t_s, SEMIDIURNAL)
    return Record(START + t_s.astype("timedelta64[s]"), t_s, level, float(np.quantile(level, 0.6)), readings,
                  level > np.quantile(level, 0.6))


def day(d: float) -> np.datetime64:
    return START + np.timedelta64(int(round(d * DAY_S)), "s")


def seconds_between(a: np.datetime64, b: np.datetime64) -> float:
    return abs(float((a - b) / np.timedelta64(1, "s")))
