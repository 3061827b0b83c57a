"""Tidal datums of a water-level record (MHHW ... MLLW, mean and great diurnal range).

References
----------
.. [NOAA2000] See ``docs/references.md``, key NOAA2000.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from qcpipe.tide.events import TideEvents, default_tidal_day_origin, high_low_waters, tidal_day_classes

from .. import arrays as v
from ..arrays import NS, as_ns, series

_HOUR_NS = 3600 * NS


@dataclass(frozen=True)
class TidalDatums:
    """Tidal datums, in the unit and vertical datum of the input heights (m).

    Attributes
    ----------
    mhhw, mhw, dtl, mtl, msl, mlw, mllw : float
        Mean higher high water, mean high water, diurnal tide level, mean tide
        level, mean sea level, mean low water, mean lower low water.
    mn, gt : float
        Mean range (MHW - MLW) and great diurnal range (MHHW - MLLW).
    record_length_days : float
        Time from the first to the last valid sample, in days.
    n_high_waters, n_low_waters, n_hourly_heights : int
        Numbers of values averaged.
    note : str
        The record used, the tidal-day origin, and that a record shorter than
        the 19-year National Tidal Datum Epoch gives approximate datums.
    tidal_day_origin : numpy.datetime64
        Start of the first tidal day used for MHHW and MLLW (UTC, ns).
    """

    mhhw: float
    mhw: float
    dtl: float
    mtl: float
    msl: float
    mlw: float
    mllw: float
    mn: float
    gt: float
    record_length_days: float
    n_high_waters: int
    n_low_waters: int
    n_hourly_heights: int
    note: str
    tidal_day_origin: np.datetime64


def hourly_heights(t_ns: np.ndarray, h: np.ndarray, *, max_gap_ns: int) -> np.ndarray:
    """Heights at each whole UTC hour of the record, linearly interpolated.

    `t_ns` sorted, `h` finite. An hour whose bracketing samples are more than
    `max_gap_ns` apart (the hour falls in a gap) is skipped; a sample exactly
    on the hour is used as it is.
    """
    if t_ns.size == 0:
        return np.zeros(0)
    first = -(-int(t_ns[0]) // _HOUR_NS) * _HOUR_NS
    grid = np.arange(first, int(t_ns[-1]) + 1, _HOUR_NS, dtype=np.int64)
    j = np.searchsorted(t_ns, grid, side="right") - 1
    exact = t_ns[j] == grid
    k = np.minimum(j + 1, t_ns.size - 1)
    span = t_ns[k] - t_ns[j]
    usable = exact | ((k > j) & (span <= max_gap_ns))
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(exact, 0.0, (grid - t_ns[j]) / np.where(span > 0, span, 1))
    values = h[j] + frac * (h[k] - h[j])
    return values[usable]


def tidal_datums(
    times, heights, events: TideEvents | None = None, *, max_gap_s: float = 3600.0,
    tidal_day_origin=None,
) -> TidalDatums:
    r"""Tidal datums of a water-level record, by their standard definitions.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing (UTC).
    heights : array_like of float, shape (n,)
        Water level, m; NaN marks missing.
    events : TideEvents, optional
        High and low waters of the record; default
        ``high_low_waters(times, heights)`` with its default parameters.
    max_gap_s : float, default 3600
        An hour whose bracketing valid samples are more than this many seconds
        apart gives no hourly height.
    tidal_day_origin : datetime64 or int64 nanoseconds, optional
        Start of the first tidal day (for MHHW, MLLW, DTL, GT). Default: 1/8 of
        a tidal day (3.1 h) before the first event (see
        :func:`qcpipe.tide.events.tidal_day_classes`).

    Returns
    -------
    TidalDatums

    Raises
    ------
    ValueError
        If the record holds no high or no low water.

    Notes
    -----
    Definitions of [NOAA2000]_ (from memory), applied to the record given:

    * MHW: mean of all high waters; MLW: mean of all low waters.
    * MHHW: mean of the higher high water of each tidal day; MLLW: mean of the
      lower low water of each tidal day (classes from
      :func:`qcpipe.tide.events.tidal_day_classes`; a tidal day with a single
      high water counts it as the higher high water). Tidal days are
      consecutive intervals of 24.8412 h from `tidal_day_origin`, by default
      3.1 h before the first event; the origin used is returned and stated in
      `note`. Where a tidal day holds two high (low) waters of nearly equal
      height, where the boundary falls decides which events are compared: on a
      month-long record, moving the origin through a tidal day moves MHHW and
      MLLW by a few centimetres (measured on synthetic tides of 1 m total
      amplitude, form factors 0.1 to purely diurnal, 6-min sampling: up to
      about 2 cm for MLLW and up to about 5 cm for MHHW on 30 days; 1 to 3 cm on
      180 days; ``tests/tide/test_datums.py``). Give the same origin to compare
      records; over the 19-year epoch the effect averages out.
    * MTL = (MHW + MLW) / 2; DTL = (MHHW + MLLW) / 2.
    * MSL: mean of the hourly heights (heights at each whole UTC hour, linearly
      interpolated between the samples around it).
    * MN = MHW - MLW; GT = MHHW - MLLW.

    [NOAA2000]_ computes datums over the 19-year National Tidal Datum Epoch,
    and reduces shorter series to it by comparison with a control station.
    No such reduction is done here: datums from a shorter record are
    approximate (the 18.6-year lunar nodal cycle alone modulates the M2
    amplitude by about 4 per cent either way, from memory), which `note`
    states.
    """
    func = "tidal_datums"
    h, t, ok = series(heights, times, func=func)
    gap_ns = v.duration_ns(max_gap_s, func=func, name="max_gap_s")
    if events is None:
        events = high_low_waters(t, h)
    elif not isinstance(events, TideEvents):
        raise TypeError(f"{func}: events must be TideEvents; found {type(events).__name__}")
    high = events.is_high
    if not high.any() or high.all():
        raise ValueError(
            f"{func}: the record holds {int(high.sum())} high and {int((~high).sum())} low "
            "waters; datums need at least one of each (is the record shorter than a "
            "tidal cycle, or the range below min_range_m?)"
        )
    origin_ns = default_tidal_day_origin(events)
    if tidal_day_origin is not None:
        origin_ns = int(as_ns(np.atleast_1d(tidal_day_origin), func=func, name="tidal_day_origin")[0])
    labels = tidal_day_classes(events, origin=origin_ns)
    mhw = float(events.height[high].mean())
    mlw = float(events.height[~high].mean())
    mhhw = float(events.height[labels == "HHW"].mean())
    mllw = float(events.height[labels == "LLW"].mean())
    tv, hv = t[ok], h[ok]
    hourly = hourly_heights(tv, hv, max_gap_ns=gap_ns)
    msl = float(hourly.mean()) if hourly.size else float("nan")
    days = float(tv[-1] - tv[0]) / (86400 * NS)
    first, last, origin = (np.datetime64(int(x), "ns").astype("datetime64[s]")
                           for x in (tv[0], tv[-1], origin_ns))
    note = (
        f"Datums from {days:.2f} days of record ({first}Z to {last}Z; {int(high.sum())} high "
        f"and {int((~high).sum())} low waters, {hourly.size} hourly heights; tidal days of "
        f"24.8412 h from {origin}Z), not reduced "
        "to a National Tidal Datum Epoch: a record shorter than the 19-year epoch gives "
        "approximate datums (NOAA 2000)."
    )
    return TidalDatums(
        mhhw=mhhw,
        mhw=mhw,
        dtl=(mhhw + mllw) / 2,
        mtl=(mhw + mlw) / 2,
        msl=msl,
        mlw=mlw,
        mllw=mllw,
        mn=mhw - mlw,
        gt=mhhw - mllw,
        record_length_days=days,
        n_high_waters=int(high.sum()),
        n_low_waters=int((~high).sum()),
        n_hourly_heights=int(hourly.size),
        note=note,
        tidal_day_origin=np.datetime64(origin_ns, "ns"),
    )
