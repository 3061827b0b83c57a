"""Site harmonic-constants files: round trip, atomic replacement, one-line errors."""

import os
import re

import pytest

from qcpipe.config.constituents import load_constituents, write_constituents
from qcpipe.errors import ConfigError
from qcpipe.tide.harmonics import HarmonicConstant, Inference, TideConstants

def _constants() -> TideConstants:
    return TideConstants(
        site="Kelpwhistle Cove", datum="chart datum", mean_level_m=2.0,
        constituents=(HarmonicConstant("M2", 1.6, 123.0, 0.001, 0.1),
                      HarmonicConstant("K1", 0.1 + 0.2, 1.0 / 3.0)),
        source='fit of 2025 "test" record', latitude_deg=-41.5)


def test_constituents_file_round_trip(tmp_path):
    path = tmp_path / "site.toml"
    write_constituents(path, _constants())
    assert load_constituents(path) == _constants()
    assert [p.name for p in tmp_path.iterdir()] == ["site.toml"]  # no temp file left


def test_constituents_file_is_replaced_atomically(tmp_path, monkeypatch):
    path = tmp_path / "site.toml"
    write_constituents(path, _constants())
    before = path.read_bytes()

    def fail(*args):
        raise OSError("disk full")

    monkeypatch.setattr(os, "replace", fail)
    changed = TideConstants(**{**_constants().__dict__, "mean_level_m": 3.0})
    with pytest.raises(OSError, match="disk full"):
        write_constituents(path, changed)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["site.toml"]


def test_example_file_of_the_brief_loads(tmp_path):
    path = tmp_path / "site.toml"
    path.write_text('[tide]\nsite = "x"\ndatum = "CD"\nmean_level_m = 2.0\nsource = "s"\n'
                    'epoch_note = "Greenwich phase lags, UTC"\n\n[[tide.constituent]]\n'
                    'name = "m2"\namplitude_m = 1.6\nphase_deg = 123.0\n')
    got = load_constituents(path)
    assert got.constituents == (HarmonicConstant("M2", 1.6, 123.0),)
    assert got.mean_level_m == 2.0


_HEAD = '[tide]\nsite = "x"\ndatum = "CD"\nmean_level_m = 2.0\n'
_ONE = '[[tide.constituent]]\nname = "M2"\namplitude_m = 1.0\nphase_deg = 0.0\n'


@pytest.mark.parametrize("body, message", [
    ('[[tide.constituent]]\nname = "M2"\namplitude_m = 1.0\nphase_deg = 0.0\n'
     '[[tide.constituent]]\nname = "MX2"\namplitude_m = 0.1\nphase_deg = 0.0\n',
     r"key tide.constituent\[1\] \(name 'MX2'\).name: unknown constituent 'MX2' "
     r"\(closest: .*M2.*\); use a name listed in qcpipe.tide.constituents.CONSTITUENTS \(got 'MX2'\); "
     r"correct the value$"),
    ('[[tide.constituent]]\nname = "M2"\namplitude_m = -0.5\nphase_deg = 0.0\n',
     r"key tide.constituent\[0\] \(name 'M2'\).amplitude_m: amplitude -0.5 is negative; give the size and "
     r"add 180 to phase_deg \(got -0.5\); correct the value$"),
    ('[[tide.constituent]]\nname = "M2"\namplitude_m = 1.0\nphase_deg = 0.0\n'
     '[[tide.constituent]]\nname = "S2"\namplitude_m = 0.3\nphase_deg = 0.0\n'
     '[[tide.constituent]]\nname = "m2"\namplitude_m = 0.5\nphase_deg = 1.0\n',
     r"key tide.constituent\[2\] \(name 'M2'\): duplicate of tide.constituent\[0\]; keep one entry per "
     r"constituent$"),
    ('[[tide.constituent]]\nname = "M2"\namplitude = 1.0\nphase_deg = 0.0\n',
     r"key tide.constituent\[0\] \(name 'M2'\).amplitude: unknown key; this table takes name, amplitude_m, "
     r"phase_deg, amplitude_se_m, phase_se_deg \(amplitude_m missing\); remove it or check its spelling$"),
    ('',
     r"key tide.constituent: Field required; add this key$"),
    ('resolved = ["M2", "XX1"]\n' + _ONE,
     r"key tide.resolved: unknown constituent 'XX1'; use a name listed in qcpipe.tide.constituents.CONSTITUENTS; "
     r"correct the value$"),
    ('[tide.inferred.K2]\nreference = "S2"\namplitude_ratio = 0.27\n' + _ONE,
     r"key tide.inferred.K2: no \[\[tide.constituent\]\] entry named K2; add its constants or remove this "
     r"table$"),
    ('[tide.inferred.M2]\nreference = "S2"\namplitude_ratio = -1.0\n' + _ONE,
     r"key tide.inferred.M2.amplitude_ratio: .*greater than or equal to 0"),
], ids=["unknown-name", "negative-amplitude", "duplicate", "misspelt-key", "no-constituents",
        "unknown-resolved", "inferred-without-constants", "negative-ratio"])
def test_constituents_file_error_messages(tmp_path, body, message):
    path = tmp_path / "site.toml"
    path.write_text(_HEAD + body)
    with pytest.raises(ConfigError, match="^" + re.escape(f"{path}: ") + message) as info:
        load_constituents(path)
    assert "\n" not in str(info.value)


def _fitted() -> TideConstants:
    return TideConstants(**{**_constants().__dict__,
                            "constituents": _constants().constituents + (HarmonicConstant("P1", 0.099, 1.0 / 3.0),),
                            "record_days": 40.0416, "resolved": ("M2", "K1"),
                            "inferred": {"P1": Inference("K1", 0.12203 / 0.36878, 0.0)},
                            "dropped": {"K2": "S2", "MO3": "2MK3", "SA": "Z0"}})


def test_fit_metadata_round_trip(tmp_path):
    path = tmp_path / "site.toml"
    write_constituents(path, _fitted())
    assert load_constituents(path) == _fitted()
    text = path.read_text()
    assert "record_days = 40.0416" in text and "[tide.inferred.P1]" in text and 'reference = "K1"' in text


def test_file_without_fit_metadata_loads_with_none(tmp_path):
    # the register's published constants carry no fit metadata
    path = tmp_path / "site.toml"
    write_constituents(path, _constants())
    assert "record_days" not in path.read_text() and "inferred" not in path.read_text()
    got = load_constituents(path)
    assert (got.record_days, got.resolved, got.inferred, got.dropped) == (None, None, None, None)

