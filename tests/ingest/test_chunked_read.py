"""A raw file read in chunks of lines gives what reading it whole gives, wherever the chunks end.

``read_raw_file`` parses ``chunk_lines`` data lines at a time (issue 18: big files in bounded
memory).  The expected values here are worked out by hand from the files written in each test (how
many lines of each kind were put in); each read is also repeated with every chunk size from 1 line
to more than the file, so a chunk boundary falls at every position: inside runs of bad lines,
before the truncated last line, inside a repeated (daylight-saving) hour, inside duplicated and
conflicting records.
"""

import subprocess
import sys

import numpy as np
import pytest

from qcpipe.config.layouts import Layout
from qcpipe.errors import ParseError
from qcpipe.ingest import readers
from qcpipe.ingest.readers import read_raw_file
from qcpipe.ingest.timebase import merge_records

LAYOUT = {
    "file_glob": "*.txt", "delimiter": ",", "header_lines": 1, "column_names": True, "missing": ["", "*"],
    "skip_lines": ["^#"], "time": {"columns": ["t"], "format": "%Y%m%d%H%M%S"},
    "serial": {"source": "header", "pattern": r"^unit (\S+)"},
    "variables": {"temperature": {"column": "a", "units": "degC"}, "pressure": {"column": "b", "units": "kPa"}},
}
SKIP = Layout.model_validate(dict(LAYOUT, bad_lines="skip"))
REJECT = Layout.model_validate(LAYOUT)


def stamp(minute: int) -> str:
    return f"2026010100{minute:02d}00"


# line numbers are 1-based; line 1 is the header, line 2 the column names
MESSY_LINES = [
    f"{stamp(0)},10.5,101.3",         # 3  record
    f"{stamp(1)},10.6,101.4",         # 4  record
    "",                               # 5  blank
    "# battery low",                  # 6  skipped (skip_lines)
    f"{stamp(2)},10.7",               # 7  bad: 2 fields
    f"{stamp(3)},10.8,101.6,9",       # 8  bad: 4 fields
    "t,a,b",                          # 9  skipped (column names repeated)
    f"x{stamp(4)},10.9,101.7",        # 10 bad: unreadable time
    f"{stamp(5)},hot,101.8",          # 11 bad: temperature not a number
    f"{stamp(6)},inf,101.9",          # 12 record, temperature not finite -> NaN
    f"{stamp(7)},*,102.0",            # 13 record, temperature missing -> NaN
    "30000101000000,11.0,102.1",      # 14 bad: time out of range
    f"{stamp(9)},11.1,oops",          # 15 bad: pressure not a number
    f"{stamp(10)},11.2,102.3",        # 16 record
    "",                               # 17 blank
    f"{stamp(11)},11.3,102.4",        # 18 record
    f"{stamp(12)},11",                # 19 truncated last line
]
MESSY = "unit QX-7\nt,a,b\n" + "\n".join(MESSY_LINES)


def write(tmp_path, text, name="a.txt"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def table_of(t) -> tuple:
    return (t.serial, t.logger_time.tolist(), {k: v.tobytes() for k, v in t.values.items()}, t.counts,
            t.skipped, t.time_basis, t.time_zone, t.zone_offset_s)


def every_chunk_size(path, layout, n_lines):
    """(what the read gave, or its error text) for chunk sizes 1 .. n_lines + 2."""
    out = []
    for k in range(1, n_lines + 3):
        try:
            out.append(table_of(read_raw_file(path, layout, "x", chunk_lines=k)))
        except ParseError as err:
            out.append(str(err))
    return out


def test_messy_file_counts_every_line_at_every_chunk_size(tmp_path):
    path = write(tmp_path, MESSY)
    table = read_raw_file(path, SKIP, "x", chunk_lines=10_000)
    minutes = [0, 1, 6, 7, 10, 11]
    np.testing.assert_array_equal(table.logger_time,
                                  np.array([f"2026-01-01T00:{m:02d}" for m in minutes], "datetime64[ns]"))
    np.testing.assert_array_equal(table.values["temperature"], [10.5, 10.6, np.nan, np.nan, 11.2, 11.3])
    np.testing.assert_array_equal(table.values["pressure"], [101.3, 101.4, 101.9, 102.0, 102.3, 102.4])
    assert table.counts == {"rows_read": 17, "blank_lines": 2, "truncated_last_line": 1, "skipped_lines": 2,
                            "bad_lines": 6, "temperature_nonfinite": 1, "pressure_nonfinite": 0}
    assert [n for n, _ in table.skipped] == [6, 7, 8, 9, 10, 11, 14, 15]
    assert every_chunk_size(path, SKIP, len(MESSY_LINES)) == [table_of(table)] * (len(MESSY_LINES) + 2)


def test_listed_lines_are_the_first_by_line_number_whatever_the_chunks(tmp_path):
    body = [f"{stamp(i % 60)},1,{'x' if i % 2 else '2'}" for i in range(3 * readers.LISTED_LINES)]
    path = write(tmp_path, "unit QX-7\nt,a,b\n" + "\n".join(body) + "\n")
    for k in (1, 7, 1000):
        table = read_raw_file(path, SKIP, "x", chunk_lines=k)
        assert table.counts["bad_lines"] == len(body) // 2
        # the odd body lines (file lines 4, 6, ...) are refused; the first LISTED_LINES are listed
        assert [n for n, _ in table.skipped] == [4 + 2 * i for i in range(readers.LISTED_LINES)]


@pytest.mark.parametrize("lines, message", [
    # a value refused early, a field count refused late: the fields are checked first over the whole file
    ([f"{stamp(0)},hot,1", f"{stamp(1)},1,1", f"{stamp(2)},1,1", f"{stamp(3)},1,1,1", f"{stamp(4)},1,1"],
     "line 6: 4 fields where 3 were expected"),
    # an unreadable time after a value that is not a number: times are checked before values
    ([f"{stamp(0)},1,x", f"{stamp(1)},1,1", f"{stamp(2)},1,1", f"9{stamp(3)},1,1", f"{stamp(4)},1,1"],
     "line 6: time '920260101000300' does not match format"),
    # two values that are not numbers: the first line wins
    ([f"{stamp(0)},1,1", f"{stamp(1)},1,1", f"{stamp(2)},1,y", f"{stamp(3)},z,1", f"{stamp(4)},1,1"],
     "line 6: temperature value 'z' is not a number"),
], ids=["fields-first", "time-before-values", "first-variable-first"])
def test_rejected_file_gives_the_same_reason_at_every_chunk_size(tmp_path, lines, message):
    path = write(tmp_path, "unit QX-7\nt,a,b\n" + "\n".join(lines) + "\n")
    got = every_chunk_size(path, REJECT, len(lines))
    assert all(isinstance(g, str) and message in g for g in got), got


def test_repeated_hour_of_a_named_zone_is_read_over_the_whole_file(tmp_path):
    # Europe/Berlin, 2026-10-25: clocks go back from 03:00 CEST (UTC+2) to 02:00 CET (UTC+1), so 02:00-02:59
    # local happens twice (EU summer-time rule, Directive 2000/84/EC: last Sunday of October, 01:00 UTC).
    # The reader infers which is which from the order of the file's times, whatever the chunks.
    layout = Layout.model_validate(dict(LAYOUT, time={"columns": ["t"], "format": "%Y-%m-%d %H:%M",
                                                      "zone": "Europe/Berlin"}))
    local = ["01:30", "02:00", "02:30", "02:00", "02:30", "03:00", "03:30"]
    utc = ["23:30", "00:00", "00:30", "01:00", "01:30", "02:00", "02:30"]          # worked out by hand
    day = ["2026-10-24"] + ["2026-10-25"] * 6
    path = write(tmp_path, "unit QX-7\nt,a,b\n" + "\n".join(f"2026-10-25 {c},1,2" for c in local) + "\n")
    want = np.array([f"{d}T{u}" for d, u in zip(day, utc)], "datetime64[ns]")
    for k in range(1, len(local) + 2):
        table = read_raw_file(path, layout, "x", chunk_lines=k)
        np.testing.assert_array_equal(table.logger_time, want)
        assert table.counts["ambiguous_local_times"] == 4


def test_overlapping_downloads_merge_to_the_same_duplicates_and_conflicts(tmp_path):
    # download 1: minutes 0-9; download 2: minutes 5-14, where minutes 5-9 repeat download 1 except
    # minute 7 (temperature 99) and minute 9 (pressure 77): 3 identical repeats, 2 conflicts
    first = [f"{stamp(m)},{m}.5,{100 + m}" for m in range(10)]
    second = [f"{stamp(m)},{'99' if m == 7 else f'{m}.5'},{77 if m == 9 else 100 + m}" for m in range(5, 15)]
    p1 = write(tmp_path, "unit QX-7\nt,a,b\n" + "\n".join(first) + "\n", "one.txt")
    p2 = write(tmp_path, "unit QX-7\nt,a,b\n" + "\n".join(second) + "\n", "two.txt")
    for k in range(1, 12):
        a, b = (read_raw_file(p, SKIP, "x", chunk_lines=k) for p in (p1, p2))
        merged = merge_records(np.concatenate([a.logger_time, b.logger_time]),
                               {v: np.concatenate([a.values[v], b.values[v]]) for v in a.values},
                               np.repeat([0, 1], [len(a), len(b)]))
        assert (merged.time.size, merged.duplicates, merged.conflicts) == (15, 3, 2)
        assert [r["time"][14:16] for r in merged.conflict_rows] == ["07", "09"]    # variables in the layout's order


def test_demo_outputs_are_unchanged_with_tiny_chunks(tmp_path, monkeypatch):
    """The demo read 250 data lines at a time (its files have 40 to 10,000 lines) gives the recorded outputs (tests/reference/demo_outputs_digest.json),
    with chunk boundaries inside its duplicated downloads, conflicts and bad lines."""
    from tests.conftest import REPO, demo_in_process

    monkeypatch.setattr(readers, "CHUNK_LINES", 250)
    demo = demo_in_process(tmp_path)
    done = subprocess.run([sys.executable, str(REPO / "tools" / "output_digest.py"), str(demo.archive),
                           "--against", str(REPO / "tests" / "reference" / "demo_outputs_digest.json")],
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr
