"""Synthetic tides of a chosen form factor and their high and low waters by brute force.

An independent reference for ``qcpipe.tide.events`` and ``qcpipe.tide.datums``: the
tide is a sum of cosines written here (not qcpipe's predictor), its extrema are the
roots of its analytical derivative (sign changes on a dense grid, refined by
scipy.optimize.brentq), and the minimum-height rule is applied by a plain loop:
while some neighbouring pair differs by less than `min_range_m`, remove the pair
with the smallest difference (both extrema; an extremum next to an end of the record
is compared with the level there and removed alone). Extrema within `edge_s` of an
end are left out first (qcpipe leaves out an extremum whose smoothing window is cut
by the end). Datums follow the definitions of NOAA (2000), Tidal Datums and Their
Applications (from memory), by loops over tidal days.

Constituent speeds, deg/h: Schureman (1958) Table 2, values from memory.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq

SPEEDS = {"M2": 28.9841042, "S2": 30.0, "N2": 28.4397295, "K1": 15.0410686, "O1": 13.9430356,
          "P1": 14.9589314}
PHASES = {"M2": 0.3, "S2": 1.1, "N2": 2.0, "K1": 0.5, "O1": 5.9, "P1": 0.9}  # rad, chosen
TIDAL_DAY_S = 24.8412 * 3600.0  # mean lunar day, Schureman (1958), from memory


def constituents_for_form_factor(form_factor: float, *, total_m: float = 1.0) -> dict[str, float]:
    """Amplitudes (m) with (K1 + O1) / (M2 + S2) = `form_factor`; inf gives a purely diurnal tide.

    Within each band the split is chosen (M2 : S2 : N2 = 0.7 : 0.3 : 0.14 of the
    semidiurnal total; K1 : O1 : P1 = 0.58 : 0.42 : 0.19 of the diurnal total), and
    the semidiurnal plus diurnal totals make `total_m`.
    """
    if np.isinf(form_factor):
        semi, diur = 0.0, total_m
    else:
        semi = total_m / (1.0 + form_factor)
        diur = total_m - semi
    amps = {"M2": 0.7 * semi, "S2": 0.3 * semi, "N2": 0.14 * semi,
            "K1": 0.58 * diur, "O1": 0.42 * diur, "P1": 0.19 * diur}
    return {k: a for k, a in amps.items() if a > 0}


def level(amps: dict[str, float], t_s, z0: float = 2.0):
    """Sum of cosines at `t_s` seconds: z0 + sum a cos(omega t + phase)."""
    t_s = np.asarray(t_s, dtype=float)
    out = np.full(t_s.shape, z0)
    for k, a in amps.items():
        out += a * np.cos(np.deg2rad(SPEEDS[k]) / 3600.0 * t_s + PHASES[k])
    return out


def rate(amps: dict[str, float], t_s):
    """Analytical time derivative of :func:`level`, m/s."""
    t_s = np.asarray(t_s, dtype=float)
    out = np.zeros(t_s.shape)
    for k, a in amps.items():
        w = np.deg2rad(SPEEDS[k]) / 3600.0
        out -= a * w * np.sin(w * t_s + PHASES[k])
    return out


def brute_events(amps, t_start, t_end, *, min_range_m=0.05, edge_s=1800.0, z0=2.0):
    """Times (s), heights (m) and is-high of the extrema kept by the minimum-height rule."""
    g = np.arange(t_start, t_end + 1.0, 20.0)
    r = rate(amps, g)
    i = np.flatnonzero(np.sign(r[:-1]) * np.sign(r[1:]) < 0)
    t = np.array([brentq(lambda x: float(rate(amps, x)), g[j], g[j + 1], xtol=1e-4) for j in i])
    t = t[(t - edge_s >= t_start) & (t + edge_s <= t_end)]
    h = level(amps, t, z0)
    high = list(rate(amps, t - 1.0) > 0)
    t, h = list(t), list(h)
    ends = (float(level(amps, np.linspace(t_start, t_start + edge_s, 1001), z0).mean()),
            float(level(amps, np.linspace(t_end - edge_s, t_end, 1001), z0).mean()))
    while t:
        ext = [ends[0], *h, ends[1]]
        diffs = [abs(ext[j + 1] - ext[j]) for j in range(len(ext) - 1)]
        j = int(np.argmin(diffs))
        if diffs[j] >= min_range_m:
            break
        # edge j joins ext[j] and ext[j + 1], i.e. extrema j - 1 and j
        drop = [k for k in (j - 1, j) if 0 <= k < len(t)]
        for k in reversed(drop):
            del t[k], h[k], high[k]
    return np.array(t), np.array(h), np.array(high, dtype=bool)


def brute_datums(t, h, high, origin_s):
    """MHW, MLW, MHHW, MLLW of brute-force events, tidal days of 24.8412 h from `origin_s`."""
    day = np.floor((t - origin_s) / TIDAL_DAY_S).astype(int)
    hh, ll = [], []
    for d in np.unique(day):
        highs = [x for x, dd, hi in zip(h, day, high) if dd == d and hi]
        lows = [x for x, dd, hi in zip(h, day, high) if dd == d and not hi]
        if highs:
            hh.append(max(highs))
        if lows:
            ll.append(min(lows))
    return {"mhw": float(np.mean(h[high])), "mlw": float(np.mean(h[~high])),
            "mhhw": float(np.mean(hh)), "mllw": float(np.mean(ll))}
