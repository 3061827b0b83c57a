"""Read one raw file, match it to an instrument and deployment, and put it on UTC.

``ingest_file`` is pure apart from reading the file: it returns an
:class:`IngestedFile` or raises :class:`FileRejected` with a one-line reason.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..config.layouts import LoadedLayouts
from ..config.register import Deployment, LoadedRegister
from ..errors import MatchError, ParseError, QcpipeError
from .discover import RawFile
from .readers import LOGGER_CLOCK, RawTable, read_raw_file, shown_name
from .timebase import drift_corrected, utc_from_logger_time, window_mask


class FileRejected(QcpipeError):
    """A raw file that goes to quarantine; ``str(err)`` is the reason."""


@dataclass
class IngestedFile:
    raw: RawFile
    layout: str
    serial: str
    kind: str
    station: str
    deployment: str
    time: np.ndarray                      # UTC, drift-corrected, inside the deployment window, in time order
    values: dict[str, np.ndarray]         # raw units
    units: dict[str, str]
    counts: dict[str, int] = field(default_factory=dict)
    clock_correction_s: float = 0.0       # drift removed at the clock check (logger minus reference)
    provenance: dict = field(default_factory=dict)   # how the file was read: file_provenance()
    notes: list[str] = field(default_factory=list)   # what a person should look at


def _to_utc(logger_time: np.ndarray, dep: Deployment, time_basis: str = LOGGER_CLOCK,
            out: np.ndarray | None = None) -> tuple[np.ndarray, float]:
    """UTC times of a file for deployment ``dep``, drift-corrected, and the clock error at the check (s).

    Stamps on the logger's clock (``time_basis`` "logger_clock") are moved by the
    register's ``clock_offset``; stamps the reader already put on UTC (the file
    said its zone) are not moved again.  Either way the drift measured by the
    deployment's clock check is removed: the check's ``logger_time`` is what the
    logger's display showed, read with the register's ``clock_offset``.  Last, a
    confirmed ``clock_correction`` is subtracted (:func:`_corrected`).  ``out`` (may be
    ``logger_time`` itself) receives the times instead of a new array.
    """
    offset = dep.offset_seconds if time_basis == LOGGER_CLOCK else 0.0
    t = utc_from_logger_time(logger_time, offset_s=offset, out=out)
    if dep.clock_check is None:
        return _corrected(t, dep), 0.0
    check_logger = utc_from_logger_time(np.array([np.datetime64(dep.clock_check.logger_time, "ns")]),
                                        offset_s=dep.offset_seconds)[0]
    ref = np.datetime64(dep.clock_check.reference_time.replace(tzinfo=None) -
                        dep.clock_check.reference_time.utcoffset(), "ns")
    clock_set = dep.clock_set or dep.start
    t0 = np.datetime64(clock_set.replace(tzinfo=None) - clock_set.utcoffset(), "ns")
    err = float((check_logger - ref).astype(np.int64)) / 1e9
    return _corrected(drift_corrected(t, clock_set=t0, check_logger=check_logger, check_reference=ref, out=t),
                      dep), err


def _corrected(t: np.ndarray, dep: Deployment) -> np.ndarray:
    """``t`` less the deployment's confirmed clock correction (register ``clock_correction.shift_s``), if any.

    Applied after the offset and the drift, whatever the file's time basis: the
    correction is an error a person confirmed in the times as they were read.
    """
    if dep.clock_correction is None:
        return t
    return utc_from_logger_time(t, offset_s=dep.correction_seconds, out=t)


def _naive_utc(t) -> np.datetime64:
    return np.datetime64(t.replace(tzinfo=None) - t.utcoffset(), "ns")


def offset_note(table: RawTable, dep: Deployment) -> str | None:
    """A note when the register's non-zero clock_offset is not applied because the file gave its own zone."""
    if table.time_basis == LOGGER_CLOCK or dep.offset_seconds == 0 or table.zone_offset_s == dep.offset_seconds:
        return None
    return (f"{shown_name(table.path)}: the file gives its own time zone ({table.time_zone}), so the register's "
            f"clock_offset {dep.clock_offset} of deployment {dep.id} was not applied; check the register's "
            "clock_offset (set it to the logger's display offset, or +00:00)")


def file_provenance(table: RawTable) -> dict:
    """What reading the file found beyond its records: kept with the dataset's provenance."""
    out = {"layout": table.layout_name, "time_basis": table.time_basis}
    if table.time_zone:
        out["time_zone"] = table.time_zone
    if table.header_values:
        out["header_values"] = dict(table.header_values)
    for key in ("skipped_lines", "bad_lines", "blank_lines", "truncated_last_line", "ambiguous_local_times",
                "ambiguous_read_as_first"):
        if table.counts.get(key):
            out[key] = int(table.counts[key])
    if table.skipped:
        out["lines_not_read"] = [f"line {n}: {why}" for n, why in table.skipped]
    return out


def _read_with_layouts(raw: RawFile, layouts: LoadedLayouts, read_from: Path | None = None) -> RawTable:
    name = shown_name(raw.name)
    candidates = [(n, lay) for n, lay in layouts.layouts.items() if lay.reads(raw.name)]
    if not candidates:
        globs = ", ".join(f"{n}: {lay.file_glob!r}" for n, lay in layouts.layouts.items())
        raise FileRejected(f"{name}: no logger layout reads this file name ({globs}); "
                           "rename the file or add a layout")
    errors = []
    for lay_name, lay in candidates:
        try:
            return read_raw_file(raw.path, lay, lay_name, read_from=read_from)
        except ParseError as err:
            errors.append(str(err))
    if len(errors) == 1:
        raise FileRejected(errors[0])
    # several layouts read this name: one line, starting with the file name, ending with what to do
    tried = " | ".join(f"[{n}] {e.removeprefix(f'{name}: ')}" for (n, _), e in zip(candidates, errors))
    raise FileRejected(f"{name}: none of the {len(candidates)} layouts whose file_glob matches could read it "
                       f"({tried}); check the file or make the layouts' file_glob patterns disjoint")


def ingest_file(raw: RawFile, register: LoadedRegister, layouts: LoadedLayouts,
                read_from: Path | None = None) -> IngestedFile:
    """Parse ``raw``, find its instrument and deployment, convert times to UTC and trim.

    ``read_from``: a copy of the file, made and checked by the caller, to read instead of ``raw.path``.

    Raises FileRejected (a one-line reason naming file, line or key and what
    to do) when the file cannot be read or matches no deployment.
    """
    table = _read_with_layouts(raw, layouts, read_from)
    name = shown_name(raw.name)
    inst = register.instrument_by_serial(table.serial)
    if inst is None:
        raise FileRejected(f"{name}: serial {table.serial!r} is not in the station register "
                           f"{register.path.name}; add an [[instrument]] and [[deployment]] for it")
    if inst.layout != table.layout_name:
        raise FileRejected(f"{name}: read with layout {table.layout_name!r} but instrument {inst.serial!r} "
                           f"uses layout {inst.layout!r}; check the file's origin or the register")
    deps = register.deployments_of(inst.serial)
    if not deps:
        raise FileRejected(f"{name}: instrument {inst.serial!r} has no [[deployment]] in "
                           f"{register.path.name}; add one with station, start and end")
    best = None
    for dep in deps:
        # one deployment: its times replace the file's own in place (a big file holds one array of times)
        t, err = _to_utc(table.logger_time, dep, table.time_basis, out=table.logger_time if len(deps) == 1 else None)
        inside = window_mask(t, start=_naive_utc(dep.start), end=_naive_utc(dep.end))
        n_in = int(inside.sum())
        if best is None or n_in > best[0]:
            best = (n_in, dep, t, inside, err)
    n_in, dep, t, inside, err = best
    if n_in == 0:
        lo, hi = (np.datetime_as_string(x, unit="m") for x in (t.min(), t.max()))
        raise FileRejected(f"{name}: its records ({lo} to {hi} UTC) fall in no deployment of instrument "
                           f"{inst.serial!r}; check the deployment dates and clock_offset in the register")
    start, end = _naive_utc(dep.start), _naive_utc(dep.end)
    counts = dict(table.counts)
    counts["records"] = int(len(table))
    counts["pre_deployment"] = int(np.count_nonzero(t < start))
    counts["post_recovery"] = int(np.count_nonzero(t > end))
    counts["in_deployment"] = n_in
    # records in time order (stable: repeated times keep the file's order for the merge)
    table.logger_time = None                 # the file's own times are not needed any more (big files)
    if n_in == t.size:                       # every record in the deployment: no copy unless out of order
        counts["out_of_order"] = int(np.count_nonzero(t[1:] < t[:-1]))
        keep = np.argsort(t, kind="stable") if counts["out_of_order"] else None
    else:
        keep = np.flatnonzero(inside)
        ti = t[keep].astype(np.int64)
        counts["out_of_order"] = int(np.count_nonzero(np.diff(ti) < 0))
        if counts["out_of_order"]:
            keep = keep[np.argsort(ti, kind="stable")]
    del inside, best
    provenance = file_provenance(table)
    if counts["out_of_order"]:
        provenance["out_of_order"] = counts["out_of_order"]
    note = offset_note(table, dep)
    notes = [note] if note else []
    if note:
        counts["clock_offset_not_applied"] = 1
        provenance["clock_offset_not_applied"] = dep.clock_offset
    return IngestedFile(raw=raw, layout=table.layout_name, serial=inst.serial, kind=inst.kind,
                        station=dep.station, deployment=dep.id, time=t if keep is None else t[keep],
                        values={k: v if keep is None else v[keep] for k, v in table.values.items()}, units=table.units,
                        counts=counts, clock_correction_s=err, provenance=provenance, notes=notes)


__all__ = ["FileRejected", "IngestedFile", "ingest_file", "MatchError"]
