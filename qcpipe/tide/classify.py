"""Immersion state from a wet/dry probe's readings: threshold, separation of the two classes, hysteresis.

States are int8 (:data:`qcpipe.arrays.EMERSED` 0, ``IMMERSED`` 1, ``UNKNOWN`` 2). Times are
numpy datetime64 (any unit) or int64 nanoseconds since 1970-01-01, UTC; durations in seconds.

A probe's electrodes are coated, and the coating's capacitance in series with the water keeps
the wet reading far below the ~80 times the dry one that water's relative permittivity alone
would give ([CRC]_, from memory); so the threshold is learnt from each record (Otsu's method).

References
----------
.. [Otsu1979] See ``docs/references.md``, key Otsu1979.
.. [Ashman1994] See ``docs/references.md``, key Ashman1994.
.. [RousseeuwCroux1993] See ``docs/references.md``, key RousseeuwCroux1993.
.. [CRC] See ``docs/references.md``, key CRC.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import arrays as v
from ..arrays import NS, UNKNOWN, series

#: Below this :func:`bimodality_score` a sample is "not clearly bimodal" (Otsu's eta; kept as a
#: record: the probe verdict uses :func:`class_separation`, which does not depend on how rare a state is).
BIMODALITY_CUTOFF = 0.9
#: Below this :attr:`ClassSeparation.separation` (Ashman's D) the two classes are not clearly apart.
SEPARATION_CUTOFF = 6.0
#: Scale of the median absolute deviation to a normal standard deviation, 1 / Phi^-1(3/4) [RousseeuwCroux1993]_.
MAD_TO_SD = 1.482602218505602


def _finite(readings, func: str) -> np.ndarray:
    x = v.as_values(readings, func=func, name="readings").ravel()
    return x[np.isfinite(x)]


def otsu_threshold(readings, nbins: int = 256) -> float:
    r"""Threshold that maximises the between-class variance of a histogram [Otsu1979]_.

    Parameters
    ----------
    readings : array_like of float
        Probe readings (any shape, any unit); NaN and infinite values ignored.
    nbins : int, default 256
        Number of equal-width histogram bins between the smallest and largest
        finite reading.

    Returns
    -------
    float
        The bin edge :math:`e_{k^*+1}` between the two classes, in the unit of
        `readings`: readings below it form the lower class. NaN when there are
        fewer than two distinct finite readings.

    Notes
    -----
    With :math:`p_i` the fraction of readings in bin i (centre :math:`c_i`),
    :math:`\omega(k) = \sum_{i \le k} p_i`, :math:`\mu(k) = \sum_{i \le k} p_i
    c_i` and :math:`\mu_T = \mu(K-1)`, the between-class variance of the split
    after bin k is ([Otsu1979]_, from memory)

    .. math:: \sigma_B^2(k) = \frac{(\mu_T \omega(k) - \mu(k))^2}{\omega(k)(1 - \omega(k))}

    and :math:`k^*` is its maximiser. Between two well-separated groups the
    bins in between are empty and :math:`\sigma_B^2` is flat over them (equal
    to rounding); the threshold is then the middle of that flat top (the first
    one, within a relative 1e-9 of the maximum) rather than whichever bin
    rounding favours, so that it lies mid-way between dry and wet readings.
    O(n + nbins).
    """
    func = "otsu_threshold"
    nbins = v.count(nbins, func=func, name="nbins", minimum=2)
    x = _finite(readings, func)
    if x.size == 0 or x.min() == x.max():
        return float("nan")
    counts, edges = np.histogram(x, bins=nbins, range=(float(x.min()), float(x.max())))
    p = counts / counts.sum()
    centres = (edges[:-1] + edges[1:]) / 2
    omega = np.cumsum(p)[:-1]
    mu = np.cumsum(p * centres)[:-1]
    mu_t = float(np.sum(p * centres))
    with np.errstate(invalid="ignore", divide="ignore"):
        sb = (mu_t * omega - mu) ** 2 / (omega * (1 - omega))
    sb = np.where((omega > 0) & (omega < 1), sb, -np.inf)
    k0 = int(np.argmax(sb))
    top = sb[k0:] >= sb[k0] * (1 - 1e-9)
    k1 = k0 + (int(np.argmin(top)) if not top.all() else top.size) - 1
    return float((edges[k0 + 1] + edges[k1 + 1]) / 2)


def bimodality_score(readings, threshold: float) -> float:
    r"""Separation of the readings into two groups at `threshold`, 0 to 1.

    Otsu's separability measure [Otsu1979]_ evaluated on the readings
    themselves (not a histogram):

    .. math:: \eta = \sigma_B^2 / \sigma_T^2, \quad
              \sigma_B^2 = \omega_0 \omega_1 (\mu_1 - \mu_0)^2

    with :math:`\omega_0, \mu_0` the fraction and mean of the finite readings
    below `threshold`, :math:`\omega_1, \mu_1` those of the others, and
    :math:`\sigma_T^2` the variance of all finite readings.

    Returns 0.0 when the threshold is NaN, the readings are constant or one
    class is empty.

    Notes
    -----
    Cutoff :data:`BIMODALITY_CUTOFF` = 0.9: below it a probe is "not clearly
    bimodal" (fouled, buried, failed, or never changing state). Reasons
    (derived here, not from a published source): a unimodal normal sample split
    at its mean gives exactly :math:`2/\pi \approx 0.64` (half-normal means
    :math:`\pm\sigma\sqrt{2/\pi}`), a uniform one 0.75; two equal normal groups
    reach 0.9 at a separation of about 6 standard deviations. A working probe
    (0.06 vs 0.17 nF with a few pF of noise) is separated by tens of standard
    deviations and scores about 0.97 when one state holds only 5 % of the time
    (0.94 at 2 %; simulated). A skewed unimodal sample with a heavy atom at its mode can still
    exceed 0.8, which is why the cutoff is not lower.
    """
    func = "bimodality_score"
    threshold = float(threshold)
    x = _finite(readings, func)
    if np.isnan(threshold) or x.size < 2:
        return 0.0
    total = float(np.var(x))
    low = x < threshold
    w0 = float(low.mean())
    if total == 0 or w0 in (0.0, 1.0):
        return 0.0
    sb = w0 * (1 - w0) * (float(x[~low].mean()) - float(x[low].mean())) ** 2
    return float(min(sb / total, 1.0))


@dataclass(frozen=True)
class ClassSeparation:
    """The probe readings split in two classes at a threshold: robust levels and spreads, how far apart
    the classes are, and how many readings of each class are held for more than one sample."""
    low_level: float      # median of the finite readings below the threshold (NaN if none)
    high_level: float     # median of the others
    low_spread: float     # MAD_TO_SD * median absolute deviation of the low class
    high_spread: float
    separation: float     # Ashman's D from the levels and spreads; 0 if a class is empty, inf if both spreads are 0
    n_low: int
    n_high: int
    n_low_held: int       # low readings in runs of at least two consecutive finite readings below the threshold
    n_high_held: int

    @property
    def fewest_held(self) -> int:
        """Held readings of the rarer class: the evidence that the probe shows two states at all."""
        return min(self.n_low_held, self.n_high_held)


def _median_and_spread(x: np.ndarray) -> tuple[float, float]:
    if x.size == 0:
        return float("nan"), float("nan")
    m = float(np.median(x))
    return m, MAD_TO_SD * float(np.median(np.abs(x - m)))


def held_count(side: np.ndarray) -> int:
    """Number of True entries of `side` that have a True neighbour (runs of two or more). O(n)."""
    side = np.asarray(side, dtype=bool)
    if side.size < 2:
        return 0
    pair = side[1:] & side[:-1]
    held = np.zeros(side.size, dtype=bool)
    held[1:] |= pair
    held[:-1] |= pair
    return int(np.count_nonzero(held))


def class_separation(readings, threshold: float) -> ClassSeparation:
    r"""How far apart the two classes of probe readings are, whatever their sizes.

    Parameters
    ----------
    readings : array_like of float, shape (n,)
        Probe readings in time order; NaN and infinite values are dropped (the
        finite readings on either side of a gap count as consecutive).
    threshold : float
        Reading that splits the classes (e.g. :func:`otsu_threshold`), in the unit of `readings`.

    Returns
    -------
    ClassSeparation

    Notes
    -----
    Ashman's D [Ashman1994]_ between the classes, with the median :math:`m_k` as
    level and :math:`s_k = 1.4826\,\mathrm{MAD}_k` as spread ([RousseeuwCroux1993]_;
    robust to the few readings taken while the probe wets or drains):

    .. math:: D = \sqrt{2}\,|m_1 - m_0| / \sqrt{s_0^2 + s_1^2}

    Unlike Otsu's :math:`\eta` (:func:`bimodality_score`), D does not fall when one
    class is rare: :math:`\eta = \omega_0\omega_1\Delta^2 / (\omega_0\omega_1\Delta^2 +
    \sigma_W^2)` goes to 0 with the smaller class fraction, so a healthy probe wet
    0.5 % of the time scored about 0.8, below the 0.9 cutoff.

    Cutoff :data:`SEPARATION_CUTOFF` = 6: two normal classes of equal spread
    reach it when their means are 6 standard deviations apart (the separation at
    which the previous eta cutoff of 0.9 was met by two equal classes). Ashman et al.
    ask D > 2 for a clean separation of a fitted two-normal mixture; a hard split
    at a threshold truncates each class and shrinks its spread, so unimodal
    samples reach larger values here: 2.3 for a normal sample, 2.7 for a uniform
    one, about 3.6 for a lognormal one with sigma = 1 (simulated, n = 200000;
    tests/tide/test_immersion.py checks the normal value analytically). Hence 6,
    not 2 (derived here, not from a published source). A working probe is
    separated by tens (noise of a few pF on a 0.1 nF step).

    The rare class's size is kept apart: ``n_*_held`` counts readings in runs of
    two or more on their side of the threshold, because a lone reading (a spike)
    is no evidence of a state (common practice, no source). O(n) (medians by
    selection).
    """
    func = "class_separation"
    x = _finite(readings, func)
    threshold = v.real_number(threshold, func=func, name="threshold")
    low = x < threshold
    m0, s0 = _median_and_spread(x[low])
    m1, s1 = _median_and_spread(x[~low])
    n0, n1 = int(np.count_nonzero(low)), int(np.count_nonzero(~low))
    if n0 == 0 or n1 == 0:
        d = 0.0
    else:
        spread = float(np.hypot(s0, s1))
        d = float("inf") if spread == 0 else float(np.sqrt(2.0) * abs(m1 - m0) / spread)
    return ClassSeparation(m0, m1, s0, s1, d, n0, n1, held_count(low), held_count(~low))


def _run_starts(s: np.ndarray) -> np.ndarray:
    return np.concatenate(([0], np.flatnonzero(np.diff(s)) + 1))


def merge_short_runs(t_ns: np.ndarray, s: np.ndarray, min_ns: int) -> np.ndarray:
    """Binary state `s` with the interior runs shorter than `min_ns` merged away.

    The duration of a run is the time from its first sample to the first
    sample of the next run. Runs at either end of the record are never removed
    (their length is unknown). Each vectorised pass flips the short runs that
    are shorter than both neighbouring short runs (ties: the earlier one), so
    that a run flipped joins its two neighbours; passes repeat until no
    interior run is short. Each pass is O(number of runs) and removes at least
    one run; chattering blocks take a few passes.
    """
    if min_ns <= 0 or s.size == 0:
        return s
    starts = _run_starts(s)
    while starts.size >= 3:
        dur = np.diff(t_ns[starts]).astype(np.float64)
        key = np.full(starts.size, np.inf)
        inner = dur[1:]
        key[1:-1] = np.where(inner < min_ns, inner, np.inf)
        left = np.concatenate(([np.inf], key[:-1]))
        right = np.concatenate((key[1:], [np.inf]))
        pick = np.flatnonzero(np.isfinite(key) & (key < left) & (key <= right))
        if pick.size == 0:
            break
        drop = np.zeros(starts.size, dtype=bool)
        drop[pick] = True
        drop[pick + 1] = True
        starts = starts[~drop]
    lengths = np.diff(np.concatenate((starts, [s.size])))
    return np.repeat(s[starts], lengths)


def classify_immersion(
    times,
    readings,
    *,
    threshold: float,
    hysteresis: float,
    min_state_s: float,
    wet_is_high: bool = True,
) -> np.ndarray:
    r"""Immersion state of each probe sample: 1 immersed, 0 emersed, 2 unknown.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing (UTC).
    readings : array_like of float, shape (n,)
        Probe readings (e.g. capacitance, nF); NaN marks missing.
    threshold : float
        Centre of the switching band, in the unit of `readings` (e.g. from
        :func:`otsu_threshold`).
    hysteresis : float
        Half width h of the band (>= 0), in the unit of `readings`.
    min_state_s : float
        Interior state runs shorter than this, in seconds, are merged into
        their neighbours (0: none).
    wet_is_high : bool, default True
        True when wet readings are above dry ones (capacitance); False for a
        probe whose reading falls in water.

    Returns
    -------
    numpy.ndarray of int8, shape (n,)

    Notes
    -----
    Hysteresis (wet_is_high): a reading :math:`r > \theta + h` sets the state
    wet, :math:`r < \theta - h` sets it dry, a reading inside the band
    (both edges included) keeps the state of the last reading outside it. The
    samples before the first reading outside the band take that reading's
    state. NaN readings are 2 and do not reset the state. If no reading lies
    outside the band every sample is 2.

    Then :func:`merge_short_runs` removes interior runs shorter than
    `min_state_s` (duration = time from the run's first sample to the next
    run's first sample), shortest first; runs at the record ends stay.

    Definition: common practice, no source. Cost O(n) for the hysteresis
    (running maximum of indices) plus a few O(runs) passes.
    """
    func = "classify_immersion"
    x, t, ok = series(readings, times, func=func)
    threshold = v.real_number(threshold, func=func, name="threshold")
    hyst = v.positive(hysteresis, func=func, name="hysteresis", allow_zero=True)
    min_s = v.positive(min_state_s, func=func, name="min_state_s", allow_zero=True)
    sign = 1.0 if wet_is_high else -1.0
    y, theta = sign * x, sign * threshold
    state = np.full(x.shape, UNKNOWN, dtype=np.int8)
    with np.errstate(invalid="ignore"):
        wet = ok & (y > theta + hyst)
        dry = ok & (y < theta - hyst)
    outside = wet | dry
    if not outside.any():
        return state
    last = np.maximum.accumulate(np.where(outside, np.arange(x.size), -1))
    last[last < 0] = int(np.argmax(outside))
    raw = wet[last].astype(np.int8)
    vi = np.flatnonzero(ok)
    state[vi] = merge_short_runs(t[vi], raw[vi], int(round(min_s * NS)))
    return state
