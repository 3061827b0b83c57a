"""Errors in the newer logger-layout keys: one line naming the file, the key, what is wrong and what to do."""

import pytest

from qcpipe.config import load_layouts
from qcpipe.errors import ConfigError

LAYOUTS = """
[layout.keyed]
file_glob = "*.kv"
delimiter = ","
header_ends = "^-- data --$"
header_values = { offset = "^utc offset\\\\s*=\\\\s*(\\\\S+)", unit = "^unit\\\\s*=\\\\s*(\\\\S+)" }
skip_lines = ["^#"]
time = { columns = ["stamp"], format = "%Y-%m-%d %H:%M", zone_from = "offset" }
serial = { source = "filename", pattern = "^(\\\\w+)_" }
variables = { temperature = { column = "t", units = "degC", units_from = "unit" } }
"""


def load(tmp_path, text):
    p = tmp_path / "lay.toml"
    p.write_text(text)
    return load_layouts(p)


def test_valid_layout_loads(tmp_path):
    lay = load(tmp_path, LAYOUTS).layouts["keyed"]
    assert lay.time.zone_from == "offset" and lay.header_values["unit"].startswith("^unit")


@pytest.mark.parametrize("old, new, key, words", [
    ('delimiter = ","', 'delimiter = "spaces"', "layout.keyed.delimiter", "or 'whitespace'"),
    ('zone_from = "offset"', 'zone = "Mars/Olympus"', "layout.keyed.time.zone", "neither a UTC offset nor"),
    ('format = "%Y-%m-%d %H:%M", zone_from = "offset"', 'format = "epoch_seconds", zone = "UTC"', "layout.keyed.time",
     "must not be set"),
    ('zone_from = "offset"', 'zone_from = "tz"', "layout.keyed", "header_values does not define"),
    ('units_from = "unit"', 'units_from = "units"', "layout.keyed", "variables.temperature.units_from names"),
    ('"^unit\\\\s*=\\\\s*(\\\\S+)"', '"^unit\\\\s*=\\\\s*\\\\S+"', "layout.keyed.header_values", "exactly 1 (group)"),
    ('skip_lines = ["^#"]', 'skip_lines = ["(unclosed"]', "layout.keyed.skip_lines", "skip_lines[0] is not a valid"),
    ('header_ends = "^-- data --$"', 'header_ends = "x"\nheader_lines = 3', "layout.keyed", "keep one"),
    ('skip_lines = ["^#"]', 'thousands = ","\nquote = ""', "layout.keyed", "thousands and delimiter are both ','"),
    ('skip_lines = ["^#"]', 'quote = "ab"', "layout.keyed.quote", "one printable mark"),
    ('skip_lines = ["^#"]', 'bad_lines = "ignore"', "layout.keyed.bad_lines", "'reject' or 'skip'"),
], ids=["delimiter-word", "zone", "zone-with-epoch", "zone_from", "units_from", "header-value-group",
        "skip-regex", "two-headers", "thousands-delimiter", "quote", "bad_lines"])
def test_layout_key_errors(tmp_path, old, new, key, words):
    assert old in LAYOUTS
    with pytest.raises(ConfigError) as info:
        load(tmp_path, LAYOUTS.replace(old, new, 1))
    msg = str(info.value)
    assert msg.startswith(f"{tmp_path / 'lay.toml'}: key {key}"), msg
    assert words in msg and "\n" not in msg
    assert msg.rsplit("; ", 1)[1].split(" ")[0] in {"add", "remove", "correct", "set", "use", "keep", "give"}, msg
