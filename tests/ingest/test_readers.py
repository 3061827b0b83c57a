"""Reading raw files with a logger layout: good files, and clear one-line errors."""

import numpy as np
import pytest

from qcpipe.config.layouts import Layout
from qcpipe.errors import ParseError
from qcpipe.ingest.readers import read_raw_file

LAYOUT = Layout.model_validate({
    "file_glob": "*.txt", "delimiter": ";", "header_lines": 2, "column_names": True,
    "time": {"columns": ["day", "clock"], "format": "%d/%m/%Y %H:%M"},
    "serial": {"source": "header", "pattern": r"^# unit (\S+)"},
    "variables": {"temperature": {"column": "t", "units": "degF"}},
})

GOOD = "# unit TX-9\n# made up\nday;clock;t\n01/10/2026;10:00;50.0\n01/10/2026;10:10;NaN\n01/10/2026;10:20;52\n"


def write(tmp_path, text, name="a.txt", mode="w"):
    p = tmp_path / name
    if isinstance(text, bytes):
        p.write_bytes(text)
    else:
        p.write_text(text)
    return p


def test_reads_times_values_and_serial(tmp_path):
    table = read_raw_file(write(tmp_path, GOOD), LAYOUT, "x")
    assert table.serial == "TX-9"
    np.testing.assert_array_equal(table.logger_time, np.array(["2026-10-01T10:00", "2026-10-01T10:10",
                                                               "2026-10-01T10:20"], "datetime64[ns]"))
    np.testing.assert_array_equal(table.values["temperature"], [50.0, np.nan, 52.0])
    assert table.units == {"temperature": "degF"}


def test_raw_file_is_not_modified(tmp_path):
    p = write(tmp_path, GOOD)
    before = p.read_bytes(), p.stat().st_mtime_ns
    read_raw_file(p, LAYOUT, "x")
    assert (p.read_bytes(), p.stat().st_mtime_ns) == before


def test_truncated_last_line_is_dropped_and_counted(tmp_path):
    table = read_raw_file(write(tmp_path, GOOD + "01/10/2026;10:3"), LAYOUT, "x")
    assert len(table) == 3 and table.counts["truncated_last_line"] == 1


@pytest.mark.parametrize("text, match", [
    ("", "empty"),
    ("# unit TX-9\n# x\n", "truncated or of another layout"),
    ("# nothing\n# x\nday;clock;t\n01/10/2026;10:00;50\n", "no serial number"),
    (GOOD.replace("01/10/2026;10:10;NaN", "01/10/2026;10:10;5;6"), "line 5: 4 fields where 3"),
    (GOOD.replace("10:20;52", "10:20;hot"), "line 6: temperature value 'hot' is not a number"),
    (GOOD.replace("01/10/2026;10:10", "2026-10-01;10:10"), "line 5: time '2026-10-01 10:10' does not match"),
    (GOOD.replace("day;clock;t", "day;clock;temp"), "no column 't'"),
], ids=["empty", "header-only", "no-serial", "extra-field", "not-a-number", "bad-time", "missing-column"])
def test_parse_errors_name_file_and_line(tmp_path, text, match):
    with pytest.raises(ParseError, match=match) as info:
        read_raw_file(write(tmp_path, text), LAYOUT, "x")
    assert str(info.value).startswith("a.txt: ")
    assert "\n" not in str(info.value)


def test_non_utf8_bytes_named_by_line(tmp_path):
    with pytest.raises(ParseError, match=r"line 4: bytes that are not utf-8"):
        read_raw_file(write(tmp_path, GOOD.encode().replace(b"50.0", b"5\xff.0")), LAYOUT, "x")


def test_infinite_text_becomes_missing_and_is_counted(tmp_path):
    table = read_raw_file(write(tmp_path, GOOD.replace("52", "inf")), LAYOUT, "x")
    assert np.isnan(table.values["temperature"][2]) and table.counts["temperature_nonfinite"] == 1


def test_serial_from_file_name(tmp_path):
    lay = LAYOUT.model_copy(update={"serial": LAYOUT.serial.model_copy(update={"source": "filename",
                                                                                "pattern": r"^(T\d+)_"})})
    table = read_raw_file(write(tmp_path, GOOD, name="T0042_oct.txt"), lay, "x")
    assert table.serial == "T0042"
