"""The clock notice's advice follows what the station's other loggers say (issue 15 section 3)."""

from qcpipe.report.words import companion_clock_text


def _companion(shares: int) -> dict:
    return {"clock_companion_found": 1, "clock_companion_shares_probe_error": shares,
            "clock_companion_step_lag_s": 0.0 if shares else -3480.0, "clock_companion_steps_matched": 40,
            "clock_companion_offset_s": 3600.0 if shares else 120.0}


def test_station_wide_correction_is_suggested_only_when_a_logger_shares_the_error():
    shared = companion_clock_text("p1", [("t1", _companion(1))])
    alone = companion_clock_text("p1", [("t1", _companion(0))])
    assert "shares the error" in shared and "apply-clock p1 --station --by NAME" in shared
    assert "does not share the error" in alone and "apply-clock p1 --by NAME" in alone and "--station" not in alone
    assert companion_clock_text("p1", []) == "no other logger at the station of p1"
