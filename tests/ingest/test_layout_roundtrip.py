"""Hypothesis: random layout options and random records, written to a file in that layout, read back.

The file is written here with Python's ``datetime.strftime``/``isoformat`` and
string formatting; the expected times come from ``datetime`` (``strptime`` of
what was written, or the aware datetimes themselves), never from qcpipe.
"""

from __future__ import annotations

import datetime as dt
import tempfile
from pathlib import Path

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from qcpipe.config.layouts import Layout
from qcpipe.ingest.readers import read_raw_file

UTC_TZ = dt.timezone.utc
EPOCH = dt.datetime(1970, 1, 1, tzinfo=UTC_TZ)
STRFTIME = ["%Y-%m-%d %H:%M:%S", "%d.%m.%Y %H:%M", "%m/%d/%y %I:%M:%S %p", "%Y %j %H:%M", "%Y%m%d%H%M%S",
            "%Y-%m-%dT%H:%M:%S"]
OFFSETS = [dt.timedelta(0), dt.timedelta(hours=1), dt.timedelta(hours=-5, minutes=-30), dt.timedelta(hours=12, minutes=45)]


@st.composite
def case(draw):
    delimiter = draw(st.sampled_from([",", ";", "\t", "|", "whitespace"]))
    quote = draw(st.sampled_from(['"', ""]))
    decimal = draw(st.sampled_from([".", ","]).filter(lambda d: d != delimiter))
    thousands = draw(st.sampled_from(["", ",", ".", "'", "_"]).filter(
        lambda t: t != decimal and (t != delimiter or quote)))
    style = draw(st.sampled_from(["strftime", "zone", "epoch_seconds", "epoch_milliseconds", "iso8601"]))
    fmt = draw(st.sampled_from(STRFTIME)) if style in ("strftime", "zone") else style
    if "%y" in fmt:
        lo, hi = dt.datetime(1970, 1, 1), dt.datetime(2068, 12, 31)
    else:
        lo, hi = dt.datetime(1900, 1, 1), dt.datetime(2200, 12, 31)
    n = draw(st.integers(1, 25))
    naive = draw(st.lists(st.datetimes(lo, hi), min_size=n, max_size=n))
    values = draw(st.lists(st.one_of(st.none(), st.floats(-1e7, 1e7, allow_nan=False)), min_size=n, max_size=n))
    return dict(delimiter=delimiter, quote=quote, decimal=decimal, thousands=thousands, style=style, fmt=fmt,
                naive=naive, values=values, column_names=draw(st.booleans()),
                header=draw(st.sampled_from(["none", "lines", "ends"])), n_meta=draw(st.integers(0, 3)),
                comments=draw(st.lists(st.integers(0, n), max_size=3)),
                offsets=draw(st.lists(st.sampled_from(OFFSETS), min_size=n, max_size=n)),
                zone=draw(st.sampled_from(OFFSETS)), newline=draw(st.sampled_from(["\n", "\r\n", "\r"])),
                bom=draw(st.booleans()), epoch_fraction=draw(st.booleans()),
                restart=draw(st.none() | st.integers(1, n)))


def number_text(v: float | None, c: dict) -> str:
    if v is None:
        return "NA"
    text = f"{v:,.3f}" if c["thousands"] else f"{v:.3f}"        # Python's grouping: ',' every 3 digits
    text = text.replace(",", "\0").replace(".", c["decimal"]).replace("\0", c["thousands"])
    return text


def zone_text(off: dt.timedelta) -> str:
    sign = "-" if off < dt.timedelta(0) else "+"
    minutes = abs(int(off.total_seconds())) // 60
    return f"{sign}{minutes // 60:02d}:{minutes % 60:02d}"


def stamp_and_expected(d: dt.datetime, off: dt.timedelta, c: dict):
    """(time fields written, expected naive time on the table's axis)."""
    style = c["style"]
    if style == "epoch_seconds":
        d = d.replace(microsecond=500000 if c["epoch_fraction"] else 0, tzinfo=UTC_TZ)
        seconds = (d - EPOCH) // dt.timedelta(microseconds=1) / 1e6
        return [f"{seconds:.1f}" if c["epoch_fraction"] else f"{int(seconds)}"], d.replace(tzinfo=None)
    if style == "epoch_milliseconds":
        d = d.replace(microsecond=d.microsecond // 1000 * 1000, tzinfo=UTC_TZ)
        return [str((d - EPOCH) // dt.timedelta(milliseconds=1))], d.replace(tzinfo=None)
    if style == "iso8601":
        aware = d.replace(microsecond=0, tzinfo=dt.timezone(off))
        text = aware.isoformat()
        if off == dt.timedelta(0):
            text = text.replace("+00:00", "Z")
        return [text], aware.astimezone(UTC_TZ).replace(tzinfo=None)
    written = d.strftime(c["fmt"])
    back = dt.datetime.strptime(written, c["fmt"])        # the reference reader of strftime text
    if style == "zone":
        back = (back.replace(tzinfo=dt.timezone(c["zone"])).astimezone(UTC_TZ)).replace(tzinfo=None)
    return written.split(" "), back


def write_case(folder: Path, c: dict):
    sep = "  " if c["delimiter"] == "whitespace" else c["delimiter"]
    rows, expected_t, expected_v = [], [], []
    for d, off, v in zip(c["naive"], c["offsets"], c["values"]):
        fields, when = stamp_and_expected(d, off, c)
        num = number_text(v, c)
        if c["quote"] and (c["thousands"] == c["delimiter"] or v is None):
            num = f'"{num}"'
        rows.append(fields + [num])
        expected_t.append(when)
        expected_v.append(np.nan if v is None else float(f"{v:.3f}"))
    n_time = len(rows[0]) - 1
    names = [f"t{i}" for i in range(n_time)] + ["value"]
    lines = [f"meta {i}: {i * 7}" for i in range(c["n_meta"])]
    if c["header"] == "ends":
        lines.append("-- begin --")
    if c["column_names"]:
        lines.append(sep.join(names))
    body = [sep.join(r) for r in rows]
    for k in sorted(c["comments"], reverse=True):
        body.insert(k, "# note from the logger")
    if c["column_names"] and c["restart"] is not None:
        body.insert(c["restart"], sep.join(names))          # the logger restarted and wrote its names again
    text = c["newline"].join(lines + body) + c["newline"]
    data = ("\ufeff" if c["bom"] else "").encode() + text.encode("utf-8")
    path = folder / "AB12_case.txt"
    path.write_bytes(data)
    time = {"columns": names[:n_time] if c["column_names"] else list(range(n_time)), "format": c["fmt"]}
    if c["style"] == "zone":
        time["zone"] = zone_text(c["zone"])
    layout = Layout.model_validate({
        "delimiter": c["delimiter"], "quote": c["quote"], "decimal": c["decimal"], "thousands": c["thousands"],
        "column_names": c["column_names"], "missing": ["NA"], "skip_lines": ["^# note"],
        **({"header_lines": c["n_meta"]} if c["header"] == "lines" else {}),
        **({"header_ends": "^-- begin --$"} if c["header"] == "ends" else {}),
        "time": time, "serial": {"source": "filename", "pattern": r"^([A-Z]+\d+)_"},
        "variables": {"temperature": {"column": "value" if c["column_names"] else n_time, "units": "degC"}},
    })
    if c["header"] == "none" and c["n_meta"]:
        layout = layout.model_copy(update={"header_lines": c["n_meta"]})
    return path, layout, np.array(expected_t, dtype="datetime64[ns]"), np.array(expected_v)


@settings(deadline=None, max_examples=150, suppress_health_check=[HealthCheck.too_slow])
@given(c=case())
def test_any_layout_reads_back_what_was_written(c):
    with tempfile.TemporaryDirectory() as d:
        path, layout, times, values = write_case(Path(d), c)
        table = read_raw_file(path, layout, "random")
    np.testing.assert_array_equal(table.logger_time, times)
    np.testing.assert_array_equal(table.values["temperature"], values)
    restarts = int(c["column_names"] and c["restart"] is not None)
    assert table.counts["skipped_lines"] == len(c["comments"]) + restarts
    assert table.time_basis == ("logger_clock" if c["style"] == "strftime" else "utc")
