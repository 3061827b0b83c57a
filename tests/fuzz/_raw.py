"""Valid demo raw files cut down to a few rows, and hypothesis strategies that damage them.

A base file is the header of a demo download plus a run of rows from the middle
of it (inside the deployment), so every base is accepted as it is; the
strategies then apply one to three damages to its lines or bytes.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import functools
import hashlib
from dataclasses import dataclass
from pathlib import Path

from hypothesis import strategies as st

from qcpipe.config import load_layouts, load_register, load_rules
from qcpipe.ingest.discover import RawFile

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "sample_raw"
ROWS = 40                     # data rows kept in each base file


@dataclass(frozen=True)
class Base:
    """One demo raw file cut to ``ROWS`` data rows, split into its parts."""
    name: str
    layout: str
    encoding: str
    delimiter: str
    header: tuple[str, ...]           # metadata lines and the column-name row
    rows: tuple[tuple[str, ...], ...]
    time_columns: tuple[int, ...]     # field numbers of the time column(s)
    value_columns: tuple[int, ...]    # field numbers of the variables
    time_format: str

    def text(self, header=None, rows=None, newline="\n") -> str:
        header = self.header if header is None else header
        rows = self.rows if rows is None else rows
        lines = list(header) + [self.delimiter.join(r) for r in rows]
        return newline.join(lines) + newline

    def data(self) -> bytes:
        return self.text().encode(self.encoding)

    def time_of(self, row) -> dt.datetime:
        return dt.datetime.strptime(" ".join(row[c] for c in self.time_columns), self.time_format)

    def with_time(self, row, when: dt.datetime) -> tuple[str, ...]:
        parts = when.strftime(self.time_format).split(" ", len(self.time_columns) - 1)
        out = list(row)
        for c, text in zip(self.time_columns, parts):
            out[c] = text
        return tuple(out)


@functools.lru_cache(maxsize=1)
def demo_config():
    """The demo register, layouts and rule set (loaded once; they are read-only)."""
    return (load_register(DEMO / "register.toml"), load_layouts(DEMO / "layouts.toml"),
            load_rules(REPO / "qc_rules" / "kelpwhistle-cove.toml"))


@functools.lru_cache(maxsize=1)
def bases() -> tuple[Base, ...]:
    """One base per demo raw file whose serial has a deployment in the demo register."""
    register, layouts, _ = demo_config()
    out = []
    for path in sorted((DEMO / "inbox").rglob("*")):
        if not path.is_file():
            continue
        name, lay = next((n, lay) for n, lay in layouts.layouts.items() if lay.reads(path.name))
        lines = path.read_bytes().decode(lay.encoding).split("\n")
        if lines[-1] == "":
            lines.pop()
        n_head = lay.header_lines + (1 if lay.column_names else 0)
        header, body = lines[:n_head], lines[n_head:]
        names = [c.strip() for c in header[-1].split(lay.delimiter)] if lay.column_names else None

        def col(ref):
            return ref if isinstance(ref, int) else names.index(ref)

        base = Base(path.parent.name + "/" + path.name, name, lay.encoding, lay.delimiter, tuple(header), (),
                    tuple(col(c) for c in lay.time.columns),
                    tuple(col(v.column) for v in lay.variables.values()), lay.time.format)
        # the demo downloads carry injected faults: take the first clean run of rows from the middle on
        n_fields = len(names) if names else len(body[0].split(lay.delimiter))
        starts = list(range(len(body) // 2, len(body) - ROWS, 5)) + list(range(0, len(body) // 2, 5))
        start = next(i for i in starts if all(_clean(base, lay, r, n_fields) for r in body[i:i + ROWS]))
        base = dataclasses.replace(base, rows=tuple(tuple(r.split(lay.delimiter)) for r in body[start:start + ROWS]))
        outcome_serial = _serial(path, header, lay)
        if register.instrument_by_serial(outcome_serial) is not None:
            out.append(base)
    return tuple(out)


def _clean(base: Base, lay, line: str, n_fields: int) -> bool:
    """A row with the right number of fields, a readable time and plain numbers (read without qcpipe)."""
    fields = line.split(lay.delimiter)
    if len(fields) != n_fields:
        return False
    try:
        base.time_of(fields)
        for c in base.value_columns:
            float(fields[c].replace(",", ".") if lay.decimal == "," else fields[c])
    except (ValueError, IndexError):
        return False
    return True


def _serial(path: Path, header: list[str], lay) -> str:
    import re
    rx = re.compile(lay.serial.pattern)
    texts = [path.name] if lay.serial.source == "filename" else header
    return next(m.group(1) for m in map(rx.search, texts) if m)


def write_raw(folder: Path, base: Base, data: bytes) -> RawFile:
    """Write ``data`` under the base file's own name (layouts and serials go by it)."""
    path = folder / Path(base.name).name
    path.write_bytes(data)
    return RawFile(path, hashlib.sha256(data).hexdigest(), len(data))


# --- damages that keep every record (the file must still be accepted, same records) -------------

@st.composite
def harmless(draw, base: Base) -> bytes:
    """CRLF or CR line ends, a UTF-8 BOM, blank lines at the end, repeated or reordered rows."""
    rows = list(base.rows)
    kinds = draw(st.sets(st.sampled_from(["crlf", "cr", "bom", "blank_tail", "duplicate", "shuffle"]),
                         min_size=1, max_size=4))
    if "duplicate" in kinds:
        for _ in range(draw(st.integers(1, 5))):
            i = draw(st.integers(0, len(rows) - 1))
            rows.insert(draw(st.integers(0, len(rows))), rows[i])
    if "shuffle" in kinds:
        rows = draw(st.permutations(rows))
    newline = "\r\n" if "crlf" in kinds else "\r" if "cr" in kinds else "\n"
    text = base.text(rows=rows, newline=newline)
    if "blank_tail" in kinds:
        text += draw(st.lists(st.sampled_from(["", " ", "\t", "  "]), min_size=1, max_size=4)
                     .map(lambda xs: newline.join(xs) + newline))
    data = text.encode(base.encoding)
    if "bom" in kinds:
        data = b"\xef\xbb\xbf" + data
    return data


# --- damages of any kind (accepted or rejected, never a crash) ------------------------------------

SPECIAL_VALUES = ["1e308", "-1e308", "1e400", "-1e400", "1e-400", "NaN", "nan", "-nan", "Inf", "-inf", "+inf",
                  "inf", "Infinity", "-Infinity", "INF", "9" * 400, "0x1F", "1_000", "--", "", " ", "١٢"]
GARBAGE_TEXT = st.text(st.characters(codec="utf-8", exclude_characters="\r\n"), max_size=60)


@st.composite
def damaged(draw, base: Base) -> bytes:
    """Apply one to three damages (the kinds in _ROW_DAMAGE and _BYTE_DAMAGE below) to the base file."""
    header, rows = list(base.header), [list(r) for r in base.rows]
    steps = draw(st.lists(st.sampled_from(sorted(_ROW_DAMAGE)), min_size=0, max_size=3))
    for step in steps:
        header, rows = _ROW_DAMAGE[step](draw, base, header, rows)
    text = base.text(header=header, rows=[tuple(r) for r in rows])
    data = text.encode(base.encoding, errors="replace") if base.encoding != "utf-8" else text.encode("utf-8")
    for step in draw(st.lists(st.sampled_from(sorted(_BYTE_DAMAGE)), min_size=0 if steps else 1, max_size=2)):
        data = _BYTE_DAMAGE[step](draw, data)
    return data


def _retimed(base, row, when):
    """``row`` with its time moved by ``when``; rows already damaged by an earlier step stay as they are."""
    try:
        return list(base.with_time(row, when(base.time_of(row))))
    except (ValueError, IndexError, OverflowError):
        return row


def _times(draw, base, rows, when):
    if not rows:
        return rows
    idx = draw(st.lists(st.integers(0, len(rows) - 1), min_size=1, max_size=len(rows), unique=True))
    for i in idx:
        rows[i] = _retimed(base, rows[i], when)
    return rows


def _future(draw, base, header, rows):
    year = draw(st.sampled_from([2099, 2200, 2261, 2262, 2500, 9999]))
    return header, _times(draw, base, rows, lambda t: t.replace(year=year))


def _past(draw, base, header, rows):
    year = draw(st.sampled_from([1969, 1950, 1900, 1800, 1678, 1677, 1601, 1000]))
    return header, _times(draw, base, rows, lambda t: t.replace(year=year))


def _dst_repeat(draw, base, header, rows):
    """From row k on, the clock is one hour behind: an hour of local times is repeated."""
    if len(rows) < 2:
        return header, rows
    k = draw(st.integers(1, len(rows) - 1))
    for i in range(k, len(rows)):
        rows[i] = _retimed(base, rows[i], lambda t: t - dt.timedelta(hours=1))
    return header, rows


def _jitter(draw, base, header, rows):
    shift = draw(st.integers(-3 * 86400, 3 * 86400))
    return header, _times(draw, base, rows, lambda t: t + dt.timedelta(seconds=shift))


def _duplicate(draw, base, header, rows):
    if not rows:
        return header, rows
    i = draw(st.integers(0, len(rows) - 1))
    rows.insert(draw(st.integers(0, len(rows))), list(rows[i]))
    return header, rows


def _shuffle(draw, base, header, rows):
    return header, [list(r) for r in draw(st.permutations(rows))]


def _values(draw, base, header, rows):
    if not rows:
        return header, rows
    for i in draw(st.lists(st.integers(0, len(rows) - 1), min_size=1, max_size=8)):
        c = draw(st.sampled_from(base.value_columns))
        if c < len(rows[i]):
            rows[i][c] = draw(st.sampled_from(SPECIAL_VALUES))
    return header, rows


def _garbage(draw, base, header, rows):
    for _ in range(draw(st.integers(1, 3))):
        rows.insert(draw(st.integers(0, len(rows))), [draw(GARBAGE_TEXT)])
    return header, rows


def _cut_line(draw, base, header, rows):
    """A line cut anywhere (a logger losing power mid-record), in the header or the data."""
    lines = header + [base.delimiter.join(r) for r in rows]
    if not lines:
        return header, rows
    i = draw(st.integers(0, len(lines) - 1))
    lines[i] = lines[i][:draw(st.integers(0, len(lines[i])))]
    n = len(header)
    return lines[:n], [ln.split(base.delimiter) for ln in lines[n:]]


def _drop_rows(draw, base, header, rows):
    keep = draw(st.integers(0, len(rows)))
    return header, rows[:keep]


def _drop_header(draw, base, header, rows):
    return header[:draw(st.integers(0, len(header)))], rows


def _delimiter(draw, base, header, rows):
    other = draw(st.sampled_from([c for c in [",", ";", "\t", "|", " ", ":"] if c != base.delimiter]))
    every = draw(st.booleans())
    lines = header + [base.delimiter.join(r) for r in rows]
    if not lines:
        return header, rows
    pick = set(range(len(lines))) if every else set(draw(st.lists(st.integers(0, len(lines) - 1), min_size=1)))
    lines = [ln.replace(base.delimiter, other) if i in pick else ln for i, ln in enumerate(lines)]
    n = len(header)
    return lines[:n], [ln.split(base.delimiter) for ln in lines[n:]]


_ROW_DAMAGE = {"future": _future, "past": _past, "dst_repeat": _dst_repeat, "jitter": _jitter,
               "duplicate": _duplicate, "shuffle": _shuffle, "values": _values, "garbage": _garbage,
               "cut_line": _cut_line, "drop_rows": _drop_rows, "drop_header": _drop_header,
               "delimiter": _delimiter}


def _truncate(draw, data):
    return data[:draw(st.integers(0, len(data)))]


def _non_utf8(draw, data):
    pos = draw(st.integers(0, len(data)))
    return data[:pos] + draw(st.binary(min_size=1, max_size=4).map(lambda b: bytes(x | 0x80 for x in b))) + data[pos:]


def _nul(draw, data):
    pos = draw(st.integers(0, len(data)))
    return data[:pos] + draw(st.sampled_from([b"\x00", b"\x1a", b"\x0b\x0c", b"\x1c", b"\x85", b"\x7f"])) + data[pos:]


def _bom(draw, data):
    return draw(st.sampled_from([b"\xef\xbb\xbf", b"\xff\xfe", b"\xfe\xff"])) + data


def _line_ends(draw, data):
    return data.replace(b"\n", draw(st.sampled_from([b"\r\n", b"\r", b"\n\n", b"\n \n"])))


def _blank_tail(draw, data):
    return data + draw(st.sampled_from([b"\n", b"\n\n\n", b"\r\n\r\n", b"   \n", b"\t\n"]))


def _emptied(draw, data):
    return draw(st.sampled_from([b"", b"\n", b"   ", b"\r\n\r\n", b"\xef\xbb\xbf"]))


def _garbage_bytes(draw, data):
    pos = draw(st.integers(0, len(data)))
    return data[:pos] + draw(st.binary(min_size=1, max_size=40)) + data[pos:]


_BYTE_DAMAGE = {"truncate": _truncate, "non_utf8": _non_utf8, "control": _nul, "bom": _bom,
                "line_ends": _line_ends, "blank_tail": _blank_tail, "emptied": _emptied,
                "garbage_bytes": _garbage_bytes}
