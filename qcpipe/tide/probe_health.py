"""Time-local health of an immersion probe: the fouled or buried periods inside a deployment.

The whole-record analysis (:mod:`qcpipe.tide.classify`) learns one threshold and two class
levels from the deployment. A probe that fouls for three days of a month hardly changes
them, so its fouled readings are classed dry without notice. Here every sample gets the
measures of the window of ``window_s`` (a tidal day by default) centred on it, and the
windows whose readings do not behave like a working probe's make up unreliable periods.

Readings are put on the scale of the record's class levels,
``u = (reading - dry_level) / (wet_level - dry_level)`` (0 at the dry level, 1 at the wet
one, whichever way the probe reads), and each finite reading lies in one band: at the dry
level (``u < b``), at the wet level (``u > 1 - b``) or between (``b = level_band``).

Evidence of a window (each needs at least ``min_samples`` readings of the kind it counts):

- **sag**: at least half of its readings that are not at the dry level are *held*
  between the levels (in a run of between-level readings lasting ``min_between_s`` or
  more; a probe wetting or draining passes the band in a sample or two). A fouled probe's
  water readings sag toward the air level. Strong evidence.
- **reference**: with an expected state from a tide reference, at least half of the
  readings taken while the reference says wet are not at the wet level (between: fouled;
  at the dry level: buried, or fouled all the way to the air level). Strong evidence.
- **level shift**: the mean of its dry-level readings lies ``max_level_shift`` or more
  above the record's dry level (toward the wet one), or the mean of its wet-level readings
  that far below the record's wet level. A probe buried in sediment reads near, not at, the
  air level; a coating starts to pull the water reading down. Weak evidence (a drifting
  sensor looks the same).

Why half: a window centred on an abrupt change holds half of each side, so with a
cutoff of one half the flagged centres begin and end where the change does, and a
change shorter than half a window never reaches it. Flagged centres form runs; runs
closer than half a window merge; a merged run shorter than ``min_period_s`` (about a
tidal day by default) is not reported and its samples are not flagged. Each period is
"buried" when most of its windows' evidence is of readings at or near the dry level,
else "fouled".

What it cannot see: without a reference, a probe buried with readings exactly at its air
level looks like a probe left dry by neap tides, and a fouled probe whose water reading
has sagged all the way to the air level looks dry; both need the reference. A probe wet
for less than a sample or two per tide gives no held between-level run and too few
readings for a verdict.

The rules (half of a window, held runs, level bands) are common practice, no source.
Window sums are differences of cumulative sums over ``searchsorted`` window edges: O(n)
whatever the window, no loop over samples or windows.

References
----------
.. [Schureman1958] See ``docs/references.md``, key Schureman1958.
.. [Ashman1994] See ``docs/references.md``, key Ashman1994.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import arrays as v
from ..arrays import NS, series
from .events import TIDAL_DAY_H

#: Default window: the mean tidal day, 24.8412 h [Schureman1958]_ (value from memory).
TIDAL_DAY_S = TIDAL_DAY_H * 3600.0
#: Share of a window's counted readings that must carry evidence (see the module docstring).
EVIDENCE_SHARE = 0.5
#: States of a reference (``qcpipe.arrays``): 0 emersed, 1 immersed, 2 unknown.
_REFERENCE_STATES = (0, 1, 2)


@dataclass(frozen=True)
class WindowMeasures:
    """Measures of the window centred on each sample (NaN where it holds too few readings of the kind).

    Levels are in class-distance units (the record's dry-to-wet distance is 1).
    """
    n: np.ndarray                  # finite readings in the window
    dry_shift: np.ndarray          # mean of its dry-level readings minus the record's dry level (+: toward wet)
    wet_sag: np.ndarray            # the record's wet level minus the mean of its wet-level readings (+: toward dry)
    between_share: np.ndarray      # held between-level readings / readings not at the dry level
    mismatch_share: np.ndarray     # reference-wet readings not at the wet level / reference-wet readings
    separation: np.ndarray         # Ashman's D [Ashman1994]_ of its dry- and wet-level readings (means, std devs)


@dataclass(frozen=True)
class UnreliablePeriod:
    """A period in which the probe's readings do not show its immersion state."""
    start: np.datetime64           # first sample of the period (UTC, ns)
    end: np.datetime64             # last sample of the period
    kind: str                      # "fouled" or "buried"
    strong: bool                   # readings held between the levels, or contradicted by the reference
    n_samples: int                 # finite readings in the period
    wet_level: float               # mean level of its readings not at the dry level (record's wet level = 1)
    between_share: float           # held between-level readings / readings not at the dry level
    mismatch_share: float          # reference-wet readings not at the wet level / reference-wet readings
    dry_shift: float               # mean of its dry-level readings minus the record's dry level

    @property
    def duration_s(self) -> float:
        return float((self.end - self.start) / np.timedelta64(1, "s"))


@dataclass(frozen=True)
class ProbeHealth:
    """Where a probe's readings can be trusted, and why not elsewhere."""
    unreliable: np.ndarray         # bool per sample: inside a reported period
    strong: np.ndarray             # bool per sample: inside a period with strong evidence
    periods: list[UnreliablePeriod]
    measures: WindowMeasures
    window_s: float
    dry_level: float               # record's dry level (median of its dry-level readings), reading units
    wet_level: float               # record's wet level (median of its wet-level readings), reading units


def held_runs(mask: np.ndarray, t_ns: np.ndarray, min_ns: float) -> np.ndarray:
    """Entries of `mask` in runs of consecutive True lasting at least `min_ns`.

    A run's duration is the time from its first to its last sample plus the median
    sampling step (the time the last sample stands for), so a lone sample lasts one
    step. O(n).
    """
    n = mask.size
    if n == 0:
        return np.zeros(0, dtype=bool)
    step = float(np.median(np.diff(t_ns))) if n > 1 else 0.0
    edge = np.diff(mask.astype(np.int8), prepend=np.int8(0), append=np.int8(0))
    starts, stops = np.flatnonzero(edge == 1), np.flatnonzero(edge == -1)
    keep = (t_ns[stops - 1] - t_ns[starts]).astype(np.float64) + step >= min_ns
    return _cover(starts[keep], stops[keep] - 1, n)


def _cover(first: np.ndarray, last: np.ndarray, n: int) -> np.ndarray:
    """Boolean mask of the index ranges [first, last] (inclusive), by a difference array."""
    d = np.zeros(n + 1, dtype=np.int64)
    np.add.at(d, first, 1)
    np.add.at(d, last + 1, -1)
    return np.cumsum(d[:-1]) > 0


def _window_sum(cs: np.ndarray, start: np.ndarray, stop: np.ndarray) -> np.ndarray:
    return cs[stop] - cs[start]


def _cumulative(a: np.ndarray) -> np.ndarray:
    return np.concatenate(([0], np.cumsum(a)))


def _ratio(num, den, enough):
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(enough, num / np.where(den > 0, den, 1), np.nan)


def _reference(reference_state, n: int, func: str) -> np.ndarray | None:
    if reference_state is None:
        return None
    ref = np.asarray(reference_state)
    if ref.shape != (n,):
        raise ValueError(f"{func}: reference_state must have the shape of readings, ({n},); found {ref.shape}")
    if ref.dtype.kind not in "iub" or not np.isin(ref, _REFERENCE_STATES).all():
        raise ValueError(f"{func}: reference_state must hold integer states 0 (emersed), 1 (immersed) "
                         "or 2 (unknown)")
    return ref.astype(np.int8, copy=False)


def probe_health(times, readings, *, dry_level: float, wet_level: float, reference_state=None,
                 window_s: float = TIDAL_DAY_S, level_band: float = 0.2, max_level_shift: float = 0.05,
                 min_between_s: float = 1800.0, min_samples: int = 6,
                 min_period_s: float = 86400.0) -> ProbeHealth:
    """Fouled and buried periods of an immersion probe from windows of its readings.

    Parameters
    ----------
    times : array_like of datetime64 or int64 ns, shape (n,)
        Sample times, non-decreasing (UTC).
    readings : array_like of float, shape (n,)
        Probe readings; NaN marks missing.
    dry_level, wet_level : float
        The record's class levels in reading units (e.g. the medians of
        :func:`qcpipe.tide.classify.class_separation`); they set the scale and the
        bands. The record's own dry and wet levels are then the medians of the
        readings in those bands (robust to a period of bad readings shorter than
        the rest of the record).
    reference_state : array_like of int, shape (n,), optional
        Expected state at the sample times from a tide reference: 0 emersed,
        1 immersed, 2 unknown (e.g. within the swash margin).
    window_s : float
        Window length, s (default one mean tidal day, 89428.32 s); centred on each sample.
    level_band : float
        b: a reading is at a level when within b class distances of it (0 < b < 0.5).
    max_level_shift : float
        Shift of a window's class level that is evidence, class distances (0 < s < b).
    min_between_s : float
        Shortest held run of between-level readings, s.
    min_samples : int
        Fewest readings of the kind counted before a window gets a verdict (>= 1).
    min_period_s : float
        Shortest period reported, s (from its first to its last sample).

    Returns
    -------
    ProbeHealth

    Notes
    -----
    The rules are in the module docstring. Cost O(n).
    """
    func = "probe_health"
    x, t, ok = series(readings, times, func=func)
    dry = v.real_number(dry_level, func=func, name="dry_level")
    wet = v.real_number(wet_level, func=func, name="wet_level")
    if dry == wet or not (np.isfinite(dry) and np.isfinite(wet)):
        raise ValueError(f"{func}: dry_level = {dry!r} and wet_level = {wet!r}; must be finite and different")
    w_ns = v.duration_ns(window_s, func=func, name="window_s")
    b = v.positive(level_band, func=func, name="level_band")
    if b >= 0.5:
        raise ValueError(f"{func}: level_band = {b!r}; must be below 0.5 (the bands would overlap)")
    shift = v.positive(max_level_shift, func=func, name="max_level_shift")
    if shift >= b:
        raise ValueError(f"{func}: max_level_shift = {shift!r}; must be below level_band = {b!r}")
    between_ns = v.duration_ns(min_between_s, func=func, name="min_between_s")
    m = v.count(min_samples, func=func, name="min_samples", minimum=1)
    period_ns = v.duration_ns(min_period_s, func=func, name="min_period_s")
    ref = _reference(reference_state, x.size, func)

    u = np.where(ok, (x - dry) / (wet - dry), np.nan)
    with np.errstate(invalid="ignore"):
        at_dry = ok & (u < b)
        at_wet = ok & (u > 1 - b)
    between = ok & ~at_dry & ~at_wet
    held = held_runs(between, t, between_ns)
    u_dry0 = float(np.median(u[at_dry])) if at_dry.any() else 0.0
    u_wet0 = float(np.median(u[at_wet])) if at_wet.any() else 1.0

    half = w_ns // 2
    start = np.searchsorted(t, t - half, side="left")
    stop = np.searchsorted(t, t + half, side="right")

    def wsum(a):
        return _window_sum(_cumulative(a), start, stop)

    uz = np.where(ok, u, 0.0)
    n = wsum(ok.astype(np.int64))
    n_dry, n_wet = wsum(at_dry.astype(np.int64)), wsum(at_wet.astype(np.int64))
    n_held, n_between = wsum(held.astype(np.int64)), wsum(between.astype(np.int64))
    # levels relative to the record's, so that sums of squares stay small (shifted data, [CGL1983] in checks)
    dz, wz = np.where(at_dry, uz - u_dry0, 0.0), np.where(at_wet, uz - u_wet0, 0.0)
    s_dry, s_wet = wsum(dz), wsum(wz)
    q_dry, q_wet = wsum(dz * dz), wsum(wz * wz)
    enough_dry, enough_wet = n_dry >= m, n_wet >= m
    dry_shift = _ratio(s_dry, n_dry, enough_dry)
    wet_sag = -_ratio(s_wet, n_wet, enough_wet)
    n_not_dry = n_wet + n_between
    between_share = _ratio(n_held, n_not_dry, n_not_dry >= m)
    with np.errstate(invalid="ignore", divide="ignore"):
        var_dry = np.where(enough_dry, q_dry / np.maximum(n_dry, 1) - dry_shift ** 2, np.nan)
        var_wet = np.where(enough_wet, q_wet / np.maximum(n_wet, 1) - wet_sag ** 2, np.nan)
        spread = np.sqrt(np.maximum(var_dry, 0) + np.maximum(var_wet, 0))
        gap = (u_wet0 - wet_sag) - (u_dry0 + dry_shift)
        separation = np.where(spread > 0, np.sqrt(2.0) * gap / np.where(spread > 0, spread, 1), np.inf)
        separation = np.where(enough_dry & enough_wet, separation, np.nan)

    if ref is not None:
        ref_wet = ok & (ref == 1)
        n_ref = wsum(ref_wet.astype(np.int64))
        n_ref_between = wsum((ref_wet & between).astype(np.int64))
        n_ref_dry = wsum((ref_wet & at_dry).astype(np.int64))
        mismatch_share = _ratio(n_ref_between + n_ref_dry, n_ref, n_ref >= m)
    else:
        n_ref_between = n_ref_dry = np.zeros(x.size, dtype=np.int64)
        mismatch_share = np.full(x.size, np.nan)

    with np.errstate(invalid="ignore"):
        sag = between_share >= EVIDENCE_SHARE
        contradicted = mismatch_share >= EVIDENCE_SHARE
        wet_shifted = wet_sag >= shift
        dry_shifted = dry_shift >= shift
    flagged = sag | contradicted | wet_shifted | dry_shifted
    strong = sag | contradicted
    dry_vote = dry_shifted | (contradicted & (n_ref_dry >= n_ref_between))
    sag_vote = sag | wet_shifted | (contradicted & (n_ref_between > n_ref_dry))

    measures = WindowMeasures(n, dry_shift, wet_sag, between_share, mismatch_share, separation)
    first, last = _periods(flagged, t, merge_ns=half, min_ns=period_ns)
    periods = []
    c = {name: _cumulative(a) for name, a in (
        ("ok", ok), ("dry", at_dry), ("not_dry", at_wet | between), ("held", held), ("strong", strong),
        ("dry_vote", dry_vote), ("sag_vote", sag_vote), ("u_not_dry", np.where(at_wet | between, uz, 0.0)),
        ("u_dry", dz),
        ("ref", ok & (ref == 1) if ref is not None else np.zeros(x.size, bool)),
        ("ref_bad", ok & (ref == 1) & ~at_wet if ref is not None else np.zeros(x.size, bool)))}
    for i0, i1 in zip(first.tolist(), last.tolist()):
        def tot(name, i0=i0, i1=i1):
            return c[name][i1 + 1] - c[name][i0]
        nd = tot("not_dry")
        periods.append(UnreliablePeriod(
            start=np.datetime64(int(t[i0]), "ns"), end=np.datetime64(int(t[i1]), "ns"),
            kind="buried" if tot("dry_vote") > tot("sag_vote") else "fouled",
            strong=bool(tot("strong") > 0), n_samples=int(tot("ok")),
            wet_level=float(tot("u_not_dry") / nd) if nd else float("nan"),
            between_share=float(tot("held") / nd) if nd else float("nan"),
            mismatch_share=float(tot("ref_bad") / tot("ref")) if tot("ref") else float("nan"),
            dry_shift=float(tot("u_dry") / tot("dry")) if tot("dry") else float("nan")))
    unreliable = _cover(first, last, x.size)
    strong_periods = [k for k, p in enumerate(periods) if p.strong]
    strong_mask = _cover(first[strong_periods], last[strong_periods], x.size)
    scale = wet - dry
    return ProbeHealth(unreliable, strong_mask, periods, measures, float(w_ns) / NS,
                       dry + u_dry0 * scale, dry + u_wet0 * scale)


def _periods(flagged: np.ndarray, t: np.ndarray, *, merge_ns: int, min_ns: int) -> tuple[np.ndarray, np.ndarray]:
    """First and last index of each run of `flagged`, runs closer than `merge_ns` merged, those
    spanning less than `min_ns` dropped. Vectorised over runs."""
    edge = np.diff(flagged.astype(np.int8), prepend=np.int8(0), append=np.int8(0))
    first, last = np.flatnonzero(edge == 1), np.flatnonzero(edge == -1) - 1
    if first.size == 0:
        return first, last
    joins = (t[first[1:]] - t[last[:-1]]) < merge_ns        # run k+1 joins run k
    group_start = np.concatenate(([True], ~joins))
    keep_first = first[group_start]
    keep_last = last[np.concatenate((~joins, [True]))]
    long_enough = (t[keep_last] - t[keep_first]) >= min_ns
    return keep_first[long_enough], keep_last[long_enough]
