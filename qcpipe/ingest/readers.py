"""Reading a raw logger file with its logger layout.

``read_raw_file`` returns a :class:`RawTable`: timestamps (naive
datetime64[ns]; the logger's own clock, or UTC when the file says its zone --
see ``time_basis``), one float64 array per variable in raw units, the serial
number found in the file, the named header values, the lines that were not
records, and counts of what was dropped while reading.  Raw files are only
ever read.

Fields are split by pandas' C CSV reader (quoting, runs of white space); the
reader never splits a line itself.  Whole lines are filtered before that (blank
lines, lines matching the layout's ``skip_lines``, repeats of the column-name
row), and a marker field appended to every line tells how many fields the
parser found on it, so short, long and truncated records are told apart
without counting delimiters by hand.
"""

from __future__ import annotations

import codecs
import csv
import io
import re
import threading
import warnings
import itertools
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..config.layouts import WHITESPACE, Layout, zone_of
from ..errors import ParseError
from ..units import same_unit
from .fasttime import fixed_width_times

#: ``warnings.catch_warnings`` changes process-wide state, so readers in parallel threads (the
#: orchestrator's thread runner) take turns inside it; otherwise one thread's capture can miss or
#: swallow another's parser warnings
_WARNINGS_LOCK = threading.Lock()

#: the two ways a table's times can be given
LOGGER_CLOCK, UTC = "logger_clock", "utc"


@dataclass
class RawTable:
    path: Path
    layout_name: str
    serial: str
    logger_time: np.ndarray                 # datetime64[ns]: logger's own clock, or UTC (time_basis)
    values: dict[str, np.ndarray]           # variable -> float64, raw units
    units: dict[str, str]                   # variable -> raw unit
    counts: dict[str, int] = field(default_factory=dict)
    time_basis: str = LOGGER_CLOCK          # "logger_clock": apply the register's clock_offset; "utc": done
    time_zone: str = ""                     # where the zone of the stamps came from (when time_basis is utc)
    zone_offset_s: int | None = None        # the file's one fixed UTC offset, when it has one
    header_values: dict[str, str] = field(default_factory=dict)
    skipped: list[tuple[int, str]] = field(default_factory=list)   # (line, "why: text"), the first few

    def __len__(self) -> int:
        return len(self.logger_time)


#: years of logger times accepted: the range of datetime64[ns] (1677-2262) with a margin of more
#: than a year either side, so clock offsets and drift corrections cannot overflow
YEARS = (1680, 2259)
#: texts that mean "not a number" whatever the layout's missing list says
_NAN_TEXTS = ["nan", "+nan", "-nan"]
_BOM_UTF8 = b"\xef\xbb\xbf"
#: bytes read from a raw file at a time
READ_BLOCK = 1 << 22
#: data lines parsed at a time: memory of a read is the arrays of values plus about this many lines' text
#: (on a 100 MB file, 10,000 lines took less memory and less time than 25,000 or 100,000: benchmarks/README.md)
CHUNK_LINES = 10_000
#: a field appended to every line before parsing; where it lands gives the line's field count
_END = "\x1e\x1eqcpipe-end-of-line"
#: skipped and bad lines listed by line number in the provenance (all are counted)
LISTED_LINES = 20
_ISO_ZONE = re.compile(r"[T ]\d{2}(?::?\d{2}){0,2}(?:[.,]\d+)?\s*(?:Z|[+-]\d{2}(?::?\d{2})?)$", re.IGNORECASE)
_PARSER_SKIP = re.compile(r"Skipping line (\d+): expected \d+ fields, saw (\d+)")


def shown_text(text) -> str:
    """``text`` with control and other non-printable characters escaped, so a message stays one line."""
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(text))


def shown_name(path: str | Path) -> str:
    """The file name as it starts every message (control characters escaped)."""
    return shown_text(Path(path).name)


def looks_like_utf16(data: bytes) -> bool:
    """Whether ``data`` looks like UTF-16 text: it starts with a UTF-16 byte-order mark (FF FE or FE FF,
    not UTF-32's FF FE 00 00), or, without one, at least 3/4 of its first 256 byte pairs hold a NUL on the
    same side and at most 1/16 on the other (ASCII characters in UTF-16 LE or BE are one byte and a NUL;
    Unicode Standard, section 3.9, UTF-16 encoding form, from memory; the thresholds are a judgement call,
    common practice, no source)."""
    if data.startswith((codecs.BOM_UTF32_LE, codecs.BOM_UTF32_BE)):
        return False                      # FF FE 00 00 also begins with UTF-16 LE's mark
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        return True
    head = data[:512]
    pairs = len(head) // 2
    if pairs < 8:
        return False
    nul_even, nul_odd = head[0:2 * pairs:2].count(0), head[1:2 * pairs:2].count(0)
    return max(nul_even, nul_odd) >= 0.75 * pairs and min(nul_even, nul_odd) <= pairs / 16


def _utf16_or_32(encoding: str) -> bool:
    return codecs.lookup(encoding).name.startswith(("utf-16", "utf-32"))


def _open(path: Path, name: str):
    try:
        return path.open("rb")
    except OSError as err:
        raise ParseError(f"{name}: cannot read ({err.strerror}); check that the file exists and may be "
                         "read, or re-download it") from None


def _blocks(f, size: int = READ_BLOCK):
    """The file's bytes in blocks of ``size`` (the last may be shorter), as ``(block, is_last)``."""
    block = f.read(size)
    while True:
        after = f.read(size) if len(block) == size else b""
        yield block, not after
        if not after:
            return
        block = after


def _check_text(path: Path, encoding: str, name: str) -> None:
    """The checks that need the whole file before any line is read, in one pass of bounded memory.

    In this order: the file can be read and holds more than white space; it does not look like
    UTF-16 text read with another encoding; every byte decodes with ``encoding`` (the error
    names the line of the first byte that does not); the decoded text holds more than white
    space.
    """
    wide = _utf16_or_32(encoding)
    decoder = codecs.getincrementaldecoder(encoding)()
    fed, skip, bad, blank_bytes, blank_text = 0, 0, None, True, True
    with _open(path, name) as f:
        try:
            for i, (block, last) in enumerate(_blocks(f)):
                if i == 0:
                    if not wide and looks_like_utf16(block):
                        bad = ("utf16", 0)
                    skip = len(_BOM_UTF8) if block.startswith(_BOM_UTF8) and not wide else 0
                    block = block[skip:]
                if blank_bytes and block.strip():
                    blank_bytes = False
                if bad is None:
                    state = decoder.getstate()[0]
                    try:
                        text = decoder.decode(block, final=last)
                    except UnicodeError as err:
                        bad = ("bytes", fed - len(state) + getattr(err, "start", 0))
                    else:
                        if blank_text and (text.removeprefix("\ufeff") if i == 0 else text).strip():
                            blank_text = False
                    fed += len(block)
                if bad is not None and not blank_bytes:
                    break
        except OSError as err:
            raise ParseError(f"{name}: cannot read ({err.strerror}); check that the file exists and may be "
                             "read, or re-download it") from None
    if blank_bytes:
        raise ParseError(f"{name}: file is empty; re-download it from the logger")
    if bad is not None and bad[0] == "utf16":
        raise ParseError(f"{name}: looks like UTF-16 text (a UTF-16 byte-order mark, or a NUL byte "
                         f"beside every character), but its logger layout reads {encoding}; set encoding = "
                         "\"utf-16\" in the layout if the logger writes UTF-16, or save the file as UTF-8")
    if bad is not None:
        raise ParseError(f"{name}: line {_line_of_byte(path, skip + bad[1])}: bytes that are not {encoding} "
                         "text; check the logger layout's encoding or re-download the file")
    if blank_text:
        raise ParseError(f"{name}: file is empty; re-download it from the logger")


def _line_of_byte(path: Path, position: int) -> int:
    """1 + the number of LF bytes before ``position`` in the file."""
    count, done = 0, 0
    with path.open("rb") as f:
        while done < position:
            block = f.read(min(READ_BLOCK, position - done))
            if not block:
                break
            count += block.count(b"\n")
            done += len(block)
    return count + 1


def _text_lines(path: Path, encoding: str):
    """The file's lines, decoded, CR and CRLF line ends read as LF, without their LF; a final
    empty line (the file ends with a line end) is not one. The file passed ``_check_text``."""
    wide = _utf16_or_32(encoding)
    decoder = codecs.getincrementaldecoder(encoding)()
    rest, first = "", True
    with path.open("rb") as f:
        for block, last in _blocks(f):
            if first and block.startswith(_BOM_UTF8) and not wide:
                block = block[len(_BOM_UTF8):]
            text = decoder.decode(block, final=last)
            if first:
                text, first = text.removeprefix("\ufeff"), False
            text = rest + text
            held = "\r" if text.endswith("\r") and not last else ""
            if held:
                text = text[:-1]
            lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
            rest = lines.pop() + held
            yield from lines
    if rest:
        yield rest


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


def header_values(header: list[str], layout: Layout) -> dict[str, str]:
    """Each named header value: the group of its pattern on the first header line it matches."""
    out = {}
    for key, pattern in layout.header_values.items():
        rx = re.compile(pattern)
        m = next((m for m in map(rx.search, header) if m), None)
        if m is not None:
            out[key] = m.group(1).strip()
    return out


def _needed_value(hv: dict, layout: Layout, key: str, what: str, name: str) -> str:
    """The header value ``key``, which the layout needs for ``what``; ParseError when no header line gave it."""
    if key not in hv:
        raise ParseError(f"{name}: no header line gives {what} (header value {key!r}, pattern "
                         f"{layout.header_values[key]!r}); check the file or the layout's header_values")
    return hv[key]


def _header_length(lines: list[str], layout: Layout, name: str, layout_name: str) -> int:
    """Number of metadata lines before the column-name row (or the data)."""
    if layout.header_ends is None:
        return layout.header_lines
    rx = re.compile(layout.header_ends)
    k = next((i for i, ln in enumerate(lines) if rx.search(ln)), None)
    if k is None:
        raise ParseError(f"{name}: no line matches the header end {layout.header_ends!r} of layout "
                         f"{layout_name!r} (the file is truncated or of another layout); check the file or the "
                         "layout's header_ends")
    return k + 1


def _csv_options(layout: Layout, n_columns: int | None) -> dict:
    sep = r"\s+" if layout.delimiter == WHITESPACE else layout.delimiter
    names = None if n_columns is None else list(range(n_columns))
    return dict(sep=sep, header=None, names=names, dtype=str, keep_default_na=False,
                na_filter=False, engine="c", index_col=False, skip_blank_lines=False,
                quoting=csv.QUOTE_MINIMAL if layout.quote else csv.QUOTE_NONE, quotechar=layout.quote or '"',
                doublequote=True, skipinitialspace=layout.delimiter != WHITESPACE, on_bad_lines="warn")


def _with_end(line: str, layout: Layout) -> str:
    return f"{line}{' ' if layout.delimiter == WHITESPACE else layout.delimiter}{_END}"


def _parse(lines: list[str], layout: Layout, n_fields: int, name: str, line_numbers: np.ndarray,
           lead: bool = False):
    """Split ``lines`` into fields with pandas; returns the frame and each line's field count.

    A line with more than ``n_fields`` fields has no row in the frame: its count is
    given instead (rows of the frame are the other lines, in order).  With ``lead`` (every chunk
    of a file but its first) a record of ``n_fields`` fields is parsed before ``lines`` and dropped:
    pandas reads a long first row unlike a long later one, and the lines are not the file's first.
    """
    shift = 1 if lead else 0
    text = "\n".join(_with_end(ln, layout) for ln in
                     itertools.chain([("\t" if layout.delimiter == WHITESPACE else layout.delimiter).join(
                         "0" * n_fields)] if lead else [], lines))
    with _WARNINGS_LOCK, warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", pd.errors.ParserWarning)
        try:
            frame = pd.read_csv(io.StringIO(text), **_csv_options(layout, n_fields + 1))
        except (ValueError, pd.errors.ParserError) as err:
            m = re.search(r"row (\d+)", str(err))
            row = int(m.group(1)) - shift if m else -1
            where = f"line {line_numbers[row]}: " if 0 <= row < len(lines) else ""
            raise ParseError(f"{name}: {where}cannot split the records into fields ({shown_text(err)}; an unclosed "
                             f"quote {layout.quote!r}?); correct the file or the layout's quote and "
                             "delimiter") from None
    long_rows = {}
    for w in caught:
        for m in _PARSER_SKIP.finditer(str(w.message)):
            long_rows[int(m.group(1)) - 1 - shift] = int(m.group(2)) - 1
    if lead:
        frame = frame.iloc[1:]
    counts = np.full(len(lines), -1, dtype=np.int64)
    in_frame = np.ones(len(lines), dtype=bool)
    in_frame[list(long_rows)] = False
    kept = np.flatnonzero(in_frame)
    if len(frame) != kept.size:
        raise ParseError(f"{name}: {len(lines)} data lines but {len(frame) + len(long_rows)} records read (a "
                         f"quoted field spans lines or a quote {layout.quote!r} is not closed); correct the file or "
                         "set the layout's quote to \"\"")
    for i, n in long_rows.items():
        counts[i] = n
    found = np.where(frame[n_fields].to_numpy(dtype=object) == _END, n_fields, -1)
    for j in range(n_fields):                    # only the rare rows whose marker came early
        odd = np.flatnonzero(found < 0)
        if not odd.size:
            break
        found[odd[frame[j].to_numpy(dtype=object)[odd] == _END]] = j
    counts[kept] = found
    frame.index = kept
    return frame, counts


def _names_row(line: str, layout: Layout, name: str) -> list[str]:
    text = _with_end(line, layout)
    with _WARNINGS_LOCK, warnings.catch_warnings():
        warnings.simplefilter("ignore", pd.errors.ParserWarning)
        try:
            row = pd.read_csv(io.StringIO(text), **_csv_options(layout, None)).iloc[0].tolist()
        except (ValueError, pd.errors.ParserError, IndexError) as err:
            raise ParseError(f"{name}: cannot split the column-name row ({shown_text(err)}); check the file or "
                             "the layout's quote and delimiter") from None
    fields = [str(c) for c in row]
    return [c.strip() for c in fields[:fields.index(_END)]] if _END in fields else [c.strip() for c in fields]


def _local_to_utc(ns: np.ndarray, zone, label: str, name: str, line_numbers: np.ndarray,
                  counts: dict) -> np.ndarray:
    """UTC int64 ns from local int64 ns in ``zone`` (seconds east of UTC, or a ZoneInfo)."""
    if isinstance(zone, int):
        return ns - zone * 1_000_000_000
    local = pd.DatetimeIndex(ns.astype("datetime64[ns]"))
    gap = local.tz_localize(zone, ambiguous=np.ones(ns.size, bool), nonexistent="NaT").isna()
    if gap.any():
        i = int(np.flatnonzero(gap)[0])
        raise ParseError(f"{name}: line {line_numbers[i]}: time {str(local[i])!r} does not exist in zone {label} "
                         "(its clock skipped that hour); correct the file, or set the layout's time.zone to the "
                         "fixed offset the logger really kept")
    unsure = local.tz_localize(zone, ambiguous="NaT", nonexistent="NaT").isna()
    counts["ambiguous_local_times"] = int(unsure.sum())
    try:
        aware = local.tz_localize(zone, ambiguous="infer")
    except ValueError:
        # not in time order through the repeated hour: take the first (daylight-saving) reading
        aware = local.tz_localize(zone, ambiguous=np.ones(ns.size, bool))
        counts["ambiguous_read_as_first"] = int(unsure.sum())
    return aware.tz_convert("UTC").tz_localize(None).to_numpy(dtype="datetime64[ns]").astype(np.int64)


def _epoch(stamp: pd.Series, unit: str):
    """(int64 ns since 1970 UTC or 0, readable mask, in-range mask) of epoch stamps in ``unit``."""
    x = pd.to_numeric(stamp, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    scale = 1.0 if unit == "s" else 1e3
    seconds = x / scale
    lo = (np.datetime64(f"{YEARS[0]}-01-01", "s") - np.datetime64("1970-01-01", "s")).astype(np.int64)
    hi = (np.datetime64(f"{YEARS[1] + 1}-01-01", "s") - np.datetime64("1970-01-01", "s")).astype(np.int64)
    ok = np.isfinite(x)
    inside = ok & (seconds >= lo) & (seconds < hi)
    # microseconds are exact in float64 over the whole range (< 2**53), then scaled in integers
    micro = np.rint(np.where(inside, x, 0.0) * (1e6 / scale)).astype(np.int64)
    return micro * 1000, ok, inside | ~ok


def _times(stamp: pd.Series, layout: Layout, hv: dict, name: str):
    """(int64 ns, readable, in-range, basis, zone label, fixed offset, zone, zone text) of the joined stamps.

    With a zone (seconds east of UTC or a ZoneInfo; None without) the times are local in it: the caller
    puts them on UTC (``_local_to_utc``, over the whole file's times for a named zone)."""
    spec = layout.time
    fmt = spec.format
    lo, hi = np.datetime64(f"{YEARS[0]}-01-01", "s"), np.datetime64(f"{YEARS[1] + 1}-01-01", "s")
    if fmt in ("epoch_seconds", "epoch_milliseconds"):
        ns, ok, inside = _epoch(stamp, "s" if fmt == "epoch_seconds" else "ms")
        return ns, ok, inside, UTC, fmt, 0, None, None
    if fmt == "iso8601":
        has_zone = stamp.str.contains(_ISO_ZONE).to_numpy(dtype=bool, na_value=False)
        parsed = pd.to_datetime(stamp.where(has_zone), format="ISO8601", utc=True, errors="coerce")
        basis, label, fixed = UTC, "ISO 8601 offset of each row", None
    elif "%z" in fmt:
        parsed = pd.to_datetime(stamp, format=fmt, utc=True, errors="coerce")
        basis, label, fixed = UTC, "UTC offset of each row", None
    else:
        fast = fixed_width_times(stamp.to_numpy(), fmt)
        try:
            parsed = (pd.Series(fast, index=stamp.index) if fast is not None
                      else pd.to_datetime(stamp, format=fmt, errors="coerce"))
        except (ValueError, TypeError) as err:
            raise ParseError(f"{name}: times cannot be read with format {fmt!r} ({shown_text(err)}); correct the "
                             "layout's time format") from None
        basis, label, fixed = LOGGER_CLOCK, "", None
    if getattr(parsed.dt, "tz", None) is not None:
        parsed = parsed.dt.tz_localize(None)
    sec = parsed.to_numpy(dtype="datetime64[s]")
    ok = ~np.isnat(sec)
    inside = ~ok | ((sec >= lo) & (sec < hi))
    ns = np.where(ok & inside, parsed.to_numpy(dtype="datetime64[us]").astype(np.int64), 0) * 1000
    zone_text = spec.zone if spec.zone_from is None else _needed_value(hv, layout, spec.zone_from, "the zone", name)
    zone = None
    if zone_text is not None:
        zone = zone_of(zone_text)
        if zone is None:
            raise ParseError(f"{name}: header value {spec.zone_from!r} is {zone_text!r}, neither a UTC offset nor "
                             "a zone name; correct the layout's header_values pattern or set time.zone")
        label = f"{zone_text} ({'header value ' + spec.zone_from if spec.zone_from else 'layout'})"
        basis, fixed = UTC, zone if isinstance(zone, int) else None
    return ns, ok, inside, basis, label, fixed, zone, zone_text


def _numbers(col: pd.Series, layout: Layout):
    """(float64 values, readable mask) of one column's texts (missing texts read as NaN)."""
    is_missing = col.isin(set(layout.missing)).to_numpy(dtype=bool)
    bad_group = np.zeros(len(col), dtype=bool)
    if layout.thousands:
        t, d = re.escape(layout.thousands), re.escape(layout.decimal)
        grouped = col.str.contains(t, regex=True).to_numpy(dtype=bool, na_value=False)
        well = col.str.fullmatch(rf"[+-]?\d{{1,3}}(?:{t}\d{{3}})+(?:{d}\d*)?(?:[eE][+-]?\d+)?")
        bad_group = grouped & ~well.to_numpy(dtype=bool, na_value=False)
        col = col.str.replace(layout.thousands, "", regex=False)
    if layout.decimal == ",":
        col = col.str.replace(",", ".", regex=False)
    num = np.array(pd.to_numeric(col.where(~is_missing, None), errors="coerce"), dtype=np.float64)
    said_nan = col.str.lower().isin(_NAN_TEXTS).to_numpy(dtype=bool)
    readable = ~(np.isnan(num) & ~is_missing & ~said_nan) & ~(bad_group & ~is_missing)
    num[bad_group] = np.nan
    return num, readable


class _Refused(Exception):
    """Why the file is refused, found in one chunk of its lines; ``stage`` orders it against the others."""

    def __init__(self, stage: int, message: str):
        super().__init__(message)
        self.stage, self.message = stage, message


#: the stages of a read, in the order their checks run over the whole file: whatever the chunks,
#: the file is refused for its first refused stage, at the first line refused there
_PARSE, _FIELDS, _NO_ROWS, _COLUMNS, _TIME_TEXT, _ZONE_GAP, _TIME, _YEARS, _VALUES = range(9)


def _refuse_or_skip(layout: Layout, name: str, bad: np.ndarray, message, skipped: list, counts: dict,
                    line_numbers: np.ndarray, lines: list[str], why: str, stage: int,
                    refusals: list) -> np.ndarray:
    """The keep mask (not ``bad``). With bad_lines = "reject" the first bad row is why the file is refused
    (``message(i)``, added to ``refusals`` unless one is there); with "skip" bad rows are listed and counted."""
    idx = np.flatnonzero(bad)
    if layout.bad_lines == "reject":
        if idx.size and not refusals:
            refusals.append(_Refused(stage, f"{name}: {message(int(idx[0]))}"))
        return ~bad
    for i in idx:
        counts["bad_lines"] += 1
        skipped.append((int(line_numbers[i]), f"{why}: {shown_text(lines[i])[:80]}"))
    return ~bad


@dataclass
class _Reading:
    """What a read has to know about the whole file while it parses one chunk of its lines."""
    layout: Layout
    layout_name: str
    name: str
    hv: dict
    names: list[str] | None
    n_fields: int
    counts: dict
    skipped: list


@dataclass
class _Part:
    """One chunk's records: times of its rows whose time was read (local when ``zone`` is a named zone,
    else UTC or the logger's clock), which of those rows are kept, and the kept rows' values."""
    ns: np.ndarray
    line_numbers: np.ndarray | None        # of the rows whose time was read, for a named zone (else None)
    kept: np.ndarray | None                # which of those rows are kept, for a named zone (else all are)
    values: dict[str, np.ndarray]
    nonfinite: dict[str, int]
    basis: str
    label: str
    fixed: int | None
    zone: object
    zone_text: str | None
    refused: _Refused | None               # why the file is refused at a stage after the fields (reject)


def _stage(stage: int, func, *args):
    """``func(*args)``, a ParseError becoming the refusal of ``stage``."""
    try:
        return func(*args)
    except ParseError as err:
        raise _Refused(stage, str(err)) from None


class _Column:
    """A 1-d array filled chunk by chunk into room reserved for the length expected, grown by half when
    short: a big file's values are copied once, never held twice, and room never written stays virtual."""

    def __init__(self, dtype):
        self.buf, self.n = np.empty(0, dtype), 0

    def add(self, piece: np.ndarray, expect: int) -> None:
        end = self.n + piece.size
        if end > self.buf.size:
            room = np.empty(max(end, expect, self.buf.size + self.buf.size // 2), self.buf.dtype)
            room[:self.n] = self.buf[:self.n]
            self.buf = room
        self.buf[self.n:end] = piece
        self.n = end

    def array(self) -> np.ndarray:
        out = self.buf[:self.n]
        self.buf = np.empty(0, self.buf.dtype)
        return out


def _read_chunk(rd: _Reading, rec_lines: list[str], line_numbers: np.ndarray, first: bool,
                last: bool) -> _Part | None:
    """Parse one chunk of data lines (``first``, ``last``: it starts, ends the file's data); None when every
    line is refused for its fields. Raises _Refused."""
    layout, name, n_fields, counts, skipped = rd.layout, rd.name, rd.n_fields, rd.counts, rd.skipped
    frame, n_found = _stage(_PARSE, _parse, rec_lines, layout, n_fields, name, line_numbers, not first)
    wrong = n_found != n_fields
    if last and wrong[-1] and 0 <= n_found[-1] < n_fields:
        # a short final line: the logger lost power or the download stopped mid-line
        wrong[-1] = False
        n_found[-1] = n_fields
        counts["truncated_last_line"] = 1
        keep_rows = np.arange(len(rec_lines) - 1)
    else:
        keep_rows = np.arange(len(rec_lines))

    def fields_message(i):
        what = f"{n_found[i]} fields" if n_found[i] >= 0 else "fields that cannot be told apart"
        return (f"line {line_numbers[i]}: {what} where {n_fields} were expected (delimiter "
                f"{layout.delimiter!r}; the file is damaged or not of this logger layout); re-download it or "
                "check which layout reads it")

    refusals: list[_Refused] = []
    ok = _refuse_or_skip(layout, name, wrong, fields_message, skipped, counts, line_numbers, rec_lines,
                         "wrong number of fields", _FIELDS, refusals)
    if refusals:
        raise refusals[0]
    keep_rows = keep_rows[ok[keep_rows]]
    if not keep_rows.size:
        return None
    frame = frame.loc[keep_rows]
    line_numbers, rec_lines = line_numbers[keep_rows], [rec_lines[i] for i in keep_rows]
    names = rd.names

    def column(ref):
        if isinstance(ref, int):
            if ref >= n_fields:
                raise _Refused(_COLUMNS, f"{name}: layout {rd.layout_name!r} names column {ref} but rows have "
                                         f"{n_fields} fields; correct the logger layout")
            return frame[ref].str.strip()
        if ref not in names:
            raise _Refused(_COLUMNS, f"{name}: no column {ref!r} in the column-name row {names} (the file is of "
                                     "another layout or the layout's column name is wrong); check the file or "
                                     "correct the layout")
        return frame[names.index(ref)].str.strip()

    stamp = column(layout.time.columns[0])
    for ref in layout.time.columns[1:]:
        stamp = stamp + " " + column(ref)
    stamp = stamp.reset_index(drop=True)
    cols = {var: column(spec.column).reset_index(drop=True) for var, spec in layout.variables.items()}
    del frame
    fmt = layout.time.format
    # rows are checked in stages (fields, time, years, values); each stage drops what it refuses
    ns, readable, inside, basis, label, fixed, zone, zone_text = _stage(
        _TIME_TEXT, _times, stamp, layout, rd.hv, name)
    keep = _refuse_or_skip(
        layout, name, ~readable,
        lambda i: (f"line {line_numbers[i]}: time {stamp.iloc[i]!r} does not match format {fmt!r}; correct the file "
                   "or the layout's time format"), skipped, counts, line_numbers, rec_lines, "unreadable time", _TIME,
        refusals)
    keep &= _refuse_or_skip(
        layout, name, ~inside & keep,
        lambda i: (f"line {line_numbers[i]}: time {stamp.iloc[i]!r} is not in the years {YEARS[0]} to {YEARS[1]} "
                   "(a reset or corrupted logger clock); correct the file or re-download it"),
        skipped, counts, line_numbers, rec_lines, "time out of range", _YEARS, refusals)
    values, nonfinite = {}, {}
    for j, (var, spec) in enumerate(layout.variables.items()):
        num, good = _numbers(cols[var], layout)
        keep &= _refuse_or_skip(
            layout, name, ~good & keep,
            lambda i, var=var: (f"line {line_numbers[i]}: {var} value {cols[var].iloc[i]!r} is not a number; "
                                "correct the file or add the text to the layout's missing list"),
            skipped, counts, line_numbers, rec_lines, f"{var} not a number", _VALUES + j, refusals)
        bad = ~np.isfinite(num) & ~np.isnan(num)
        num[bad] = np.nan
        nonfinite[var] = int(np.count_nonzero(bad & keep))
        values[var] = num
    refused = refusals[0] if refusals else None
    values = {} if refused else {var: v[keep] for var, v in values.items()}
    good = readable & inside                       # the rows whose times are read (and put on UTC)
    ns, kept = ns[good], keep[good]
    if isinstance(zone, int):
        ns = ns - zone * 1_000_000_000
    if zone is None or isinstance(zone, int):      # nothing left to do across chunks
        return _Part(ns[kept], None, None, values, nonfinite, basis, label, fixed, zone, zone_text, refused)
    return _Part(ns, line_numbers[good], kept, values, nonfinite, basis, label, fixed, zone, zone_text, refused)


def read_raw_file(path: str | Path, layout: Layout, layout_name: str = "", *,
                  chunk_lines: int | None = None, read_from: str | Path | None = None) -> RawTable:
    """Parse one raw file with ``layout``; raise ParseError naming file, line and fix.

    The file is read as a stream and its data lines are parsed ``chunk_lines`` (default ``CHUNK_LINES``) at
    a time, so a read holds the arrays of values and the text of one chunk, whatever the file's size;
    every count and skipped line is what reading the whole file at once gives, and a file is refused
    exactly when reading it whole refuses it (tests/ingest/test_chunked_read.py); only the wording of
    one refusal may differ: a quoted field left open is named by its line, not by the count of records.

    ``read_from``: where the file's bytes are read when not at ``path`` (a copy already made and hashed;
    ``path`` still names the file in messages and gives a serial taken from the file name).
    """
    chunk_lines = CHUNK_LINES if chunk_lines is None else chunk_lines
    if chunk_lines < 1:
        raise ValueError(f"chunk_lines must be at least 1, not {chunk_lines}")
    path = Path(path)
    src = Path(read_from) if read_from is not None else path
    name = shown_name(path)
    _check_text(src, layout.encoding, name)
    search = _text_lines(src, layout.encoding)
    try:
        n_meta = _header_length(search, layout, name, layout_name)
    finally:
        search.close()
    n_head = n_meta + (1 if layout.column_names else 0)
    lines = _text_lines(src, layout.encoding)
    try:
        return _read_lines(path, src, lines, layout, layout_name, name, n_meta, n_head, chunk_lines)
    finally:
        lines.close()


def _read_lines(path: Path, src: Path, lines, layout: Layout, layout_name: str, name: str, n_meta: int, n_head: int,
                chunk_lines: int) -> RawTable:
    head = list(itertools.islice(lines, n_head))
    first = next(lines, None)
    if len(head) < n_head:
        raise ParseError(f"{name}: only {len(head)} lines, fewer than the {n_head} header lines of layout "
                         f"{layout_name!r} (the file is truncated or of another layout); re-download it "
                         "or check which layout reads it")
    if first is None:
        raise ParseError(f"{name}: no data rows after the {n_head} header lines of layout {layout_name!r} "
                         "(the file is truncated or of another layout); re-download it or check which "
                         "layout reads it")
    header = head[:n_meta]
    serial = serial_from_file(path, header, layout)
    hv = header_values(header, layout)
    for var, spec in layout.variables.items():
        if spec.units_from is not None:
            said = _needed_value(hv, layout, spec.units_from, f"the units of {var}", name)
            if not same_unit(said, spec.units):
                raise ParseError(f"{name}: the header says {var} is in {said!r} but layout {layout_name!r} reads it as "
                                 f"{spec.units!r}; correct the layout's units or use a layout for that setting")
    names = _names_row(head[n_meta], layout, name) if layout.column_names else None
    names_line = head[n_meta].strip() if layout.column_names else None
    counts = {"rows_read": 0, "blank_lines": 0, "truncated_last_line": 0, "skipped_lines": 0, "bad_lines": 0}
    skip_rx = re.compile("|".join(f"(?:{p})" for p in layout.skip_lines)) if layout.skip_lines else None
    skipped: list[tuple[int, str]] = []
    rd: _Reading | None = None
    p0: _Part | None = None                        # the first chunk's records (time basis and zone)
    refused: _Refused | None = None
    rows_after_fields = False
    expect = 0
    times, kept_rows, line_numbers = _Column(np.int64), _Column(bool), _Column(np.int64)
    columns = {var: _Column(np.float64) for var in layout.variables}
    nonfinite = dict.fromkeys(layout.variables, 0)

    def chunk(rec_lines: list[str], numbers: list[int], last: bool) -> None:
        nonlocal rd, p0, refused, rows_after_fields, expect
        first = rd is None
        if first:
            n_fields = len(names) if names is not None else len(_names_row(rec_lines[0], layout, name))
            rd = _Reading(layout, layout_name, name, hv, names, n_fields, counts, skipped)
            # records the file holds if its lines are like the first chunk's: room reserved for them
            per_line = sum(map(len, rec_lines)) / len(rec_lines) + 1
            expect = int(src.stat().st_size / per_line * 1.05) + chunk_lines
        try:
            part = _read_chunk(rd, rec_lines, np.array(numbers), first, last)
        except _Refused as why:
            part, why_not = None, why
            rows_after_fields |= why.stage > _FIELDS      # the column and time-text stages come after rows are kept
        else:
            why_not = part.refused if part is not None else None
            rows_after_fields |= part is not None
        if why_not is not None and (refused is None or why_not.stage < refused.stage):
            refused = why_not
        if part is not None:
            p0 = p0 or part
            times.add(part.ns, expect)
            if part.kept is not None:              # a named zone: times are put on UTC at the end
                kept_rows.add(part.kept, expect)
                line_numbers.add(part.line_numbers, expect)
            if refused is None:                    # (once refused, the values are not needed)
                for var in columns:
                    columns[var].add(part.values.pop(var), expect)
                    nonfinite[var] += part.nonfinite[var]
        skipped.sort()
        del skipped[LISTED_LINES:]                 # the first LISTED_LINES by line number are listed

    rec_lines: list[str] = []
    numbers: list[int] = []
    n_body = 0
    for i, ln in enumerate(itertools.chain([first], lines)):
        n_body = i + 1
        if not ln.strip():
            counts["blank_lines"] += 1
        elif names_line is not None and ln.strip() == names_line:
            counts["skipped_lines"] += 1
            # every line listed so far comes before this one: past LISTED_LINES it would never be listed
            if len(skipped) < LISTED_LINES:
                skipped.append((n_head + i + 1, "column names repeated"))
        elif skip_rx is not None and skip_rx.search(ln):
            counts["skipped_lines"] += 1
            if len(skipped) < LISTED_LINES:
                skipped.append((n_head + i + 1, f"not a record: {shown_text(ln)[:80]}"))
        else:
            rec_lines.append(ln)
            numbers.append(n_head + i + 1)
            if len(rec_lines) > chunk_lines:       # one line held back: the file's last chunk is never empty
                chunk(rec_lines[:chunk_lines], numbers[:chunk_lines], False)
                del rec_lines[:chunk_lines], numbers[:chunk_lines]
    counts["rows_read"] = n_body
    if not rec_lines:
        raise ParseError(f"{name}: no data rows after the header; re-download the file")
    chunk(rec_lines, numbers, True)
    del rec_lines, numbers
    if refused is not None and refused.stage < _NO_ROWS:
        raise ParseError(refused.message)
    if not rows_after_fields:
        raise ParseError(f"{name}: no data rows after the header; re-download the file")
    if refused is not None and refused.stage < _ZONE_GAP:
        raise ParseError(refused.message)
    ns = times.array()
    if p0.kept is not None:
        # a named zone: its repeated hour is told apart from the order of the whole file's times
        ns = _local_to_utc(ns, p0.zone, repr(p0.zone_text), name, line_numbers.array(), counts)[kept_rows.array()]
    if refused is not None:
        raise ParseError(refused.message)
    if not ns.size:
        raise ParseError(f"{name}: no readable records (every one was refused, see bad_lines); correct the file "
                         "or the logger layout")
    values, units = {}, {}
    for var, spec in layout.variables.items():
        counts[f"{var}_nonfinite"] = nonfinite[var]
        values[var], units[var] = columns[var].array(), spec.units
    skipped.sort()
    return RawTable(path, layout_name, serial, ns.view("datetime64[ns]"), values, units, counts,
                    time_basis=p0.basis, time_zone=p0.label, zone_offset_s=p0.fixed, header_values=hv,
                    skipped=skipped[:LISTED_LINES])
