"""Durations and simple unit conversions used by configuration and conversion.

Durations are written as text in configuration files ("45 min", "2 h",
"1.5 days", "30 s") and used internally as float seconds.
"""

from __future__ import annotations

import re

_DURATION_UNITS = {
    "s": 1.0, "sec": 1.0, "secs": 1.0, "second": 1.0, "seconds": 1.0,
    "min": 60.0, "mins": 60.0, "minute": 60.0, "minutes": 60.0,
    "h": 3600.0, "hr": 3600.0, "hrs": 3600.0, "hour": 3600.0, "hours": 3600.0,
    "d": 86400.0, "day": 86400.0, "days": 86400.0,
}
_DURATION_RE = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*([A-Za-z]+)\s*$")


def seconds_from_duration(text: str) -> float:
    """Seconds in a duration written as ``"<number> <unit>"``.

    Units: s, min, h, d (and their long forms).  Raises ``ValueError`` with
    the accepted forms when the text cannot be read or is negative.

    >>> seconds_from_duration("45 min")
    2700.0
    """
    if not isinstance(text, str):
        raise ValueError(f"duration must be text such as '45 min', got {text!r}")
    m = _DURATION_RE.match(text)
    if not m or m.group(2).lower() not in _DURATION_UNITS:
        raise ValueError(
            f"cannot read duration {text!r}; write a number and a unit, "
            "e.g. '30 s', '45 min', '2 h', '1.5 d'")
    return float(m.group(1)) * _DURATION_UNITS[m.group(2).lower()]


# Linear conversions to the SI-based units qcpipe stores: value_si = a * value + b.
_TO_STORED = {
    # temperature -> degC
    "degC": ("degC", 1.0, 0.0),
    "degF": ("degC", 5.0 / 9.0, -32.0 * 5.0 / 9.0),
    "K": ("degC", 1.0, -273.15),
    # pressure -> Pa
    "Pa": ("Pa", 1.0, 0.0),
    "hPa": ("Pa", 100.0, 0.0),
    "mbar": ("Pa", 100.0, 0.0),
    "kPa": ("Pa", 1000.0, 0.0),
    "bar": ("Pa", 1.0e5, 0.0),
    "dbar": ("Pa", 1.0e4, 0.0),
    "psi": ("Pa", 6894.757293168, 0.0),  # 1 lbf/in^2 (NIST SP 811, Appendix B.8)
    # electrical conductivity -> S m-1
    "S m-1": ("S m-1", 1.0, 0.0),
    "mS cm-1": ("S m-1", 0.1, 0.0),
    "uS cm-1": ("S m-1", 1.0e-4, 0.0),
    # dimensionless and electrical readings pass through
    "1": ("1", 1.0, 0.0),
    "count": ("count", 1.0, 0.0),
    "V": ("V", 1.0, 0.0),
    "mV": ("V", 1.0e-3, 0.0),
    "pF": ("pF", 1.0, 0.0),
    "nF": ("pF", 1000.0, 0.0),
}

KNOWN_RAW_UNITS = tuple(_TO_STORED)


def stored_unit(raw_unit: str) -> str:
    """The unit qcpipe stores a quantity logged in ``raw_unit`` in."""
    return _TO_STORED[raw_unit][0]


def to_stored_units(values, raw_unit: str):
    """Convert ``values`` from ``raw_unit`` to the stored unit (see ``stored_unit``).

    Linear conversions only: ``stored = a * raw + b``.  Factors from NIST
    Special Publication 811 (2008), Appendix B.8.
    """
    _, a, b = _TO_STORED[raw_unit]
    return values * a + b
