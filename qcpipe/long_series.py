"""Long series in bounded memory: the core checks in time chunks with overlap, written incrementally.

**Core checks only**: gross range, climatology, spike, rate of change, flat line and gap (the
checks of :func:`qcpipe.apply_rules.flags_for_variable`) and their aggregate.  The state-aware, tide,
gating, download-conflict and manual flags of a normal run are *not* applied here; a
deployment's archived dataset always comes from the normal pipeline.  This module is for
screening a series too long for memory (a year at 1 Hz) with a variable's rules.

A station logging at 1 Hz for years does not fit in memory as one array per
variable.  :func:`core_flags_in_chunks` takes the series as an iterator of blocks and
yields flags block by block, keeping only a buffer of ``overlap`` seconds
behind and ahead of the samples it finalises.  With ``overlap`` at least the
longest window of the rules (:func:`required_overlap_s`) the flags equal those
of an in-memory run at every sample: the checks look at most that far back or
ahead, flat-line durations saturate at ``fail_after``, and the last valid
sample before the buffer is kept so the gap check sees every gap.  Runs and
stretches of the flat-line check go on across missing values, so a sample
waits for a valid sample ``overlap`` after the next valid one (the delayed
flat line looks that far ahead), and the look-behind reaches ``overlap``
before the last valid sample ``overlap`` back (a look-ahead from there may
still cover the samples being finalised).  A long stretch of missing values
is therefore held in memory until the next valid sample.
:func:`core_qc_netcdf` applies it between NetCDF files, reading and writing slices
through :mod:`qcpipe.archive.ncio`.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from pathlib import Path

import numpy as np

from .archive.ncio import SeriesWriter, read_series_blocks
from .checks import aggregate_flags
from .config.rules import VariableRules
from .apply_rules import flags_for_variable


def required_overlap_s(rules: VariableRules) -> float:
    """The longest look-back or look-ahead of any configured check, in seconds."""
    spans = [0.0]
    for r in (rules, rules.for_state("immersed"), rules.for_state("emersed")):
        if r.spike is not None:
            spans.append(r.spike.half_window)
        if r.rate_of_change is not None:
            spans.append(r.rate_of_change.window)
        if r.flat_line is not None:
            spans.append(r.flat_line.fail_after)
    if rules.gap is not None:
        spans.append(rules.gap.max_gap)
    return float(max(spans))


def core_flags_in_chunks(blocks: Iterable[tuple[np.ndarray, np.ndarray]], rules: VariableRules, *,
              overlap_s: float | None = None) -> Iterator[tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]]:
    """Core-check flags of a long series given as blocks of (times datetime64[ns], values).

    Yields (times, values, {check: flags, "aggregate": their aggregate}) for consecutive runs
    of samples, in order, each sample exactly once.  Memory: the current block plus
    ``overlap_s`` of samples on either side.
    """
    overlap_s = required_overlap_s(rules) if overlap_s is None else float(overlap_s)
    lap = np.int64(round(overlap_s * 1e9))
    buf_t = np.empty(0, np.int64)
    buf_v = np.empty(0, np.float64)
    done = 0                            # first buffer index whose flags are not yet emitted

    def finalise(upto: int):
        nonlocal buf_t, buf_v, done
        if upto <= done:
            return None
        # look-behind: everything from one sample at or before t_done - overlap, and the last
        # valid sample before `done` (the gap check needs the previous valid sample)
        lo = _look_behind_start(buf_t, buf_v, done, lap)
        t = buf_t[lo:].astype("datetime64[ns]")
        flags = flags_for_variable(buf_v[lo:], t, rules)
        a, b = done - lo, upto - lo
        values = buf_v[done:upto].copy()
        out_flags = {k: f[a:b].copy() for k, f in flags.items()}
        out_flags["aggregate"] = aggregate_flags(values, list(out_flags.values()))
        out = (t[a:b], values, out_flags)
        done = upto
        # drop what no later sample can look back to
        keep_from = _look_behind_start(buf_t, buf_v, done, lap) if done < buf_t.size else \
            _look_behind_start(buf_t, buf_v, done - 1, lap)
        buf_t, buf_v = buf_t[keep_from:], buf_v[keep_from:]
        done -= keep_from
        return out

    for times, values in blocks:
        t = np.asarray(times, dtype="datetime64[ns]").astype(np.int64)
        if t.size == 0:
            continue
        if buf_t.size and t[0] < buf_t[-1]:
            raise ValueError("blocks must be in time order and not overlap")
        buf_t = np.concatenate((buf_t, t))
        buf_v = np.concatenate((buf_v, np.asarray(values, dtype=np.float64)))
        upto = _look_ahead_complete(buf_t, buf_v, lap)
        out = finalise(upto)
        if out is not None:
            yield out
    out = finalise(buf_t.size)
    if out is not None:
        yield out


def _look_ahead_complete(t: np.ndarray, v: np.ndarray, lap: np.int64) -> int:
    """Number of leading buffer samples whose flags no later sample can change.

    The samples before the last valid sample at or before ``t_v - lap``, t_v the
    time of the last valid sample: each has a valid sample after it at most that
    late, and all samples up to ``lap`` beyond it are in the buffer (the delayed
    flat line covers a sample from look-backs that end up to ``lap`` after the
    next valid sample; the other checks look at most ``lap`` ahead).
    """
    valid = np.flatnonzero(np.isfinite(v))
    if valid.size == 0:
        return 0
    k = int(np.searchsorted(t[valid], t[valid[-1]] - lap, side="right")) - 1
    return int(valid[k]) if k >= 0 else 0


def _look_behind_start(t: np.ndarray, v: np.ndarray, i: int, lap: np.int64) -> int:
    """First buffer index a sample at ``i`` (or later) may depend on.

    The last *valid* sample at or before ``t[i] - lap`` (runs and gaps are
    measured between valid samples, so the look-behind must reach a valid one),
    and in any case the last valid sample before ``i``; then ``lap`` further back
    from there (a delayed flat-line look-ahead from a sample up to ``lap`` before
    it can reach across a gap to ``i``).
    """
    j = int(np.searchsorted(t, t[i] - lap, side="right")) - 1
    valid = np.flatnonzero(np.isfinite(v[:max(j, 0) + 1])) if j >= 0 else np.empty(0, int)
    lo = int(valid[-1]) if valid.size else 0
    before = np.flatnonzero(np.isfinite(v[:i]))
    if before.size:
        lo = min(lo, int(before[-1]))
    lo = max(lo, 0)
    return int(np.searchsorted(t, t[lo] - lap, side="left")) if lo < t.size else lo


def core_qc_netcdf(source: str | Path, variable: str, rules: VariableRules, out: str | Path, *,
                   block: int = 2_000_000, overlap_s: float | None = None) -> dict[str, dict[int, int]]:
    """Core checks of one variable of a (large) NetCDF time series into a flags file, in bounded memory.

    The output (``time``, the variable, one int8 flag variable per core check and
    ``<variable>_qc_aggregate``) is written slice by slice and renamed into place at the end
    (:class:`qcpipe.archive.ncio.SeriesWriter`).  Returns counts per flag value of each check.
    """
    counts: dict[str, dict[int, int]] = {}
    with SeriesWriter(out, variable) as writer:
        for t, v, flags in core_flags_in_chunks(read_series_blocks(source, variable, block), rules,
                                                overlap_s=overlap_s):
            writer.append(t, v, flags)
            for check, f in flags.items():
                vals, cnt = np.unique(f, return_counts=True)
                per = counts.setdefault(check, {})
                for a, c in zip(vals, cnt):
                    per[int(a)] = per.get(int(a), 0) + int(c)
    return {k: dict(sorted(v.items())) for k, v in counts.items()}
