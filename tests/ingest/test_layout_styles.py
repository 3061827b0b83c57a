"""Invented logger layouts, one per style of export, each read from a small file written here.

Every expected time and value is worked out independently of qcpipe: times with
Python's ``datetime``/``zoneinfo`` (and ``strptime``), fields with Python's
``csv`` module or by hand in the test.  None of these layouts is any maker's
format; they are made up for the test.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
from zoneinfo import ZoneInfo

import numpy as np
import pytest

from qcpipe.config.layouts import Layout
from qcpipe.errors import ParseError
from qcpipe.ingest.readers import LOGGER_CLOCK, UTC, read_raw_file

UTC_TZ = dt.timezone.utc


def make(**kw) -> Layout:
    base = {"serial": {"source": "filename", "pattern": r"^([A-Z]+\d+)_"}}
    base.update(kw)
    return Layout.model_validate(base)


def write(tmp_path, content, name="AB12_x.txt"):
    p = tmp_path / name
    p.write_bytes(content if isinstance(content, bytes) else content.encode("utf-8"))
    return p


def as_ns(moments) -> np.ndarray:
    """datetime64[ns] of aware datetimes, on UTC (the reference: datetime's own arithmetic)."""
    return np.array([np.datetime64(m.astimezone(UTC_TZ).replace(tzinfo=None), "ns") for m in moments])


# 1 ---------------------------------------------------------------------------------------------
def test_epoch_seconds_with_fractions(tmp_path):
    lay = make(delimiter=",", time={"columns": ["secs"], "format": "epoch_seconds"},
               variables={"temperature": {"column": "water", "units": "degC"}})
    stamps = ["1790000000", "1790000600.5", "1790001200.25"]
    text = "secs,water\n" + "".join(f"{s},{v}\n" for s, v in zip(stamps, ["11.5", "11.75", "12"]))
    table = read_raw_file(write(tmp_path, text), lay, "epochs")
    expected = as_ns([dt.datetime(1970, 1, 1, tzinfo=UTC_TZ) + dt.timedelta(seconds=float(s)) for s in stamps])
    np.testing.assert_array_equal(table.logger_time, expected)
    np.testing.assert_array_equal(table.values["temperature"], [11.5, 11.75, 12.0])
    assert table.time_basis == UTC and table.zone_offset_s == 0


# 2 ---------------------------------------------------------------------------------------------
def test_epoch_milliseconds_no_column_names(tmp_path):
    lay = make(delimiter=";", column_names=False, header_lines=1,
               time={"columns": [0], "format": "epoch_milliseconds"},
               variables={"pressure": {"column": 1, "units": "kPa"}, "temperature": {"column": 2, "units": "degC"}})
    ms = [1801234567890, 1801234627890, 1801234687891]
    text = "dump of logger AB12\n" + "".join(f"{m};101.{i};9.{i}\n" for i, m in enumerate(ms))
    table = read_raw_file(write(tmp_path, text), lay, "millis")
    expected = as_ns([dt.datetime(1970, 1, 1, tzinfo=UTC_TZ) + dt.timedelta(milliseconds=m) for m in ms])
    np.testing.assert_array_equal(table.logger_time, expected)
    np.testing.assert_array_equal(table.values["pressure"], [101.0, 101.1, 101.2])


# 3 ---------------------------------------------------------------------------------------------
ISO_LAYOUT = make(delimiter=",", time={"columns": ["when"], "format": "iso8601"},
                  variables={"temperature": {"column": "t", "units": "degC"}})


def test_iso8601_rows_in_different_offsets(tmp_path):
    stamps = ["2027-03-28T00:30:00Z", "2027-03-28T02:00:00+01:00", "2027-03-28T04:30:00+0200",
              "2027-03-28T01:45:00-05:30"]
    text = "when,t\n" + "".join(f"{s},{i}\n" for i, s in enumerate(stamps))
    table = read_raw_file(write(tmp_path, text), ISO_LAYOUT, "iso")
    # strptime's %z reads 'Z', '+01:00' and '+0200' (Python documentation of strptime)
    expected = as_ns([dt.datetime.strptime(s, "%Y-%m-%dT%H:%M:%S%z") for s in stamps])
    np.testing.assert_array_equal(table.logger_time, expected)
    assert table.time_basis == UTC and table.zone_offset_s is None


def test_iso8601_row_without_offset_is_refused_by_line(tmp_path):
    text = "when,t\n2027-03-28T00:30:00Z,1\n2027-03-28T02:00:00,2\n"
    with pytest.raises(ParseError, match=r"^AB12_x.txt: line 3: time '2027-03-28T02:00:00' does not match"):
        read_raw_file(write(tmp_path, text), ISO_LAYOUT, "iso")


# 4 ---------------------------------------------------------------------------------------------
def test_year_day_of_year_and_clock_columns(tmp_path):
    lay = make(delimiter="\t", time={"columns": ["yr", "doy", "hhmm"], "format": "%Y %j %H%M"},
               variables={"conductivity": {"column": "c", "units": "mS cm-1"}})
    rows = [(2028, 59, "2350"), (2028, 60, "0010"), (2028, 366, "2359")]   # 2028 is a leap year
    text = "yr\tdoy\thhmm\tc\n" + "".join(f"{y}\t{d}\t{c}\t4{i}.5\n" for i, (y, d, c) in enumerate(rows))
    table = read_raw_file(write(tmp_path, text), lay, "doy")
    expected = [dt.datetime(y, 1, 1) + dt.timedelta(days=d - 1, hours=int(c[:2]), minutes=int(c[2:]))
                for y, d, c in rows]
    np.testing.assert_array_equal(table.logger_time, np.array(expected, dtype="datetime64[ns]"))
    assert str(table.logger_time[1])[:10] == "2028-02-29"
    assert table.time_basis == LOGGER_CLOCK


# 5 ---------------------------------------------------------------------------------------------
def test_two_digit_year_and_twelve_hour_clock(tmp_path):
    lay = make(delimiter=",", time={"columns": ["date", "clock"], "format": "%m/%d/%y %I:%M:%S %p"},
               variables={"temperature": {"column": "temp", "units": "degF"}})
    rows = [("12/31/26", "11:59:30 PM"), ("01/01/27", "12:00:00 AM"), ("01/01/27", "12:30:00 PM"),
            ("01/01/27", "1:05:00 pm")]
    text = "date,clock,temp\n" + "".join(f"{d},{c},5{i}\n" for i, (d, c) in enumerate(rows))
    table = read_raw_file(write(tmp_path, text), lay, "ampm")
    # by hand: 12 AM is hour 0, 12 PM is hour 12, 1 PM is hour 13
    expected = [dt.datetime(2026, 12, 31, 23, 59, 30), dt.datetime(2027, 1, 1, 0, 0), dt.datetime(2027, 1, 1, 12, 30),
                dt.datetime(2027, 1, 1, 13, 5)]
    np.testing.assert_array_equal(table.logger_time, np.array(expected, dtype="datetime64[ns]"))


# 6 ---------------------------------------------------------------------------------------------
BERLIN = make(delimiter=",", time={"columns": ["local"], "format": "%Y-%m-%d %H:%M", "zone": "Europe/Berlin"},
              variables={"temperature": {"column": "t", "units": "degC"}})


def test_declared_zone_across_the_autumn_change(tmp_path):
    # 2026-10-25: Central European clocks go back from 03:00 CEST to 02:00 CET (IANA tz database)
    local = ["01:30", "02:00", "02:30", "02:00", "02:30", "03:00"]
    folds = [0, 0, 0, 1, 1, 0]
    text = "local,t\n" + "".join(f"2026-10-25 {c},{i}\n" for i, c in enumerate(local))
    table = read_raw_file(write(tmp_path, text), BERLIN, "berlin")
    zone = ZoneInfo("Europe/Berlin")
    expected = as_ns([dt.datetime(2026, 10, 25, int(c[:2]), int(c[3:]), tzinfo=zone, fold=f)
                      for c, f in zip(local, folds)])
    np.testing.assert_array_equal(table.logger_time, expected)
    assert np.all(np.diff(table.logger_time.astype(np.int64)) == 30 * 60 * 10**9)
    assert table.time_basis == UTC and table.counts["ambiguous_local_times"] == 4


def test_declared_zone_time_in_the_spring_gap_is_refused(tmp_path):
    # 2027-03-28 02:30 does not exist in Europe/Berlin (clocks jump from 02:00 to 03:00)
    text = "local,t\n2027-03-28 01:30,1\n2027-03-28 02:30,2\n"
    with pytest.raises(ParseError, match=r"line 3: time .* does not exist in zone 'Europe/Berlin'"):
        read_raw_file(write(tmp_path, text), BERLIN, "berlin")


def test_fixed_offset_zone(tmp_path):
    lay = BERLIN.model_copy(update={"time": BERLIN.time.model_copy(update={"zone": "+09:30"})})
    table = read_raw_file(write(tmp_path, "local,t\n2026-01-01 05:00,1\n"), lay, "fixed")
    expected = as_ns([dt.datetime(2026, 1, 1, 5, tzinfo=dt.timezone(dt.timedelta(hours=9, minutes=30)))])
    np.testing.assert_array_equal(table.logger_time, expected)
    assert table.zone_offset_s == 9 * 3600 + 1800


# 7 ---------------------------------------------------------------------------------------------
def test_quoted_fields_with_thousands_marks(tmp_path):
    lay = make(delimiter=",", quote='"', thousands=",", header_lines=1,
               time={"columns": ["Stamp"], "format": "%Y-%m-%d %H:%M:%S"},
               variables={"pressure": {"column": "Abs pres, hPa", "units": "hPa"},
                          "temperature": {"column": "Temp", "units": "degC"}})
    text = ('"logger AB12, pier"\n'
            '"Stamp","Abs pres, hPa","Temp","Note"\n'
            '"2026-06-01 00:00:00","1,013.25","14.5","ok"\n'
            '"2026-06-01 00:10:00","2,001.5","14.4","said ""hi"", then left"\n'
            '"2026-06-01 00:20:00","998.0","14.3",""\n'
            '"2026-06-01 00:30:00","12,345,678","14.2","multi, comma, note"\n')
    table = read_raw_file(write(tmp_path, text), lay, "quoted")
    rows = list(csv.reader(io.StringIO(text)))[2:]               # the reference reader: Python's csv
    np.testing.assert_array_equal(table.values["pressure"], [float(r[1].replace(",", "")) for r in rows])
    np.testing.assert_array_equal(table.values["temperature"], [float(r[2]) for r in rows])
    np.testing.assert_array_equal(table.logger_time, np.array([r[0] for r in rows], dtype="datetime64[ns]"))


def test_badly_grouped_thousands_is_not_a_number(tmp_path):
    lay = make(delimiter=";", thousands=".", decimal=",", time={"columns": ["t"], "format": "%Y%m%d%H%M"},
               variables={"pressure": {"column": "p", "units": "Pa"}})
    good = read_raw_file(write(tmp_path, "t;p\n202601010000;101.325,5\n"), lay, "dots")
    assert good.values["pressure"][0] == 101325.5
    with pytest.raises(ParseError, match=r"line 2: pressure value '10.13,5' is not a number"):
        read_raw_file(write(tmp_path, "t;p\n202601010000;10.13,5\n"), lay, "dots")


# 8 ---------------------------------------------------------------------------------------------
def test_whitespace_aligned_columns(tmp_path):
    lay = make(delimiter="whitespace", missing=["-9999"],
               time={"columns": ["DATE", "TIME"], "format": "%Y/%m/%d %H:%M:%S"},
               variables={"ph": {"column": "PH", "units": "1"}, "temperature": {"column": "TEMP", "units": "degC"}})
    text = ("  DATE        TIME        PH     TEMP\n"
            "  2026/07/01  06:00:00    8.01   15.20  \n"
            "  2026/07/01  06:15:00 \t 7.98\t-9999\n"
            "\t2026/07/01  06:30:00    -9999  15.05\n")
    table = read_raw_file(write(tmp_path, text), lay, "aligned")
    np.testing.assert_array_equal(table.values["ph"], [8.01, 7.98, np.nan])
    np.testing.assert_array_equal(table.values["temperature"], [15.20, np.nan, 15.05])
    expected = [dt.datetime(2026, 7, 1, 6, 0), dt.datetime(2026, 7, 1, 6, 15), dt.datetime(2026, 7, 1, 6, 30)]
    np.testing.assert_array_equal(table.logger_time, np.array(expected, dtype="datetime64[ns]"))


# 9 ---------------------------------------------------------------------------------------------
HEADED = make(delimiter=",", header_ends=r"^=+ records =+$",
              serial={"source": "header", "pattern": r"^Serial\s*[:=]\s*(\S+)"},
              header_values={"utc_offset": r"^UTC offset\s*[:=]\s*(\S+)", "interval": r"^Interval\s*[:=]\s*(.+)$",
                             "temp_units": r"^Temperature unit\s*[:=]\s*(\S+)"},
              time={"columns": ["time"], "format": "%d.%m.%Y %H:%M", "zone_from": "utc_offset"},
              variables={"temperature": {"column": "temp", "units": "degC", "units_from": "temp_units"}})


@pytest.mark.parametrize("extra", [[], ["Site note: under the ledge", "Battery= 3.6 V", "Firmware: 2.1"]],
                         ids=["short-header", "long-header"])
def test_header_up_to_a_pattern_with_named_values(tmp_path, extra):
    header = ["Serial: QK-4411", "UTC offset = -03:30", *extra, "Interval: 600 s", "Temperature unit: degC",
              "===== records ====="]
    text = "\n".join(header) + "\ntime,temp\n01.02.2026 21:00,3.5\n01.02.2026 21:10,3.25\n"
    table = read_raw_file(write(tmp_path, text), HEADED, "headed")
    assert table.serial == "QK-4411"
    assert table.header_values == {"utc_offset": "-03:30", "interval": "600 s", "temp_units": "degC"}
    zone = dt.timezone(-dt.timedelta(hours=3, minutes=30))
    expected = as_ns([dt.datetime(2026, 2, 1, 21, 0, tzinfo=zone), dt.datetime(2026, 2, 1, 21, 10, tzinfo=zone)])
    np.testing.assert_array_equal(table.logger_time, expected)
    assert str(table.logger_time[0]) == "2026-02-02T00:30:00.000000000"        # worked by hand
    assert table.time_basis == UTC and table.zone_offset_s == -(3 * 3600 + 1800)


def test_header_unit_that_differs_from_the_layout_is_refused(tmp_path):
    text = ("Serial: QK-4411\nUTC offset = +00:00\nTemperature unit: degF\n== records ==\n"
            "time,temp\n01.02.2026 21:00,38\n")
    with pytest.raises(ParseError, match=r"header says temperature is in 'degF' but layout 'headed' reads it as "
                                         r"'degC'"):
        read_raw_file(write(tmp_path, text), HEADED, "headed")


def test_header_end_not_found_is_refused(tmp_path):
    with pytest.raises(ParseError, match=r"no line matches the header end .*header_ends$"):
        read_raw_file(write(tmp_path, "Serial: QK-1\ntime,temp\n01.02.2026 21:00,3\n"), HEADED, "headed")


# 10 --------------------------------------------------------------------------------------------
NOISY = make(delimiter=",", header_lines=1, skip_lines=[r"^#", r"^EVENT\b"],
             time={"columns": ["time"], "format": "%Y-%m-%dT%H:%M:%S"},
             variables={"probe_reading": {"column": "raw", "units": "count"}})
NOISY_TEXT = ("logger AB12\n"
              "time,raw\n"
              "2026-08-01T00:00:00,100\n"
              "# battery 3.1 V\n"
              "2026-08-01T00:05:00,110\n"
              "EVENT restart, clock kept\n"
              "time,raw\n"
              "2026-08-01T00:10:00,120\n")


def test_comment_event_and_repeated_header_lines_are_skipped_and_listed(tmp_path):
    table = read_raw_file(write(tmp_path, NOISY_TEXT), NOISY, "noisy")
    np.testing.assert_array_equal(table.values["probe_reading"], [100, 110, 120])
    assert table.counts["skipped_lines"] == 3 and table.counts["bad_lines"] == 0
    assert [n for n, _ in table.skipped] == [4, 6, 7]
    assert table.skipped[2][1] == "column names repeated"
    assert "EVENT restart, clock kept" in table.skipped[1][1]


def test_unreadable_record_refuses_the_file_unless_the_layout_skips_bad_lines(tmp_path):
    text = NOISY_TEXT + "2026-08-01T00:15:00,1x0\n2026-08-01T00:20:00,130\n2026-08-01T00:2"
    with pytest.raises(ParseError, match=r"^AB12_x.txt: line 9: probe_reading value '1x0' is not a number"):
        read_raw_file(write(tmp_path, text), NOISY, "noisy")
    lenient = NOISY.model_copy(update={"bad_lines": "skip"})
    table = read_raw_file(write(tmp_path, text + "\n"), lenient, "noisy")
    np.testing.assert_array_equal(table.values["probe_reading"], [100, 110, 120, 130])
    assert table.counts["bad_lines"] == 1 and table.counts["truncated_last_line"] == 1
    assert (9, "probe_reading not a number: 2026-08-01T00:15:00,1x0") in table.skipped


def test_record_with_too_many_fields_is_named_by_line(tmp_path):
    text = NOISY_TEXT.replace("2026-08-01T00:05:00,110", "2026-08-01T00:05:00,110,7")
    with pytest.raises(ParseError, match=r"line 5: 3 fields where 2 were expected"):
        read_raw_file(write(tmp_path, text), NOISY, "noisy")


# 11 --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("newline", ["\r", "\r\n", "\n"], ids=["cr", "crlf", "lf"])
def test_byte_order_mark_line_ends_and_decimal_comma(tmp_path, newline):
    lay = make(delimiter=";", decimal=",", header_lines=1,
               time={"columns": ["Datum", "Zeit"], "format": "%d.%m.%Y %H:%M:%S"},
               variables={"pressure": {"column": "Druck", "units": "dbar"}})
    lines = ["Gerät AB12", "Datum;Zeit;Druck", "05.09.2026;12:00:00;10,125", "05.09.2026;12:00:30;-0,5"]
    data = "\ufeff".encode() + newline.join(lines).encode("utf-8") + newline.encode()
    table = read_raw_file(write(tmp_path, data), lay, "bom")
    np.testing.assert_array_equal(table.values["pressure"], [10.125, -0.5])
    expected = [dt.datetime(2026, 9, 5, 12, 0, 0), dt.datetime(2026, 9, 5, 12, 0, 30)]
    np.testing.assert_array_equal(table.logger_time, np.array(expected, dtype="datetime64[ns]"))


def test_utf16_with_its_byte_order_mark(tmp_path):
    lay = make(delimiter="\t", encoding="utf-16", time={"columns": ["t"], "format": "%Y-%m-%d %H:%M"},
               variables={"temperature": {"column": "v", "units": "K"}})
    data = "t\tv\r\n2026-01-01 00:00\t280.5\r\n".encode("utf-16")          # Python writes the BOM
    assert data[:2] in (b"\xff\xfe", b"\xfe\xff")
    table = read_raw_file(write(tmp_path, data), lay, "wide")
    np.testing.assert_array_equal(table.values["temperature"], [280.5])


@pytest.mark.parametrize("codec", ["utf-16", "utf-16-le", "utf-16-be"], ids=["bom", "le-no-bom", "be-no-bom"])
@pytest.mark.parametrize("layout_encoding", ["utf-8", "latin-1"])
def test_utf16_read_as_another_encoding_is_refused_saying_it_looks_like_utf16(tmp_path, codec, layout_encoding):
    """The bytes are made by Python's own codecs (stdlib), not by qcpipe."""
    lay = make(delimiter="\t", encoding=layout_encoding, time={"columns": ["t"], "format": "%Y-%m-%d %H:%M"},
               variables={"temperature": {"column": "v", "units": "K"}})
    data = "t\tv\r\n2026-01-01 00:00\t280.5\r\n2026-01-01 00:10\t280.6\r\n".encode(codec)
    with pytest.raises(ParseError) as err:
        read_raw_file(write(tmp_path, data), lay, "wide")
    text = str(err.value)
    assert "looks like UTF-16 text" in text and f"reads {layout_encoding}" in text and "\n" not in text


@pytest.mark.parametrize("codec", ["utf-8", "latin-1", "utf-32"])
def test_text_that_is_not_utf16_does_not_look_like_it(codec):
    from qcpipe.ingest.readers import looks_like_utf16

    text = "t,v\n2026-01-01 00:00,12.5 \u00b0C\n" * 20
    assert not looks_like_utf16(text.encode(codec))
    assert looks_like_utf16(text.encode("utf-16-le")) and looks_like_utf16(text.encode("utf-16-be"))


# 12 --------------------------------------------------------------------------------------------
def test_strftime_offset_per_row_with_space(tmp_path):
    lay = make(delimiter="|", time={"columns": ["at"], "format": "%Y-%m-%d %H:%M %z"},
               variables={"temperature": {"column": "t", "units": "degC"}})
    stamps = ["2026-04-01 10:00 +0100", "2026-04-01 10:00 Z", "2026-04-01 10:00 -0700"]
    table = read_raw_file(write(tmp_path, "at|t\n" + "".join(f"{s}|1\n" for s in stamps)), lay, "pipes")
    expected = as_ns([dt.datetime.strptime(s, "%Y-%m-%d %H:%M %z") for s in stamps])
    np.testing.assert_array_equal(table.logger_time, expected)
    assert table.time_basis == UTC
