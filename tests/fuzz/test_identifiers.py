"""Identifiers that end up in archive paths: unsafe ones are rejected; ArchivePaths stays inside the root.

The rule restated here (not imported from qcpipe.config): a safe identifier is 1-64 characters of
ASCII letters, digits, '-', '_' and '.', starts with a letter or digit, and holds no "..".
"""

from __future__ import annotations

import re
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from qcpipe.archive.store import ArchivePaths
from qcpipe.config import load_layouts, load_register, load_rules
from qcpipe.errors import ConfigError

from . import _toml
from .test_config_files import demo_data

FUZZ = settings(deadline=None, suppress_health_check=[HealthCheck.too_slow])
SAFE = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.\-]{0,63}")
NASTY = ["a/b", "a\\b", "..", "../x", "x/..", "a..b", "/etc/passwd", "C:\\x", "\\\\server\\share", "a\x00b",
         "a\nb", "kc-high\n", "kc-high\r", "\tkc", "x" * 65, "x" * 10_000, " a", "a ", ".hidden", "-x", "",
         "\u202ekc", "ｋｃ", "kc\u0085", "~", "$HOME", "a:b", "CON", "x.nc", "."]
IDS = st.one_of(st.sampled_from(NASTY), st.text(st.characters(codec="utf-8"), max_size=70),
                st.from_regex(SAFE, fullmatch=True))


def is_safe(text: str) -> bool:
    return SAFE.fullmatch(text) is not None and ".." not in text


def _rename(doc: dict, slot: str, new: str) -> tuple[dict, str]:
    """Give the first item of ``slot`` the identifier ``new``, with every reference to it."""
    if slot == "layout name":
        doc["layout"] = {(new if k == "wetprobe" else k): v for k, v in doc["layout"].items()}
        return doc, "layout"
    if slot == "rule set name":
        doc["rule_set"]["name"] = new
        return doc, "rule_set.name"
    if slot == "rules station":
        doc["station"] = {new: {"variable": {"temperature": {"spike": {"suspect": 3.0}}}}}
        return doc, "station"
    table, field, refs = {"site id": ("site", "id", [("station", "site")]),
                          "station id": ("station", "id", [("deployment", "station")]),
                          "instrument serial": ("instrument", "serial", [("deployment", "instrument")]),
                          "deployment id": ("deployment", "id", [])}[slot]
    old = doc[table][0][field]
    doc[table][0][field] = new
    for t, f in refs:
        for item in doc[t]:
            if item[f] == old:
                item[f] = new
    return doc, f"{table}[0]"


SLOTS = {"site id": ("register", load_register), "station id": ("register", load_register),
         "instrument serial": ("register", load_register), "deployment id": ("register", load_register),
         "layout name": ("layouts", load_layouts), "rule set name": ("rules", load_rules),
         "rules station": ("rules", load_rules)}


def check_identifier(slot: str, new: str) -> None:
    kind, loader = SLOTS[slot]
    doc, key = _rename(demo_data(kind), slot, new)
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / f"{kind}.toml"
        path.write_text(_toml.dumps(doc), encoding="utf-8")
        try:
            loader(path)
        except ConfigError as err:
            msg = str(err)
            assert not is_safe(new), f"safe {new!r} rejected: {msg}"
            assert len(msg.splitlines()) == 1 and msg.startswith(f"{path}: key {key}"), msg
            return
        assert is_safe(new), f"unsafe {slot} {new!r} was accepted"


@pytest.mark.parametrize("new", NASTY, ids=repr)
@pytest.mark.parametrize("slot", sorted(SLOTS))
def test_unsafe_identifiers_are_rejected(slot, new):
    check_identifier(slot, new)


@settings(FUZZ, max_examples=400)
@given(slot=st.sampled_from(sorted(SLOTS)), new=IDS)
def test_identifiers_are_accepted_exactly_when_safe(slot, new):
    check_identifier(slot, new)


ANY = st.one_of(st.sampled_from(NASTY + ["../.prefect/", "../../../../", "/" * 12]), st.text(max_size=80))


def _inside(p: Path, root: Path) -> bool:
    p = p.resolve()
    return p == root or root in p.parents


@settings(FUZZ, max_examples=600)
@given(method=st.sampled_from(["raw_copy", "quarantine", "ingested", "dataset", "derived", "conflicts"]),
       a=ANY, b=ANY, c=ANY, d=ANY, version=st.integers(-10**6, 10**6))
def test_archive_paths_never_leave_the_root(method, a, b, c, d, version):
    with tempfile.TemporaryDirectory() as tmp:
        paths = ArchivePaths(tmp)
        args = {"raw_copy": (a, b, c, d), "quarantine": (a, b), "ingested": (a, b), "dataset": (a, b, version),
                "derived": (a, b), "conflicts": (a,)}[method]
        try:
            p = getattr(paths, method)(*args)
        except ValueError:
            return
        assert _inside(p, paths.root), f"{method}{args!r} -> {p}"


def test_quarantine_and_raw_copies_stay_in_their_own_folders():
    with tempfile.TemporaryDirectory() as tmp:
        paths = ArchivePaths(tmp)
        for bad in ("../.prefect/", "../../../cat", "A" * 64, "0" * 63):
            with pytest.raises(ValueError, match="not a SHA-256 digest"):
                paths.quarantine(bad, "x.wet")
            with pytest.raises(ValueError, match="not a SHA-256 digest"):
                paths.raw_copy("kc-high", "d1", bad, "x.wet")
        digest = "0123456789abcdef" * 4
        q = paths.quarantine(digest, "../../x.wet").resolve()
        r = paths.raw_copy("kc-high", "d1", digest, "/etc/x.wet").resolve()
        assert paths.root / "quarantine" in q.parents and paths.root / "raw" / "kc-high" / "d1" in r.parents
