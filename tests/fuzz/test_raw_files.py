"""Damaged raw files: ``read_one_file`` never raises; a file is accepted or rejected with a reason.

The rule for a rejection reason (agreed for qcpipe, see DEVELOPERS.md "Errors"):
one line, ``"<file name>: <what is wrong>; <what to do>"`` -- it starts with the
file name and a colon, and the clause after its last "; " starts with one of the
imperative verbs in ``DO_WORDS``.

An accepted file has UTC times in non-decreasing order inside its deployment
window, no infinite values (finite or NaN), one value per time for every
variable, and counts that add up (records = in deployment + before + after).
"""

from __future__ import annotations

import functools
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from qcpipe import pipeline
from qcpipe.archive.store import ArchivePaths
from qcpipe.ingest.discover import RawFile

from ._raw import bases, damaged, demo_config, harmless, write_raw

DO_WORDS = {"add", "check", "correct", "convert", "create", "fix", "give", "move", "remove", "rename",
            "re-download", "report", "save", "set", "swap", "use", "write"}
FUZZ = settings(deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


def assert_reason_rule(reason: str, name: str) -> None:
    assert len(reason.splitlines()) == 1 and "\n" not in reason and "\r" not in reason, reason
    assert reason.startswith(f"{name}: "), reason
    assert "; " in reason, reason
    todo = reason.rsplit("; ", 1)[1]
    assert todo.split(" ", 1)[0].lower() in DO_WORDS, reason


def assert_accepted_file_is_sound(outcome) -> None:
    register, _, _ = demo_config()
    ing = outcome.ingested
    dep = register.deployment_by_id(ing.deployment)
    start = np.datetime64(dep.start.replace(tzinfo=None) - dep.start.utcoffset(), "ns")
    end = np.datetime64(dep.end.replace(tzinfo=None) - dep.end.utcoffset(), "ns")
    t = ing.time
    assert t.dtype == np.dtype("datetime64[ns]") and t.size >= 1
    assert not np.isnat(t).any()
    assert np.all(np.diff(t.astype(np.int64)) >= 0), "UTC times go backwards"
    assert t.min() >= start and t.max() <= end
    for var, v in ing.values.items():
        assert v.dtype == np.float64 and v.shape == t.shape, var
        assert not np.isinf(v).any(), f"{var} has infinite values"
    c = ing.counts
    assert c["records"] == c["in_deployment"] + c["pre_deployment"] + c["post_recovery"]
    assert c["in_deployment"] == t.size


def check_outcome(raw: RawFile):
    register, layouts, _ = demo_config()
    outcome = pipeline.read_one_file(raw, register, layouts)       # must not raise
    assert (outcome.ingested is None) != (outcome.reason is None)
    if outcome.reason is not None:
        assert_reason_rule(outcome.reason, raw.name)
    else:
        assert_accepted_file_is_sound(outcome)
    return outcome


def records(outcome) -> set:
    ing = outcome.ingested
    return {(int(t), tuple(np.round(ing.values[k][i], 9) for k in sorted(ing.values)))
            for i, t in enumerate(ing.time.astype(np.int64))}


@functools.lru_cache(maxsize=None)
def clean_records(base) -> frozenset:
    with tempfile.TemporaryDirectory() as d:
        return frozenset(records(check_outcome(write_raw(Path(d), base, base.data()))))


@pytest.mark.parametrize("base", bases(), ids=lambda b: b.name)
def test_every_base_file_is_accepted(base, tmp_path):
    outcome = check_outcome(write_raw(tmp_path, base, base.data()))
    assert outcome.reason is None, outcome.reason
    assert outcome.ingested.time.size == len(base.rows)


@settings(FUZZ, max_examples=400)
@given(data=st.data())
def test_line_ends_bom_blank_tail_repeats_and_order_keep_every_record(data):
    base = data.draw(st.sampled_from(bases()), label="base")
    with tempfile.TemporaryDirectory() as d:
        outcome = check_outcome(write_raw(Path(d), base, data.draw(harmless(base), label="file")))
        assert outcome.reason is None, outcome.reason
        assert records(outcome) == clean_records(base)


@settings(FUZZ, max_examples=1500)
@given(data=st.data())
def test_damaged_file_is_accepted_soundly_or_rejected_with_a_reason(data):
    base = data.draw(st.sampled_from(bases()), label="base")
    with tempfile.TemporaryDirectory() as d:
        check_outcome(write_raw(Path(d), base, data.draw(damaged(base), label="file")))


@settings(FUZZ, max_examples=150)
@given(data=st.data(), hour_at=st.integers(1, 39))
def test_daylight_saving_repeat_is_accepted_in_time_order_and_kept(data, hour_at):
    """Clock set back one hour at row ``hour_at``: every record is kept (repeats go to the merge)."""
    import datetime as dt
    base = data.draw(st.sampled_from(bases()), label="base")
    rows = list(base.rows[:hour_at]) + [base.with_time(r, base.time_of(r) - dt.timedelta(hours=1))
                                        for r in base.rows[hour_at:]]
    with tempfile.TemporaryDirectory() as d:
        outcome = check_outcome(write_raw(Path(d), base, base.text(rows=rows).encode(base.encoding)))
        assert outcome.reason is None, outcome.reason
        c = outcome.ingested.counts
        assert c["records"] == len(rows)
        # the rows moved an hour back may leave the window only at its start
        assert c["post_recovery"] == 0


@settings(FUZZ, max_examples=150)
@given(data=st.data(), year=st.sampled_from([2099, 2150, 1969, 1950, 1900]))
def test_timestamps_far_outside_the_deployment_are_trimmed_and_counted(data, year):
    base = data.draw(st.sampled_from(bases()), label="base")
    idx = sorted(data.draw(st.sets(st.integers(0, len(base.rows) - 1), min_size=1, max_size=len(base.rows) - 1)))
    rows = [base.with_time(r, base.time_of(r).replace(year=year)) if i in idx else r
            for i, r in enumerate(base.rows)]
    with tempfile.TemporaryDirectory() as d:
        outcome = check_outcome(write_raw(Path(d), base, base.text(rows=rows).encode(base.encoding)))
        assert outcome.reason is None, outcome.reason
        c = outcome.ingested.counts
        assert c["post_recovery" if year > 2026 else "pre_deployment"] == len(idx)
        assert c["in_deployment"] == len(rows) - len(idx)


@settings(FUZZ, max_examples=150)
@given(data=st.data(), text=st.sampled_from(["1e400", "-1e400", "Inf", "-inf", "+inf", "Infinity", "NaN", "nan"]))
def test_overflowing_and_non_finite_texts_become_missing(data, text):
    base = data.draw(st.sampled_from(bases()), label="base")
    i = data.draw(st.integers(0, len(base.rows) - 1))
    col = data.draw(st.sampled_from(base.value_columns))
    rows = [list(r) for r in base.rows]
    rows[i][col] = text
    with tempfile.TemporaryDirectory() as d:
        outcome = check_outcome(write_raw(Path(d), base, base.text(rows=rows).encode(base.encoding)))
        assert outcome.reason is None, outcome.reason
        assert sum(int(np.isnan(v).sum()) for v in outcome.ingested.values.values()) >= 1


@pytest.mark.parametrize("year", [1677, 1601, 1000, 2262, 2500, 9999])
def test_times_a_timestamp_cannot_hold_are_rejected_not_wrapped_around(tmp_path, year):
    """pandas reads year 1601 fine, but datetime64[ns] wrapped it to 2184 (and 2262 to 1677)."""
    for base in bases():
        rows = list(base.rows)
        rows[5] = base.with_time(rows[5], base.time_of(rows[5]).replace(year=year))
        outcome = check_outcome(write_raw(tmp_path, base, base.text(rows=rows).encode(base.encoding)))
        assert outcome.reason is not None, base.name
        assert f"line {len(base.header) + 6}: time" in outcome.reason and "not in the years" in outcome.reason


def test_largest_finite_value_is_kept(tmp_path):
    base = next(b for b in bases() if b.layout == "wetprobe")
    rows = [list(r) for r in base.rows]
    rows[3][base.value_columns[0]] = "1e308"
    outcome = check_outcome(write_raw(tmp_path, base, base.text(rows=rows).encode(base.encoding)))
    assert outcome.ingested.values["probe_reading"][3] == 1e308


@pytest.mark.parametrize("data", [b"", b"\n\n", b"   \t ", b"\xef\xbb\xbf", b"\xef\xbb\xbf\r\n"],
                         ids=["empty", "newlines", "spaces", "bom-only", "bom-crlf"])
def test_empty_files_are_rejected(tmp_path, data):
    for base in bases():
        outcome = check_outcome(write_raw(tmp_path, base, data))
        assert outcome.reason is not None and "empty" in outcome.reason


@pytest.mark.parametrize("tail", ["", "\n", "\n\n\n", "\r\n"], ids=["no-eol", "eol", "blank-lines", "crlf"])
def test_header_only_files_are_rejected(tmp_path, tail):
    for base in bases():
        outcome = check_outcome(write_raw(tmp_path, base, ("\n".join(base.header) + tail).encode(base.encoding)))
        assert outcome.reason is not None and "no data rows" in outcome.reason


def test_rejection_reason_with_control_characters_in_the_file_name_stays_one_line(tmp_path):
    register, layouts, _ = demo_config()
    path = tmp_path / "odd\nname\x1b.wet"
    path.write_bytes(b"")
    outcome = pipeline.read_one_file(RawFile(path, "0" * 64, 0), register, layouts)
    assert outcome.reason is not None and len(outcome.reason.splitlines()) == 1, outcome.reason


@settings(FUZZ, max_examples=40)
@given(data=st.data())
def test_good_file_in_the_same_download_is_still_accepted(data):
    """One good and one damaged file in an inbox: the plain pipeline functions accept the good one."""
    register, layouts, rules = demo_config()
    good = data.draw(st.sampled_from(bases()), label="good")
    bad = data.draw(st.sampled_from([b for b in bases() if Path(b.name).name != Path(good.name).name]), label="bad")
    bad_bytes = data.draw(st.sampled_from([b"", b"\xff\xfe\x00garbage\n", "\n".join(bad.header).encode()]),
                          label="bad bytes")
    with tempfile.TemporaryDirectory() as d:
        inbox, archive = Path(d) / "inbox", Path(d) / "archive"
        (inbox / "download").mkdir(parents=True)
        write_raw(inbox / "download", good, good.data())
        write_raw(inbox / "download", bad, bad_bytes)
        ctx = pipeline.Context(Path(d) / "workspace.toml", inbox, register, layouts, rules, ArchivePaths(archive))
        new, counts = pipeline.find_new_files(ctx)
        assert counts["seen"] == 2 and len(new) == 2
        outcomes = {o.raw.name: o for o in (pipeline.read_one_file(raw, register, layouts) for raw in new)}
        assert outcomes[Path(good.name).name].ingested is not None, outcomes[Path(good.name).name].reason
        assert outcomes[Path(good.name).name].ingested.time.size == len(good.rows)
        assert_reason_rule(outcomes[Path(bad.name).name].reason, Path(bad.name).name)
