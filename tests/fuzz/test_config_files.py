"""Damaged configuration: every loader loads the file or raises one ConfigError line naming file and key.

Each case starts from a demo file (register, layouts, rule set, workspace), makes one
change at a random key -- deletes it, gives it a value of another type, a huge or
non-finite number, unicode or empty text, a negative or zero duration, swaps a pair
of limits, or adds an unknown key -- writes it back as TOML and loads it.

Rule for the message: one line; starts with "<file path>: key "; names the table
the change was made in (its first key).  A file that loads has finite numbers,
positive durations and ordered limits, and (register) still ingests a demo file
without raising.
"""

from __future__ import annotations

import datetime as dt
import math
import tempfile
import tomllib
from pathlib import Path

import pydantic
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from qcpipe import pipeline
from qcpipe.config import load_layouts, load_register, load_rules
from qcpipe.config.workspace import load_workspace
from qcpipe.errors import ConfigError

from . import _toml
from ._raw import DEMO, REPO, bases, demo_config, write_raw

FUZZ = settings(deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
FILES = {
    "register": (DEMO / "register.toml", load_register),
    "layouts": (DEMO / "layouts.toml", load_layouts),
    "rules": (REPO / "qc_rules" / "kelpwhistle-cove.toml", load_rules),
    "workspace": (DEMO / "workspace.toml", load_workspace),
}
DURATION_FIELDS = {"half_window", "window", "suspect_after", "fail_after", "max_gap", "settle", "min_state",
                   "clock_error_threshold", "max_offset"}
PAIRS = [("sensor_min", "sensor_max"), ("expected_min", "expected_max"), ("min", "max"), ("start", "end"),
         ("suspect", "fail"), ("suspect_after", "fail_after"), ("air", "water")]
ODD_VALUES = [0, -1, 10**18, 2**63, 10**30, -10**30, 1e308, -1e308, 5e-324, -0.0, math.nan, math.inf, -math.inf,
              "", " ", "ünïcödé ✓", "日本語", "\u202etxet", "a\nb", "\x00", "../x", "-5 min", "0 s", "1e400 h",
              "nan min", "inf s", "-0 s", "10 years", "+01:00", "-14:59", "+99:00", True, [], {}, [1, "a"],
              dt.datetime(1, 1, 1, tzinfo=dt.timezone.utc), dt.datetime(9999, 12, 31, 23, 59),
              dt.datetime(2026, 10, 1, tzinfo=dt.timezone(dt.timedelta(hours=-12))), dt.date(2026, 10, 1)]
VALUES = st.one_of(
    st.sampled_from(ODD_VALUES), st.booleans(), st.integers(), st.floats(),
    st.text(st.characters(codec="utf-8"), max_size=12),
    st.lists(st.integers(-3, 3), max_size=3),
    st.dictionaries(st.sampled_from(["a", "min", "units", ""]), st.integers(), max_size=2),
    st.datetimes(timezones=st.none() | st.just(dt.timezone.utc)),
)
NEW_KEYS = st.sampled_from(["extra", "ünïcödé", "", " ", "new\nline", "a.b", "spike", "id"])


def demo_data(kind: str) -> dict:
    return tomllib.loads(FILES[kind][0].read_text(encoding="utf-8"))


def key_paths(node, prefix=()):
    """Every key path in a parsed TOML document (list items by index)."""
    items = node.items() if isinstance(node, dict) else enumerate(node) if isinstance(node, list) else ()
    for k, v in items:
        yield prefix + (k,)
        yield from key_paths(v, prefix + (k,))


def _get(doc, path):
    for k in path:
        doc = doc[k]
    return doc


@st.composite
def mutated(draw, kind: str):
    """(document, path of the change) with one change made to the demo file of ``kind``."""
    doc = demo_data(kind)
    paths = sorted(key_paths(doc), key=repr)
    path = draw(st.sampled_from(paths))
    parent, key = _get(doc, path[:-1]), path[-1]
    op = draw(st.sampled_from(["delete", "replace", "replace", "scale", "swap", "negate", "add_key"]))
    value = parent[key]
    if op == "delete" and isinstance(parent, dict):
        del parent[key]
    elif op == "scale" and isinstance(value, (int, float)) and not isinstance(value, bool):
        parent[key] = value * draw(st.sampled_from([-1, 0, 1e300, -1e300, 10**20]))
    elif op == "swap" and isinstance(value, dict) and any(a in value and b in value for a, b in PAIRS):
        a, b = next((a, b) for a, b in PAIRS if a in value and b in value)
        value[a], value[b] = value[b], value[a]
    elif op == "negate" and isinstance(value, str) and value[:1].isdigit():
        parent[key] = draw(st.sampled_from(["-", "0", "0.0 ", "1e400 "])) + (value if value[:1] == "-" else value)
    elif op == "add_key" and isinstance(value, dict):
        value[draw(NEW_KEYS)] = draw(VALUES)
        path = path + ("*",)
    else:
        parent[key] = draw(VALUES)
    return doc, path


def check_message(err: ConfigError, path: Path, changed: tuple) -> None:
    msg = str(err)
    assert len(msg.splitlines()) == 1 and "\n" not in msg and "\r" not in msg, msg
    assert msg.startswith(f"{path}: key "), msg
    top = str(changed[0])
    assert top in msg or repr(top) in msg, f"{msg!r} does not name {top!r}"
    assert "; " in msg, msg


def floats_in(model):
    """(field name, value) of every number and nested model in a loaded configuration."""
    if isinstance(model, pydantic.BaseModel):
        for name in type(model).model_fields:
            value = getattr(model, name)
            if isinstance(value, float):
                yield name, value
            yield from ((n, v) for n, v in floats_in(value))
    elif isinstance(model, (list, tuple)):
        for v in model:
            if isinstance(v, float):
                yield "", v
            yield from floats_in(v)
    elif isinstance(model, dict):
        for v in model.values():
            yield from floats_in(v)


def assert_sound(kind, loaded) -> None:
    models = {"register": lambda: [loaded.model], "layouts": lambda: [loaded.model],
              "rules": lambda: list(loaded._effective.values()) + [loaded.immersion, loaded.tide_timing],
              "workspace": lambda: []}[kind]()
    for model in models:
        for name, v in floats_in(model):
            assert math.isfinite(v), f"{name} = {v} loaded"
            if name in DURATION_FIELDS:
                assert v > 0, f"duration {name} = {v} loaded"
    if kind == "register":
        register, layouts, _ = demo_config()
        with tempfile.TemporaryDirectory() as d:
            for base in bases()[::4]:
                pipeline.read_one_file(write_raw(Path(d), base, base.data()), loaded, layouts)   # must not raise


def load_mutated(kind: str, doc: dict, changed: tuple):
    src, loader = FILES[kind]
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / src.name
        path.write_text(_toml.dumps(doc), encoding="utf-8")
        if kind == "workspace":
            path = path.resolve()
        try:
            loaded = loader(path)
        except ConfigError as err:
            check_message(err, path, changed)
            return None
        assert_sound(kind, loaded)
        return loaded


@pytest.mark.parametrize("kind", sorted(FILES))
def test_toml_writer_round_trips_the_demo_files(kind):
    data = demo_data(kind)
    assert tomllib.loads(_toml.dumps(data)) == data


@pytest.mark.parametrize("kind", sorted(FILES))
def test_unchanged_demo_files_load(kind, tmp_path):
    assert load_mutated(kind, demo_data(kind), ("-",)) is not None


@pytest.mark.parametrize("kind, n", [("register", 500), ("layouts", 400), ("rules", 500)])
def test_one_change_loads_soundly_or_gives_a_one_line_error(kind, n):
    @settings(FUZZ, max_examples=n)
    @given(case=mutated(kind))
    def run(case):
        load_mutated(kind, *case)
    run()


@settings(FUZZ, max_examples=150)
@given(case=mutated("workspace"))
def test_workspace_change_loads_or_gives_a_one_line_error(case):
    doc, changed = case
    paths = doc.get("paths")
    if isinstance(paths, dict) and any("\x00" in v for v in paths.values() if isinstance(v, str)):
        return          # see test_workspace_path_with_nul_gives_a_config_error
    load_mutated("workspace", doc, changed)


def test_workspace_path_with_nul_gives_a_config_error(tmp_path):
    doc = demo_data("workspace")
    doc["paths"]["inbox"] = "in\x00box"
    load_mutated("workspace", doc, ("paths", "inbox"))


@pytest.mark.parametrize("where, value, words", [
    (("variable", "temperature", "gross_range", "sensor_max"), math.nan, "finite"),
    (("variable", "temperature", "gross_range", "sensor_min"), -math.inf, "finite"),
    (("variable", "temperature", "spike", "half_window"), "1e400 min", "finite"),
    (("immersion", "min_state"), -600.0, "longer than zero"),
    (("tide_timing", "max_offset"), math.inf, "finite"),
], ids=["nan-limit", "inf-limit", "overflowing-duration", "negative-seconds", "infinite-seconds"])
def test_non_finite_numbers_and_negative_durations_are_rejected(tmp_path, where, value, words):
    doc = demo_data("rules")
    parent = _get(doc, where[:-1])
    parent[where[-1]] = value
    path = tmp_path / "rules.toml"
    path.write_text(_toml.dumps(doc), encoding="utf-8")
    with pytest.raises(ConfigError, match=words) as info:
        load_rules(path)
    assert str(info.value).startswith(f"{path}: key {'.'.join(where)}")


@pytest.mark.parametrize("change, words", [
    ({"clock_check": {"logger_time": dt.datetime(2026, 9, 1), "reference_time":
                      dt.datetime(2026, 9, 1, tzinfo=dt.timezone.utc)}}, "is not after clock_set"),
    ({"clock_check": {"logger_time": dt.datetime(2026, 10, 20, 10), "reference_time":
                      dt.datetime(2026, 9, 20, tzinfo=dt.timezone.utc)}}, "s per day"),
    ({"start": dt.datetime(1, 1, 1, tzinfo=dt.timezone(dt.timedelta(hours=1)))}, "not in the years"),
    ({"end": dt.datetime(9999, 12, 31, tzinfo=dt.timezone.utc)}, "not in the years"),
], ids=["check-before-set", "drift-of-a-month", "year-1", "year-9999"])
def test_deployment_times_that_would_break_the_time_axis_are_rejected(tmp_path, change, words):
    doc = demo_data("register")
    dep = next(d for d in doc["deployment"] if "clock_check" in d)
    dep.update(change)
    path = tmp_path / "register.toml"
    path.write_text(_toml.dumps(doc), encoding="utf-8")
    with pytest.raises(ConfigError, match=words) as info:
        load_register(path)
    assert str(info.value).startswith(f"{path}: key deployment["), str(info.value)


@pytest.mark.parametrize("change, key", [
    ({"encoding": "rot13"}, "encoding"), ({"delimiter": "\n"}, "delimiter"), ({"delimiter": "x"}, "delimiter"),
    ({"delimiter": "."}, "(id"), ({"time": {"columns": ["time"], "format": "%Y-%m-%dT%H:%M:%"}}, "time.format"),
    ({"variables": {"probe_reading": {"column": -1, "units": "count"}}}, "variables.probe_reading.column"),
], ids=["not-a-text-encoding", "newline-delimiter", "letter-delimiter", "decimal-delimiter", "stray-percent",
        "negative-column"])
def test_layouts_the_reader_could_not_use_are_rejected(tmp_path, change, key):
    doc = demo_data("layouts")
    doc["layout"]["wetprobe"].update(change)
    if key == "(id":
        doc["layout"]["wetprobe"]["decimal"] = "."
        key = "layout.wetprobe"
    else:
        key = f"layout.wetprobe.{key}"
    path = tmp_path / "layouts.toml"
    path.write_text(_toml.dumps(doc), encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        load_layouts(path)
    assert str(info.value).startswith(f"{path}: key {key}"), str(info.value)


def test_key_with_a_newline_stays_on_one_line(tmp_path):
    doc = demo_data("rules")
    doc["variable"]["temperature"]["bad\nkey"] = 1
    path = tmp_path / "rules.toml"
    path.write_text(_toml.dumps(doc), encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        load_rules(path)
    assert len(str(info.value).splitlines()) == 1 and "'bad\\nkey'" in str(info.value), str(info.value)
