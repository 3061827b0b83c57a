"""Effective elevation of a sensing point: the reference level at its observed transitions."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .. import arrays as v

from .crossings import median_and_spread, reference_series, sorted_times


@dataclass(frozen=True)
class EffectiveElevation:
    """Reference water level at the observed transitions (m above the datum)."""

    levels_m: np.ndarray  #: level at each flood then each drain; NaN outside the reference
    median_m: float
    spread_m: float  #: 1.4826 * MAD, m
    n: int  #: number of transitions with a level


class ElevationCheck(NamedTuple):
    """Result of :func:`elevation_check`."""

    difference_m: float  #: effective minus surveyed, m (NaN: not assessed)
    suspect: bool
    effective: EffectiveElevation
    surveyed_m: float
    tolerance_m: float


def effective_elevation(observed_flood, observed_drain, ref_times, ref_level) -> EffectiveElevation:
    """Reference water level at the observed transitions: the elevation at which
    the sensing point actually goes wet and dry.

    Parameters
    ----------
    observed_flood, observed_drain : array_like of datetime64 or int64 ns
        Observed flood and drain times (e.g. from :func:`observed_transitions`),
        on the time base of the reference (correct a clock error first).
    ref_times : array_like of datetime64 or int64 ns, shape (m,)
        Times of the reference level series, non-decreasing.
    ref_level : array_like of float, shape (m,)
        Reference water level, m above the datum.

    Returns
    -------
    EffectiveElevation
        ``levels_m``: the level linearly interpolated at each flood then each
        drain (NaN outside the reference or next to a NaN level), and their
        median, 1.4826 * MAD spread and count ``n``, in m.

    Notes
    -----
    A time error ``dt`` at a transition where the level changes at rate
    ``dL/dt`` moves the estimate by ``dL/dt * dt``; on a clean record the
    median cancels most of the timing noise. Wave run-up and splash make the
    effective elevation somewhat lower than the surveyed one on exposed
    shores. Definition: common practice, no source. Cost O((n + m) log m).
    """
    func = "effective_elevation"
    of = sorted_times(observed_flood, func=func, name="observed_flood")
    od = sorted_times(observed_drain, func=func, name="observed_drain")
    rt, rx = reference_series(ref_times, ref_level, func=func, names=("ref_times", "ref_level"))
    at = np.concatenate((of, od)).astype(np.float64)
    if rt.size == 0:
        lv = np.full(at.shape, np.nan)
    else:
        lv = np.interp(at, rt.astype(np.float64), rx, left=np.nan, right=np.nan)
    median, spread = median_and_spread(lv)
    return EffectiveElevation(levels_m=lv, median_m=median, spread_m=spread,
                              n=int(np.isfinite(lv).sum()))


def elevation_check(effective: EffectiveElevation, surveyed_m: float, *,
                    tolerance_m: float) -> ElevationCheck:
    """Compare the effective elevation of a sensing point with its surveyed one.

    Parameters
    ----------
    effective : EffectiveElevation
        From :func:`effective_elevation`.
    surveyed_m : float
        Surveyed elevation, m above the datum of the reference.
    tolerance_m : float
        Largest ``|difference|`` accepted, m (> 0).

    Returns
    -------
    ElevationCheck
        ``difference_m = effective.median_m - surveyed_m`` (positive: the point
        behaves as if higher than surveyed), ``suspect = |difference_m| >
        tolerance_m`` (the sentence: ``qcpipe.report.words.elevation_text``). With no transitions the
        difference is NaN and nothing is suspected.

    Notes
    -----
    Definition: common practice, no source.
    """
    func = "elevation_check"
    z = v.real_number(surveyed_m, func=func, name="surveyed_m")
    tol = v.positive(tolerance_m, func=func, name="tolerance_m")
    if effective.n == 0 or not np.isfinite(effective.median_m):
        return ElevationCheck(math.nan, False, effective, z, tol)
    diff = effective.median_m - z
    return ElevationCheck(diff, bool(abs(diff) > tol), effective, z, tol)
