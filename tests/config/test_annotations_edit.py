"""Annotation edits keep the file's comments and layout and never leave an invalid file (checked with tomllib)."""

from __future__ import annotations

import datetime as dt
import tomllib

import pytest

from qcpipe.config.annotations import Annotation, load_annotations
from qcpipe.config.annotations_edit import annotation_key, edit_annotations
from qcpipe.errors import ConfigError

UTC = dt.timezone.utc
HAND = """# review of October (kept)
[[annotation]]   # the weed
station = "kc-low"
variables = ["ph"]
start = 2026-10-01T00:00:00Z
end = 2026-10-02T00:00:00Z
flag = 4
reason = "sonde fouled: found covered in weed"
reviewer = "A. Reviewer"
date = 2026-10-06
"""


def mark(**kw) -> Annotation:
    base = dict(station="kc-mid", variables=["all"], start=dt.datetime(2026, 9, 20, tzinfo=UTC),
                end=dt.datetime(2026, 9, 21, 6, tzinfo=UTC), flag=3, reason="gull on the probe", reviewer="R",
                date=dt.date(2026, 12, 3))
    base.update(kw)
    return Annotation(**base)


def test_add_keeps_comments_and_the_first_entry_byte_for_byte(tmp_path):
    p = tmp_path / "a.toml"
    p.write_text(HAND)
    edit_annotations(p, add=mark())
    text = p.read_text()
    assert text.startswith(HAND)
    items = tomllib.loads(text)["annotation"]
    assert [i["station"] for i in items] == ["kc-low", "kc-mid"]
    assert items[1]["start"] == dt.datetime(2026, 9, 20, tzinfo=UTC) and items[1]["date"] == dt.date(2026, 12, 3)


def test_replace_and_remove_by_key(tmp_path):
    p = tmp_path / "a.toml"
    p.write_text(HAND)
    first = load_annotations(p).items[0]
    edit_annotations(p, add=mark(station="kc-low", flag=1), replace=annotation_key(first))
    assert p.read_text().startswith("# review of October (kept)\n")
    (only,) = load_annotations(p).items
    assert (only.flag, only.reason) == (1, "gull on the probe")
    with pytest.raises(ConfigError, match="no annotation with key"):
        edit_annotations(p, remove=annotation_key(first))
    edit_annotations(p, remove=annotation_key(only))
    assert load_annotations(p).items == [] and p.read_text().startswith("# review of October (kept)\n")


def test_missing_file_is_created_with_a_heading(tmp_path):
    p = tmp_path / "new.toml"
    edit_annotations(p, add=mark())
    assert p.read_text().startswith("# Review annotations") and len(load_annotations(p).items) == 1


def test_crlf_files_keep_crlf(tmp_path):
    p = tmp_path / "a.toml"
    p.write_bytes(HAND.replace("\n", "\r\n").encode())
    edit_annotations(p, add=mark())
    raw = p.read_bytes()
    assert raw.count(b"\n") == raw.count(b"\r\n")


def test_broken_file_is_left_unchanged_with_one_line(tmp_path):
    p = tmp_path / "a.toml"
    p.write_text(HAND + "flag = = 3\n")
    before = p.read_bytes()
    with pytest.raises(ConfigError, match=r"a\.toml: TOML syntax error") as err:
        edit_annotations(p, add=mark())
    assert "\n" not in str(err.value) and p.read_bytes() == before


def test_an_edit_that_would_make_the_file_invalid_is_refused(tmp_path):
    p = tmp_path / "a.toml"
    p.write_text(HAND + '[other]\nkey = 1\n')      # a table the loader does not allow
    before = p.read_bytes()
    with pytest.raises(ConfigError, match="left unchanged"):
        edit_annotations(p, add=mark())
    assert p.read_bytes() == before
