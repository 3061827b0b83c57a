"""Long series in bounded memory: QC in time chunks with overlap, output written incrementally.

A station logging at 1 Hz for years does not fit in memory as one array per
variable.  :func:`qc_chunks` takes the series as an iterator of blocks and
yields flags block by block, keeping only a buffer of ``overlap`` seconds
behind and ahead of the samples it finalises.  With ``overlap`` at least the
longest window of the rules (:func:`required_overlap_s`) the flags equal those
of an in-memory run at every sample: the checks look at most that far back or
ahead, flat-line durations saturate at ``fail_after``, and the last valid
sample before the buffer is kept so the gap check sees every gap.
:func:`qc_netcdf_chunked` applies it between NetCDF files, reading and
writing slices.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from pathlib import Path

import numpy as np

from .config.rules import VariableRules
from .qc import flags_for_variable


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


def qc_chunks(blocks: Iterable[tuple[np.ndarray, np.ndarray]], rules: VariableRules, *,
              overlap_s: float | None = None) -> Iterator[tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]]:
    """Flags of a long series given as blocks of (times datetime64[ns], values), block by block.

    Yields (times, values, {check: flags}) for consecutive runs of samples, in
    order, each sample exactly once.  Memory: the current block plus
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
        out = (t[a:b], buf_v[done:upto].copy(), {k: f[a:b].copy() for k, f in flags.items()})
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
        # samples whose look-ahead is complete: t <= t_last - overlap
        upto = int(np.searchsorted(buf_t, buf_t[-1] - lap, side="right"))
        out = finalise(upto)
        if out is not None:
            yield out
    out = finalise(buf_t.size)
    if out is not None:
        yield out


def _look_behind_start(t: np.ndarray, v: np.ndarray, i: int, lap: np.int64) -> int:
    """First buffer index a sample at ``i`` (or later) may depend on.

    The last *valid* sample at or before ``t[i] - lap`` (runs and gaps are
    measured between valid samples, so the look-behind must reach a valid one),
    and in any case the last valid sample before ``i``.
    """
    j = int(np.searchsorted(t, t[i] - lap, side="right")) - 1
    valid = np.flatnonzero(np.isfinite(v[:max(j, 0) + 1])) if j >= 0 else np.empty(0, int)
    lo = int(valid[-1]) if valid.size else 0
    before = np.flatnonzero(np.isfinite(v[:i]))
    if before.size:
        lo = min(lo, int(before[-1]))
    return max(lo, 0)


def read_blocks(path: str | Path, variable: str, block: int) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    """Blocks of ``block`` samples of (time, variable) from a NetCDF file, read slice by slice."""
    import netCDF4

    from .archive.ncio import NC_LOCK

    with NC_LOCK:
        nc = netCDF4.Dataset(path)
    try:
        tv, vv = nc["time"], nc[variable]
        n = tv.shape[0]
        scale = _ns_per_unit(tv.units)
        epoch = _epoch_ns(tv.units)
        for a in range(0, n, block):
            with NC_LOCK:
                t = np.asarray(tv[a:a + block], dtype=np.float64)
                v = np.ma.filled(vv[a:a + block].astype(np.float64), np.nan)
            yield (epoch + np.rint(t * scale).astype(np.int64)).astype("datetime64[ns]"), v
    finally:
        with NC_LOCK:
            nc.close()


def _ns_per_unit(units: str) -> float:
    word = units.split()[0].lower()
    return {"seconds": 1e9, "second": 1e9, "s": 1e9, "minutes": 60e9, "hours": 3600e9, "days": 86400e9}[word]


def _epoch_ns(units: str) -> np.int64:
    ref = units.split("since", 1)[1].strip().replace("Z", "").replace("+00:00", "")
    return np.datetime64(ref.replace(" ", "T"), "ns").astype(np.int64)


def qc_netcdf_chunked(source: str | Path, variable: str, rules: VariableRules, out: str | Path, *,
                      block: int = 2_000_000, overlap_s: float | None = None) -> dict[str, int]:
    """QC one variable of a (large) NetCDF time series into a flags file, in bounded memory.

    The output (``time``, the variable, one int8 flag variable per check) is
    written incrementally along an unlimited time dimension into a temporary
    file that is renamed into place at the end.  Returns counts per flag value
    of each check.
    """
    import netCDF4

    from .archive.ncio import NC_LOCK
    from .files import atomic_path

    counts: dict[str, dict[int, int]] = {}
    with atomic_path(out) as tmp:
        with NC_LOCK:
            dst = netCDF4.Dataset(tmp, "w", format="NETCDF4")
            dst.createDimension("time", None)
            tv = dst.createVariable("time", "f8", ("time",), chunksizes=(65536,))
            tv.units = "seconds since 1970-01-01T00:00:00Z"
            tv.standard_name = "time"
            vv = dst.createVariable(variable, "f8", ("time",), zlib=True, complevel=4, chunksizes=(65536,),
                                    fill_value=np.nan)
        fvars = {}
        n = 0
        try:
            for t, v, flags in qc_chunks(read_blocks(source, variable, block), rules, overlap_s=overlap_s):
                with NC_LOCK:
                    for check in flags:
                        if check not in fvars:
                            fvars[check] = dst.createVariable(f"{variable}_qc_{check}", "i1", ("time",), zlib=True,
                                                              complevel=4, chunksizes=(65536,))
                    m = t.size
                    tv[n:n + m] = t.astype(np.int64) / 1e9
                    vv[n:n + m] = v
                    for check, f in flags.items():
                        fvars[check][n:n + m] = f
                for check, f in flags.items():
                    vals, cnt = np.unique(f, return_counts=True)
                    per = counts.setdefault(check, {})
                    for a, c in zip(vals, cnt):
                        per[int(a)] = per.get(int(a), 0) + int(c)
                n += t.size
        finally:
            with NC_LOCK:
                dst.close()
    return {k: dict(sorted(v.items())) for k, v in counts.items()}
