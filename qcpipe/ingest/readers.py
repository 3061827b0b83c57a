"""Reading a raw logger file with its logger layout.

``read_raw_file`` returns a :class:`RawTable`: logger-clock timestamps (naive
datetime64[ns], as the logger wrote them), one float64 array per variable in
raw units, the serial number found in the file, and counts of what was
dropped while reading.  Raw files are only ever read.
"""

from __future__ import annotations

import codecs
import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..config.layouts import Layout
from ..errors import ParseError
from .fasttime import fixed_width_times


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


#: years of logger times accepted: the range of datetime64[ns] (1677-2262) with a margin of more
#: than a year either side, so clock offsets and drift corrections cannot overflow
YEARS = (1680, 2259)
#: texts that mean "not a number" whatever the layout's missing list says
_NAN_TEXTS = ["nan", "+nan", "-nan"]
_BOM_UTF8 = b"\xef\xbb\xbf"


def shown_text(text) -> str:
    """``text`` with control and other non-printable characters escaped, so a message stays one line."""
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(text))


def shown_name(path: str | Path) -> str:
    """The file name as it starts every message (control characters escaped)."""
    return shown_text(Path(path).name)


def _decode(path: Path, data: bytes, encoding: str) -> str:
    if data.startswith(_BOM_UTF8) and not codecs.lookup(encoding).name.startswith(("utf-16", "utf-32")):
        data = data[len(_BOM_UTF8):]      # a UTF-8 byte-order mark is not part of the first line
    try:
        return data.decode(encoding)
    except UnicodeError as err:
        line = data[: getattr(err, "start", 0)].count(b"\n") + 1
        raise ParseError(f"{shown_name(path)}: line {line}: bytes that are not {encoding} text; "
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
        raise ParseError(f"{shown_name(path)}: no serial number in the {where} (pattern {layout.serial.pattern!r}); "
                         "check the file or the logger layout's serial pattern")
    return m.group(1).strip()


def read_raw_file(path: str | Path, layout: Layout, layout_name: str = "") -> RawTable:
    """Parse one raw file with ``layout``; raise ParseError naming file, line and fix."""
    path = Path(path)
    name = shown_name(path)
    try:
        data = path.read_bytes()
    except OSError as err:
        raise ParseError(f"{name}: cannot read ({err.strerror}); check that the file exists and may be "
                         "read, or re-download it") from None
    if not data.removeprefix(_BOM_UTF8).strip():
        raise ParseError(f"{name}: file is empty; re-download it from the logger")
    text = _decode(path, data, layout.encoding).replace("\r\n", "\n").replace("\r", "\n")
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    n_head = layout.header_lines + (1 if layout.column_names else 0)
    if len(lines) < n_head:
        raise ParseError(f"{name}: only {len(lines)} lines, fewer than the {n_head} header lines of layout "
                         f"{layout_name!r} (the file is truncated or of another layout); re-download it "
                         "or check which layout reads it")
    if len(lines) == n_head:
        raise ParseError(f"{name}: no data rows after the {n_head} header lines of layout {layout_name!r} "
                         "(the file is truncated or of another layout); re-download it or check which "
                         "layout reads it")
    header = lines[: layout.header_lines]
    serial = serial_from_file(path, header, layout)
    delim = layout.delimiter
    if layout.column_names:
        names = [c.strip() for c in lines[layout.header_lines].split(delim)]
    else:
        names = None
    body = lines[n_head:]
    counts = {"rows_read": len(body), "blank_lines": 0, "truncated_last_line": 0}
    nonblank = [(i, ln) for i, ln in enumerate(body) if ln.strip()]
    if not nonblank:
        raise ParseError(f"{name}: no data rows after the header; re-download the file")
    # expected field count from the column-name row, else from the first data row
    n_fields = len(names) if names else len(nonblank[0][1].split(delim))
    counts["blank_lines"] = len(body) - len(nonblank)
    bad = [(i, ln) for i, ln in nonblank if ln.count(delim) + 1 != n_fields]
    if bad and bad[-1][0] == nonblank[-1][0] and bad[-1][1].count(delim) + 1 < n_fields:
        # a short final line: the logger lost power or the download stopped mid-line
        nonblank.pop()
        bad.pop()
        counts["truncated_last_line"] = 1
    if bad:
        i, ln = bad[0]
        raise ParseError(f"{name}: line {n_head + i + 1}: {ln.count(delim) + 1} fields where "
                         f"{n_fields} were expected (delimiter {delim!r}; the file is damaged or not of this "
                         "logger layout); re-download it or check which layout reads it")
    if not nonblank:
        raise ParseError(f"{name}: no data rows after the header; re-download the file")
    line_numbers = np.array([n_head + i + 1 for i, _ in nonblank])
    try:
        frame = pd.read_csv(io.StringIO("\n".join(ln for _, ln in nonblank)), sep=delim, header=None,
                            names=list(range(n_fields)), dtype=str, keep_default_na=False,
                            engine="c", quoting=3)
    except (ValueError, pd.errors.ParserError) as err:
        raise ParseError(f"{name}: cannot split the rows at {delim!r} ({shown_text(err)}); check the file "
                         "or the layout's delimiter") from None
    if len(frame) != len(nonblank):
        raise ParseError(f"{name}: {len(nonblank)} data rows but {len(frame)} records read; check the file "
                         "for stray line-break characters or re-download it")

    def column(ref):
        if isinstance(ref, int):
            if ref >= n_fields:
                raise ParseError(f"{name}: layout {layout_name!r} names column {ref} but rows have "
                                 f"{n_fields} fields; correct the logger layout")
            return frame[ref]
        if ref not in names:
            raise ParseError(f"{name}: no column {ref!r} in the column-name row {names} (the file is of "
                             "another layout or the layout's column name is wrong); check the file or "
                             "correct the layout")
        return frame[names.index(ref)]

    stamp = column(layout.time.columns[0]).str.strip()
    for ref in layout.time.columns[1:]:
        stamp = stamp + " " + column(ref).str.strip()
    fast = fixed_width_times(stamp.to_numpy(), layout.time.format)
    try:
        times = (pd.Series(fast, index=stamp.index) if fast is not None
                 else pd.to_datetime(stamp, format=layout.time.format, errors="coerce"))
    except (ValueError, TypeError) as err:
        raise ParseError(f"{name}: times cannot be read with format {layout.time.format!r} "
                         f"({shown_text(err)}); correct the layout's time format") from None
    bad_t = np.flatnonzero(times.isna().to_numpy())
    if bad_t.size:
        i = bad_t[0]
        raise ParseError(f"{name}: line {line_numbers[i]}: time {stamp.iloc[i]!r} does not match "
                         f"format {layout.time.format!r}; correct the file or the layout's time format")
    try:
        year = times.dt.year.to_numpy()
    except AttributeError:                       # mixed UTC offsets give an object column
        year = np.array([t.year for t in times])
    out_of_range = np.flatnonzero((year < YEARS[0]) | (year > YEARS[1]))
    if out_of_range.size:
        i = out_of_range[0]
        raise ParseError(f"{name}: line {line_numbers[i]}: time {stamp.iloc[i]!r} is not in the years "
                         f"{YEARS[0]} to {YEARS[1]} (a reset or corrupted logger clock); correct the file "
                         "or re-download it")
    values, units = {}, {}
    missing = set(layout.missing)
    for var, spec in layout.variables.items():
        col = column(spec.column).str.strip()
        if layout.decimal == ",":
            col = col.str.replace(",", ".", regex=False)
        is_missing = col.isin(missing).to_numpy()
        num = np.array(pd.to_numeric(col.where(~is_missing, None), errors="coerce"), dtype=np.float64)
        bad_v = np.flatnonzero(np.isnan(num) & ~is_missing & ~col.str.lower().isin(_NAN_TEXTS).to_numpy())
        if bad_v.size:
            i = bad_v[0]
            raise ParseError(f"{name}: line {line_numbers[i]}: {var} value {col.iloc[i]!r} is not a "
                             "number; correct the file or add the text to the layout's missing list")
        nonfinite = ~np.isfinite(num) & ~np.isnan(num)
        counts[f"{var}_nonfinite"] = int(nonfinite.sum())
        num[nonfinite] = np.nan
        values[var], units[var] = num, spec.units
    t = times.to_numpy(dtype="datetime64[ns]")
    return RawTable(path, layout_name, serial, t, values, units, counts)
