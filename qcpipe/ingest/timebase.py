"""Logger clocks to UTC, clock-drift correction, deployment trimming, merging downloads.

All times are int64 nanoseconds since 1970-01-01 (UTC once converted) or
numpy datetime64[ns]; all functions are pure and vectorised.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..arrays import NS


#: samples per block of the element-wise time corrections (bounds their temporaries)
BLOCK = 1 << 20


def utc_from_logger_time(logger_time, *, offset_s: float, out: np.ndarray | None = None) -> np.ndarray:
    """UTC from a logger clock that runs ``offset_s`` seconds ahead of UTC.

    ``utc = logger_time - offset``  (an offset of "+01:00" is 3600 s).  ``out`` (datetime64[ns], may be
    ``logger_time`` itself) receives the result instead of a new array.
    """
    t = np.asarray(logger_time, dtype="datetime64[ns]")
    return np.subtract(t, np.timedelta64(int(round(offset_s * NS)), "ns"), out=out)


def drift_corrected(t_utc, *, clock_set, check_logger, check_reference,
                    out: np.ndarray | None = None) -> np.ndarray:
    """Remove a linear clock drift measured by a clock check at recovery.

    The logger clock is taken as exact at ``clock_set`` (UTC) and as
    ``e = check_logger - check_reference`` ahead at the check (``check_logger``
    already converted to UTC with the declared offset).  The error grows
    linearly, so a sample stamped ``t`` is corrected to

        t_true = t - e * (t - clock_set) / (check_logger - clock_set)

    Common practice for logger clocks (no source).  All arguments are
    datetime64[ns]; returns datetime64[ns] (in ``out`` when given, which may be ``t_utc``
    itself).  Computed block by block, so its temporaries stay small whatever the length.
    """
    t_all = np.asarray(t_utc, dtype="datetime64[ns]").view(np.int64)
    t0 = np.datetime64(clock_set, "ns").astype(np.int64)
    tl = np.datetime64(check_logger, "ns").astype(np.int64)
    tr = np.datetime64(check_reference, "ns").astype(np.int64)
    span = tl - t0
    if span <= 0:
        raise ValueError("clock check must be after the time the clock was set")
    err = float(tl - tr)
    res = np.empty(t_all.shape, np.int64) if out is None else out.view(np.int64)
    for a in range(0, t_all.size, BLOCK):
        t = t_all[a:a + BLOCK]
        with np.errstate(over="ignore"):
            d = t - t0                               # exact, but wraps more than 292 years from clock_set
        approx = t.astype(np.float64) - float(t0)
        d = np.where(np.abs(approx) < 9.0e18, d.astype(np.float64), approx)
        corr = np.rint(d * (err / span))
        # saturate instead of wrapping round: such samples are centuries outside any deployment
        lo, hi = np.iinfo(np.int64).min + 1, np.iinfo(np.int64).max
        moved = t.astype(np.float64) - corr
        safe = (moved > -9.2e18) & (moved < 9.2e18)
        res[a:a + BLOCK] = np.where(safe, t - np.where(safe, corr, 0).astype(np.int64), np.where(moved < 0, lo, hi))
    return res.view("datetime64[ns]")


def window_mask(times, *, start, end) -> np.ndarray:
    """True for samples inside the deployment window ``start <= t <= end``."""
    t = np.asarray(times, dtype="datetime64[ns]")
    return (t >= np.datetime64(start, "ns")) & (t <= np.datetime64(end, "ns"))


@dataclass
class Merged:
    """Result of merging records: unique times, values, and what was found."""
    time: np.ndarray                       # datetime64[ns], strictly increasing
    values: dict[str, np.ndarray]
    source: np.ndarray                     # int16 index of the source each kept record came from
    conflict: dict[str, np.ndarray]        # variable -> bool, kept record had a different duplicate
    duplicates: int = 0                    # identical repeated records dropped
    conflicts: int = 0                     # timestamps with differing values
    reordered: int = 0                     # records that were out of time order
    conflict_rows: list[dict] = field(default_factory=list)


def _equal_or_both_nan(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return (a == b) | (np.isnan(a) & np.isnan(b))


def merge_records(time, values: dict[str, np.ndarray], source, *,
                  conflict: dict[str, np.ndarray] | None = None) -> Merged:
    """Sort records by time, drop identical repeats, and expose conflicts.

    Records with the same timestamp and the same values (NaN equal to NaN)
    are duplicates: the first (lowest ``source`` order given) is kept.  Records
    with the same timestamp but different values are conflicts: the first is
    kept, marked in ``conflict[var]``, and every alternative is listed in
    ``conflict_rows`` -- nothing is resolved silently.
    """
    t = np.asarray(time, dtype="datetime64[ns]")
    src = np.asarray(source, dtype=np.int16)
    if t.size == 1 or (t.size > 1 and bool(np.all(t[1:] > t[:-1]))):
        # strictly increasing already: nothing to sort, drop or mark, so no copy of the records
        vals = {k: np.asarray(v, dtype=np.float64) for k, v in values.items()}
        marks = {k: np.asarray(conflict[k], dtype=bool) if conflict and k in conflict else np.zeros(t.size, bool)
                 for k in vals}
        return Merged(t, vals, src, marks)
    order = np.lexsort((src, t))       # by time, then by source (earlier downloads first)
    reordered = int(np.count_nonzero(np.diff(t.astype(np.int64)) < 0))
    t = t[order]
    src = src[order]
    vals = {k: np.asarray(v, dtype=np.float64)[order] for k, v in values.items()}
    prior = {k: np.asarray(v, dtype=bool)[order] for k, v in (conflict or {}).items()}
    n = t.size
    if n == 0:
        return Merged(t, vals, src, {k: np.zeros(0, bool) for k in vals})
    new_group = np.ones(n, dtype=bool)
    new_group[1:] = t[1:] != t[:-1]
    first = np.maximum.accumulate(np.where(new_group, np.arange(n), 0))
    differs_any = np.zeros(n, dtype=bool)
    conflict_out = {}
    rows = []
    for k, v in vals.items():
        d = ~new_group & ~_equal_or_both_nan(v, v[first])
        differs_any |= d
        mark = np.zeros(n, dtype=bool)
        mark[first[d]] = True
        if k in prior:
            mark |= prior[k]
        conflict_out[k] = mark
        for i in np.flatnonzero(d):
            rows.append({"time": str(t[i]), "variable": k, "kept": float(v[first[i]]),
                         "other": float(v[i]), "kept_source": int(src[first[i]]), "other_source": int(src[i])})
    keep = new_group
    dup_identical = int(np.count_nonzero(~new_group & ~differs_any))
    n_conflicts = int(np.unique(first[differs_any]).size)
    return Merged(t[keep], {k: v[keep] for k, v in vals.items()}, src[keep],
                  {k: m[keep] for k, m in conflict_out.items()},
                  duplicates=dup_identical, conflicts=n_conflicts, reordered=reordered,
                  conflict_rows=rows)
