"""Several invented logger layouts through ONE nightly run, checked in the archive.

The run is the sequence ``qcpipe process`` runs, without the orchestrator
(``tests.conftest.run_sequence``): what is checked here is reading and archiving.

A small workspace (register, layouts, rule set, inbox) is written here: five
temperature loggers at one station, each exporting in a different style.  The
expected UTC times and values are computed in the test with ``datetime`` and
``zoneinfo``; the archived datasets are opened with xarray.
"""

from __future__ import annotations

import datetime as dt
import json
from zoneinfo import ZoneInfo

import numpy as np
import pytest
import xarray as xr

from tests.conftest import run_sequence

UTC_TZ = dt.timezone.utc
START = dt.datetime(2026, 10, 24, 18, 0, tzinfo=UTC_TZ)
STEP = dt.timedelta(minutes=10)
N = 72                                           # 12 h every 10 min: across the Berlin change of 25 Oct 03:00

REGISTER = """
[register]
name = "layout test shore (invented)"

[[site]]
id = "test-shore"
name = "Test shore (invented)"
vertical_datum = "test datum"

[[station]]
id = "ts-a"
site = "test-shore"
name = "Test station A"
latitude = 10.0
longitude = -30.0
elevation_m = 1.0

{instruments}
"""

LAYOUTS = r'''
[layout.epochs]
file_glob = "*.epo"
delimiter = ","
time = { columns = ["unix"], format = "epoch_seconds" }
serial = { source = "filename", pattern = "^([A-Z]+-\\d+)_" }
[layout.epochs.variables]
temperature = { column = "water_c", units = "degC" }

[layout.berlin]
file_glob = "*.ber"
delimiter = ";"
decimal = ","
header_lines = 1
time = { columns = ["Datum", "Uhrzeit"], format = "%d.%m.%Y %H:%M", zone = "Europe/Berlin" }
serial = { source = "header", pattern = "^Logger (\\S+)" }
[layout.berlin.variables]
temperature = { column = "Temp", units = "degC" }

[layout.keyed]
file_glob = "*.kv"
delimiter = "whitespace"
header_ends = "^#+ data #+$"
skip_lines = ["^!", "^EVENT"]
serial = { source = "header", pattern = "^serial\\s*=\\s*(\\S+)" }
header_values = { offset = "^utc offset\\s*=\\s*(\\S+)", every = "^interval\\s*=\\s*(.+)$", temp_unit = "^unit t\\s*=\\s*(\\S+)" }
time = { columns = ["date", "clock"], format = "%y-%m-%d %I:%M%p", zone_from = "offset" }
[layout.keyed.variables]
temperature = { column = "t", units = "degC", units_from = "temp_unit" }

[layout.quoted]
file_glob = "*.qcsv"
delimiter = ","
quote = '"'
thousands = ","
time = { columns = ["year", "day", "hhmm"], format = "%Y %j %H%M" }
serial = { source = "filename", pattern = "^([A-Z]+-\\d+)_" }
[layout.quoted.variables]
temperature = { column = "temp", units = "degC" }

[layout.isorows]
file_glob = "*.iso"
encoding = "utf-8"
delimiter = "\t"
time = { columns = ["stamp"], format = "iso8601" }
serial = { source = "filename", pattern = "^([A-Z]+-\\d+)_" }
[layout.isorows.variables]
temperature = { column = "T", units = "degC" }

[layout.millis]
file_glob = "*.msd"
delimiter = ";"
column_names = false
missing = ["-999"]
bad_lines = "skip"
time = { columns = [0], format = "epoch_milliseconds" }
serial = { source = "filename", pattern = "^([A-Z]+-\\d+)_" }
[layout.millis.variables]
temperature = { column = 1, units = "degF" }
'''

RULES = """
[rule_set]
name = "layout-test"
[variable.temperature]
units = "degC"
gross_range = { sensor_min = -20.0, sensor_max = 50.0, expected_min = -2.0, expected_max = 35.0 }
"""

# serial, layout, register clock_offset
LOGGERS = [("EP-1", "epochs", "+02:00"),       # the file is UTC: the register's offset must not be applied
           ("BE-2", "berlin", "+00:00"),
           ("KV-3", "keyed", "-03:00"),        # same as the header's offset: no note
           ("QU-4", "quoted", "+01:00"),       # logger clock: the register's offset applies
           ("IS-5", "isorows", "+00:00")]
#: epoch milliseconds, no column names, CR line ends, degF, a missing marker, one unreadable record
#: skipped by the layout and a truncated last line; checked on its own (not every row survives)
MILLIS = ("MS-6", "millis", "+00:00")
MS_MISSING, MS_GARBAGE = 7, 40                 # sample index whose value is -999; row replaced by garbage


def temperature(i: int, k: int) -> float:
    return round(10.0 + k + 0.125 * (i % 8), 3)


def moments():
    return [START + i * STEP for i in range(N)]


def files() -> dict[str, bytes]:
    """The raw files, written with Python's datetime/zoneinfo from the true UTC moments."""
    m = moments()
    out = {}
    out["EP-1_a.epo"] = ("unix,water_c\n" + "".join(
        f"{int(t.timestamp())},{temperature(i, 0)}\n" for i, t in enumerate(m))).encode()
    berlin = ZoneInfo("Europe/Berlin")
    out["BE-2.ber"] = ("Logger BE-2\nDatum;Uhrzeit;Temp\n" + "".join(
        f"{t.astimezone(berlin):%d.%m.%Y;%H:%M};{str(temperature(i, 1)).replace('.', ',')}\n"
        for i, t in enumerate(m))).encode()
    off = dt.timezone(dt.timedelta(hours=-3))
    lines = ["serial = KV-3", "interval = 10 min", "utc offset = -03:00", "unit t = degC", "#### data ####",
             "date      clock     t"]
    for i, t in enumerate(m):
        if i == 30:
            lines += ["! battery 3.2 V", "EVENT restart", "date      clock     t"]
        lines.append(f"{t.astimezone(off):%y-%m-%d   %I:%M%p}   {temperature(i, 2)}")
    out["KV-3.kv"] = ("\r\n".join(lines) + "\r\n").encode()
    logger = dt.timezone(dt.timedelta(hours=1))
    out["QU-4_x.qcsv"] = ("\ufeff" + '"year","day","hhmm","temp","remark"\n' + "".join(
        f'"{t.astimezone(logger):%Y}","{t.astimezone(logger).timetuple().tm_yday}","{t.astimezone(logger):%H%M}",'
        f'"{temperature(i, 3):,.3f}","a, b ""c"""\n' for i, t in enumerate(m))).encode()
    zones = [dt.timezone(dt.timedelta(hours=h)) for h in (0, 5, -7)]
    out["IS-5_y.iso"] = ("stamp\tT\n" + "".join(
        f"{t.astimezone(zones[i % 3]).isoformat()}\t{temperature(i, 4)}\n" for i, t in enumerate(m))).encode()
    rows = []
    for i, t in enumerate(m):
        degf = temperature(i, 5) * 9 / 5 + 32
        rows.append("garbage;;" if i == MS_GARBAGE else
                    f"{int(t.timestamp()) * 1000};{-999 if i == MS_MISSING else f'{degf:.4f}'}")
    out["MS-6_z.msd"] = ("\r".join(rows) + "\r" + f"{int(m[-1].timestamp()) * 1000 + 600000}").encode()
    return out


def expected_milli(k: int) -> list[float]:
    return [round(temperature(i, k) * 1000) / 1000 for i in range(N)]


@pytest.fixture(scope="module")
def layout_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("layouts-e2e")
    inst = "\n".join(f'[[instrument]]\nserial = "{s}"\nkind = "temperature"\nlayout = "{lay}"\n\n'
                     f'[[deployment]]\nid = "dep-{s.lower()}"\nstation = "ts-a"\ninstrument = "{s}"\n'
                     f'start = 2026-10-24T12:00:00Z\nend = 2026-10-26T00:00:00Z\nclock_offset = "{off}"\n'
                     for s, lay, off in LOGGERS + [MILLIS])
    (root / "register.toml").write_text(REGISTER.format(instruments=inst))
    (root / "layouts.toml").write_text(LAYOUTS)
    (root / "rules.toml").write_text(RULES)
    (root / "workspace.toml").write_text('[paths]\nregister = "register.toml"\nlayouts = "layouts.toml"\n'
                                         'rules = "rules.toml"\ninbox = "inbox"\narchive = "archive"\n')
    (root / "inbox").mkdir()
    for name, data in files().items():
        (root / "inbox" / name).write_bytes(data)
    done = run_sequence("process", root / "workspace.toml")
    return root, done


def dataset(root, serial):
    path = next((root / "archive" / "datasets").rglob(f"*dep-{serial.lower()}*.nc"))
    with xr.open_dataset(path) as ds:
        return ds.load()


def test_run_reads_every_layout(layout_run):
    root, done = layout_run
    assert done.returncode == 0, done.stderr
    assert "6 ingested, 0 quarantined" in done.stdout, done.stdout


def test_millisecond_stamps_skipped_record_missing_value_and_truncated_line(layout_run):
    root, _ = layout_run
    ds = dataset(root, MILLIS[0])
    keep = [i for i in range(N) if i != MS_GARBAGE]          # the garbage record skipped, the cut last line dropped
    truth = np.array([moments()[i].replace(tzinfo=None) for i in keep], dtype="datetime64[ns]")
    np.testing.assert_array_equal(ds["time"].values, truth)
    # degF -> degC by the definition of the scales: (F - 32) * 5 / 9, written to 4 decimals in the file
    want = np.array([np.nan if i == MS_MISSING else temperature(i, 5) for i in keep])
    np.testing.assert_allclose(ds["temperature"].values, want, rtol=0, atol=1e-4)
    reading = json.loads(ds.attrs["raw_file_reading"])
    text = json.dumps(reading)
    assert "bad_lines" in text and "truncated_last_line" in text


@pytest.mark.parametrize("k, serial", [(k, s) for k, (s, _, _) in enumerate(LOGGERS)], ids=[s for s, _, _ in LOGGERS])
def test_archived_times_and_values(layout_run, k, serial):
    root, _ = layout_run
    ds = dataset(root, serial)
    truth = np.array([t.replace(tzinfo=None) for t in moments()], dtype="datetime64[ns]")
    np.testing.assert_array_equal(ds["time"].values, truth)
    np.testing.assert_allclose(ds["temperature"].values, expected_milli(k), rtol=0, atol=1e-9)


def test_register_offset_not_applied_twice_and_reported(layout_run):
    root, done = layout_run
    assert "EP-1_a.epo: the file gives its own time zone (epoch_seconds)" in done.stdout
    assert "clock_offset +02:00 of deployment dep-ep-1 was not applied" in done.stdout
    assert "KV-3.kv: the file gives" not in done.stdout and "dep-qu-4 was not applied" not in done.stdout


def test_header_values_and_skipped_lines_in_provenance(layout_run):
    root, _ = layout_run
    reading = json.loads(dataset(root, "KV-3").attrs["raw_file_reading"])["KV-3.kv"]
    assert reading["header_values"] == {"offset": "-03:00", "every": "10 min", "temp_unit": "degC"}
    assert reading["time_basis"] == "utc" and reading["skipped_lines"] == 3
    assert reading["lines_not_read"][0].startswith("line 37: not a record: ! battery")
    quoted = json.loads(dataset(root, "QU-4").attrs["raw_file_reading"])["QU-4_x.qcsv"]
    assert quoted["time_basis"] == "logger_clock"
