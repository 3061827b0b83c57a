"""The register's clock_offset is applied once: to logger-clock stamps, never to stamps already on UTC.

Drift from a clock check applies either way. Values worked by hand (linear drift,
common practice for logger clocks, no source).
"""

from pathlib import Path

import numpy as np

from qcpipe.config.register import Deployment
from qcpipe.ingest.match import _to_utc, offset_note
from qcpipe.ingest.readers import LOGGER_CLOCK, UTC, RawTable

DEP = Deployment.model_validate({
    "id": "d1", "station": "s1", "instrument": "AB12", "start": "2026-10-01T00:00:00Z",
    "end": "2026-10-20T00:00:00Z", "clock_offset": "+01:00",
    # the display showed 01:00:10 (logger clock, UTC+1) at 00:00:00 UTC: 10 s fast after 10 days
    "clock_check": {"logger_time": "2026-10-11T01:00:10", "reference_time": "2026-10-11T00:00:00Z"},
})


def test_logger_clock_and_utc_stamps_of_one_moment_agree():
    # halfway to the check the clock is 5 s fast: 2026-10-06T00:00:05 UTC shown, true 00:00:00
    on_logger, err1 = _to_utc(np.array(["2026-10-06T01:00:05"], "datetime64[ns]"), DEP, LOGGER_CLOCK)
    on_utc, err2 = _to_utc(np.array(["2026-10-06T00:00:05"], "datetime64[ns]"), DEP, UTC)
    expected = np.array(["2026-10-06T00:00:00"], "datetime64[ns]")
    np.testing.assert_array_equal(on_logger, expected)
    np.testing.assert_array_equal(on_utc, expected)
    assert err1 == err2 == 10.0


def table(basis, offset, zone=""):
    return RawTable(Path("AB12_x.txt"), "x", "AB12", np.array([], "datetime64[ns]"), {}, {}, time_basis=basis,
                    time_zone=zone, zone_offset_s=offset)


def test_offset_note_only_when_the_register_offset_is_dropped_and_differs():
    assert offset_note(table(LOGGER_CLOCK, None), DEP) is None
    assert offset_note(table(UTC, 3600, "+01:00 (layout)"), DEP) is None
    note = offset_note(table(UTC, 0, "epoch_seconds"), DEP)
    assert note.startswith("AB12_x.txt: the file gives its own time zone (epoch_seconds)")
    assert "clock_offset +01:00 of deployment d1 was not applied" in note
    assert offset_note(table(UTC, None, "Europe/Berlin (layout)"), DEP) is not None
    utc_dep = DEP.model_copy(update={"clock_offset": "+00:00"})
    assert offset_note(table(UTC, None, "iso"), utc_dep) is None
