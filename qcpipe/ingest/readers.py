"""Reading a raw logger file with its logger layout.

``read_raw_file`` returns a :class:`RawTable`: logger-clock timestamps (naive
datetime64[ns], as the logger wrote them), one float64 array per variable in
raw units, the serial number found in the file, and counts of what was
dropped while reading.  Raw files are only ever read.
"""

from __future__ import annotations

import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..config.layouts import Layout
from ..errors import ParseError


@dataclass
class RawTable:
    path: Path
    layout_name: str
    serial: str
    logger_time: np.ndarray                 # datetime64[ns], logger's own clock
    values: dict[str, np.ndarray]           # variable -> float64, raw units
    units: dict[str, str]                   # variable -> raw unit
    counts: dict[str, int] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.logger_time)


def _decode(path: Path, data: bytes, encoding: str) -> str:
    try:
        return data.decode(encoding)
    except UnicodeDecodeError as err:
        line = data[: err.start].count(b"\n") + 1
        raise ParseError(f"{path.name}: line {line}: bytes that are not {encoding} text; "
                         "check the logger layout's encoding or re-download the file") from None


def serial_from_file(path: Path, header: list[str], layout: Layout) -> str:
    """The serial number, from a header line or the file name, as the layout says."""
    rx = re.compile(layout.serial.pattern)
    if layout.serial.source == "filename":
        m = rx.search(path.name)
        where = "file name"
    else:
        m = next((m for m in map(rx.search, header) if m), None)
        where = f"first {len(header)} header lines"
    if not m:
        raise ParseError(f"{path.name}: no serial number in the {where} (pattern {layout.serial.pattern!r}); "
                         "check the file or the logger layout's serial pattern")
    return m.group(1).strip()


def read_raw_file(path: str | Path, layout: Layout, layout_name: str = "") -> RawTable:
    """Parse one raw file with ``layout``; raise ParseError naming file, line and fix."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as err:
        raise ParseError(f"{path.name}: cannot read ({err.strerror})") from None
    if not data.strip():
        raise ParseError(f"{path.name}: file is empty; re-download it from the logger")
    text = _decode(path, data, layout.encoding).replace("\r\n", "\n").replace("\r", "\n")
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    n_head = layout.header_lines + (1 if layout.column_names else 0)
    if len(lines) <= n_head:
        raise ParseError(f"{path.name}: only {len(lines)} lines, fewer than the {n_head} header lines "
                         f"of layout {layout_name!r}; the file is truncated or of another layout")
    header = lines[: layout.header_lines]
    serial = serial_from_file(path, header, layout)
    delim = layout.delimiter
    if layout.column_names:
        names = [c.strip() for c in lines[layout.header_lines].split(delim)]
    else:
        names = None
    body = lines[n_head:]
    counts = {"rows_read": len(body), "blank_lines": 0, "truncated_last_line": 0}
    # expected field count from the column-name row, else from the first data row
    n_fields = len(names) if names else len(body[0].split(delim))
    nonblank = [(i, ln) for i, ln in enumerate(body) if ln.strip()]
    counts["blank_lines"] = len(body) - len(nonblank)
    bad = [(i, ln) for i, ln in nonblank if ln.count(delim) + 1 != n_fields]
    if bad and bad[-1][0] == nonblank[-1][0] and bad[-1][1].count(delim) + 1 < n_fields:
        # a short final line: the logger lost power or the download stopped mid-line
        nonblank.pop()
        bad.pop()
        counts["truncated_last_line"] = 1
    if bad:
        i, ln = bad[0]
        raise ParseError(f"{path.name}: line {n_head + i + 1}: {ln.count(delim) + 1} fields where "
                         f"{n_fields} were expected (delimiter {delim!r}); the file is damaged or "
                         "not of this logger layout")
    if not nonblank:
        raise ParseError(f"{path.name}: no data rows after the header; re-download the file")
    line_numbers = np.array([n_head + i + 1 for i, _ in nonblank])
    frame = pd.read_csv(io.StringIO("\n".join(ln for _, ln in nonblank)), sep=delim, header=None,
                        names=list(range(n_fields)), dtype=str, keep_default_na=False,
                        engine="c", quoting=3)

    def column(ref):
        if isinstance(ref, int):
            if ref >= n_fields:
                raise ParseError(f"{path.name}: layout {layout_name!r} names column {ref} but rows have "
                                 f"{n_fields} fields; correct the logger layout")
            return frame[ref]
        if ref not in names:
            raise ParseError(f"{path.name}: no column {ref!r} in the column-name row {names}; "
                             "the file is of another layout or the layout's column name is wrong")
        return frame[names.index(ref)]

    stamp = column(layout.time.columns[0]).str.strip()
    for ref in layout.time.columns[1:]:
        stamp = stamp + " " + column(ref).str.strip()
    times = pd.to_datetime(stamp, format=layout.time.format, errors="coerce")
    bad_t = np.flatnonzero(times.isna().to_numpy())
    if bad_t.size:
        i = bad_t[0]
        raise ParseError(f"{path.name}: line {line_numbers[i]}: time {stamp.iloc[i]!r} does not match "
                         f"format {layout.time.format!r}; correct the file or the layout's time format")
    values, units = {}, {}
    missing = set(layout.missing)
    for var, spec in layout.variables.items():
        col = column(spec.column).str.strip()
        if layout.decimal == ",":
            col = col.str.replace(",", ".", regex=False)
        is_missing = col.isin(missing).to_numpy()
        num = np.array(pd.to_numeric(col.where(~is_missing, None), errors="coerce"), dtype=np.float64)
        bad_v = np.flatnonzero(np.isnan(num) & ~is_missing & ~col.str.lower().isin(["nan"]).to_numpy())
        if bad_v.size:
            i = bad_v[0]
            raise ParseError(f"{path.name}: line {line_numbers[i]}: {var} value {col.iloc[i]!r} is not a "
                             "number; correct the file or add the text to the layout's missing list")
        nonfinite = ~np.isfinite(num) & ~np.isnan(num)
        counts[f"{var}_nonfinite"] = int(nonfinite.sum())
        num[nonfinite] = np.nan
        values[var], units[var] = num, spec.units
    t = times.to_numpy(dtype="datetime64[ns]")
    return RawTable(path, layout_name, serial, t, values, units, counts)
