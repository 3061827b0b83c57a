"""Durations, and raw units converted to the units qcpipe stores (through pint).

Durations are written as text in configuration files ("45 min", "2 h",
"1.5 days", "30 s") and used internally as float seconds.
"""

from __future__ import annotations

import functools
import re
import threading

import numpy as np

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


# --- raw units by a units library ---------------------------------------------------------
#
# Why pint: it is pure Python (nothing to install beside it, so `make demo` needs no system
# library), it converts offset scales (degF, K) correctly, MetPy uses it the same way, and it
# reads both the common spellings a logger export writes ("mS/cm", "uS/cm", "degF", "psi") and,
# after the small rewrite below, UDUNITS exponents ("S m-1", "mS cm-1").  The unit strings
# qcpipe *writes* stay the CF/UDUNITS spellings of ``_STORED``; tests check every conversion
# against UDUNITS-2 itself (cfunits) and against NIST SP 811.

#: the units raw quantities are stored in (CF/UDUNITS spelling), one per physical dimension
_STORED = ("degC", "Pa", "S m-1", "V", "pF", "1")
#: what each stored unit is called in messages
_QUANTITY = {"degC": "a temperature", "Pa": "a pressure", "S m-1": "an electrical conductivity",
             "V": "an electrical potential", "pF": "a capacitance", "1": "a number without dimension",
             "count": "a count"}
#: spellings of a plain count (stored as "count", which CF accepts for a dimensionless count)
_COUNT = {"count", "counts", "cnt"}
#: UDUNITS writes powers as trailing integers ("m-1", "s2"); pint wants "m**-1"
_UDUNITS_POWER = re.compile(r"(?<=[A-Za-z\u00b5_])([-+]?\d+)(?![\d.])")
_REGISTRY_LOCK = threading.Lock()


class UnitError(ValueError):
    """A unit that cannot be read, or that does not fit the quantity it is declared for."""


_REGISTRY = []


def _registry():
    """pint's registry, built once per process on first use (about 0.7 s with the import)."""
    with _REGISTRY_LOCK:
        if not _REGISTRY:
            import pint
            _REGISTRY.append(pint.UnitRegistry())
        return _REGISTRY[0]


def _pint_text(unit: str) -> str:
    return _UDUNITS_POWER.sub(r"**\1", unit.strip().replace("^", "**"))


def _pint_units(stored: str):
    return _registry().parse_units(_pint_text(stored) if stored != "1" else "dimensionless")


@functools.cache
def _linear(raw_unit: str) -> tuple[str, float, float]:
    """``(stored unit, a, b)`` with ``stored = a * raw + b`` for ``raw_unit``; UnitError if unknown."""
    text = raw_unit.strip()
    if not text:
        raise UnitError("empty unit; write one such as 'degC', 'hPa', 'mS/cm' or 'count'")
    if text.lower() in _COUNT:
        return "count", 1.0, 0.0
    if text in ("1", "-"):
        return "1", 1.0, 0.0
    reg = _registry()
    try:
        quantity = reg.Quantity(np.array([0.0, 1.0]), _pint_text(text))
    except Exception:                 # pint raises several kinds (undefined, syntax, type)
        raise UnitError(f"unknown unit {raw_unit!r}; write a UDUNITS or common spelling such as 'degC', "
                        "'degF', 'K', 'hPa', 'mbar', 'kPa', 'psi', 'dbar', 'mS/cm', 'uS/cm', 'S/m', 'mV', "
                        "'V', 'pF' or 'count'") from None
    stored = next((s for s in _STORED if quantity.check(_pint_units(s).dimensionality)), None)
    if stored is None:
        raise UnitError(f"unit {raw_unit!r} ({quantity.dimensionality}) is not a temperature, pressure, "
                        "conductivity, potential, capacitance or plain number; qcpipe stores none of its kind")
    zero, one = quantity.to(_pint_units(stored)).magnitude
    return stored, float(one - zero), float(zero)


def stored_unit(raw_unit: str) -> str:
    """The unit (CF/UDUNITS spelling) qcpipe stores a quantity logged in ``raw_unit`` in.

    Temperatures in degC, pressures in Pa, conductivities in S m-1, potentials in V,
    capacitances in pF, counts as ``count`` and other plain numbers as ``1``.  Raises
    UnitError for a unit the units library does not know.
    """
    return _linear(raw_unit)[0]


def check_raw_unit(raw_unit: str, *, stored: str | None = None) -> str:
    """``raw_unit`` if it can be read (and, given ``stored``, converts to it); else UnitError.

    ``stored`` is the unit the variable is kept in (e.g. ``"Pa"`` for a pressure); the
    message names both quantities when they do not fit.
    """
    have = stored_unit(raw_unit)
    if stored is not None and have != stored and {have, stored} != {"1", "count"}:
        raise UnitError(f"unit {raw_unit!r} is {_QUANTITY.get(have, have)}, but this variable is "
                        f"{_QUANTITY.get(stored, stored)} (stored in {stored!r}); declare a unit of that kind")
    return raw_unit


def same_unit(a: str, b: str) -> bool:
    """True when two unit texts mean the same unit (``"mS/cm"`` and ``"mS cm-1"``, ``"°C"`` and ``"degC"``)."""
    try:
        return a.strip() == b.strip() or _linear(a) == _linear(b)
    except UnitError:
        return False


def to_stored_units(values, raw_unit: str):
    """Convert ``values`` from ``raw_unit`` to the stored unit (see ``stored_unit``).

    Every supported conversion is affine, ``stored = a * raw + b``; ``a`` and ``b`` come
    from the units library (pint) once per unit, so long series cost one multiply-add.
    Definitions: NIST Special Publication 811 (2008), Appendix B.8; UDUNITS-2.
    """
    _, a, b = _linear(raw_unit)
    return values * a + b
