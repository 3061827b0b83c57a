"""Fast parsing of fixed-width numeric time stamps (internal).

Logger files mostly write times with zero-padded numeric fields and fixed
separators ("2027-03-01T06:30:00", "20270301063000", "01/03/2027 06:30").
For such a format, every stamp has the same length and each field sits at a
fixed position, so the whole column is read as a byte matrix and converted
with integer arithmetic, about 10x faster than parsing each string with
``strptime`` semantics (``pandas.to_datetime(..., format=...)``).

The fast path is taken only when it gives the answer the general parser gives:
the format has only ``%Y %m %d %H %M %S`` and ASCII letters, punctuation or
single spaces between them, every stamp has exactly the expected length, every field
position holds digits, every separator matches, and every field is in its
calendar range (month 1-12, day within its month, hour < 24, minute and second
< 60). Otherwise :func:`fixed_width_times` returns None and the caller uses the
general parser, so errors (and their messages) are unchanged.
"""

from __future__ import annotations

import numpy as np

_WIDTH = {"Y": 4, "m": 2, "d": 2, "H": 2, "M": 2, "S": 2}
_LIMIT = {"m": (1, 12), "d": (1, 31), "H": (0, 23), "M": (0, 59), "S": (0, 59)}
_YEARS = (1678, 2261)   # inside the datetime64[ns] range


def _plan(fmt: str):
    """``({code: (start, width)}, [(position, byte)], length)`` of a fixed-width format, else None."""
    fields: dict[str, tuple[int, int]] = {}
    literals: list[tuple[int, int]] = []
    pos = i = 0
    while i < len(fmt):
        ch = fmt[i]
        if ch == "%":
            code = fmt[i + 1] if i + 1 < len(fmt) else ""
            if code not in _WIDTH or code in fields:
                return None
            fields[code] = (pos, _WIDTH[code])
            pos += _WIDTH[code]
            i += 2
            continue
        # strptime lets a space match any run of white space and a letter either case: here a
        # separator matches itself only (anything else declines, which is always safe)
        if not ch.isascii() or ch.isdigit() or (ch.isspace() and ch != " "):
            return None
        if ch == " " and fmt[i + 1:i + 2] == " ":
            return None
        literals.append((pos, ord(ch)))
        pos += 1
        i += 1
    if not {"Y", "m", "d"} <= set(fields):
        return None
    return fields, literals, pos


def fixed_width_times(stamps: np.ndarray, fmt: str) -> np.ndarray | None:
    """datetime64[ns] of each stamp (naive, as written) if the fast path applies, else None.

    Parameters
    ----------
    stamps : numpy.ndarray of str (object or unicode dtype), shape (n,)
    fmt : str
        ``strptime`` format of the stamps.
    """
    plan = _plan(fmt)
    if plan is None or stamps.size == 0:
        return None
    fields, literals, length = plan
    try:
        raw = np.asarray(stamps).astype(f"S{length + 1}")  # one byte more: a longer stamp shows
    except (UnicodeEncodeError, ValueError, TypeError):
        return None
    b = raw.view(np.uint8).reshape(raw.size, length + 1)
    if b[:, length].any():                                  # a stamp longer than the format
        return None
    for pos, byte in literals:
        if not np.array_equal(b[:, pos], np.full(raw.size, byte, dtype=np.uint8)):
            return None
    value = {}
    for code, (start, width) in fields.items():
        digits = b[:, start:start + width].astype(np.int64) - 48   # NUL padding of a short stamp: -48
        if ((digits < 0) | (digits > 9)).any():
            return None
        v = digits[:, 0].copy()
        for j in range(1, width):
            v *= 10
            v += digits[:, j]
        lo, hi = _LIMIT.get(code, _YEARS)
        if v.min() < lo or v.max() > hi:
            return None
        value[code] = v
    month = (value["Y"] - 1970) * 12 + value["m"] - 1
    first = month.astype("datetime64[M]").astype("datetime64[D]")
    days_in_month = ((month + 1).astype("datetime64[M]").astype("datetime64[D]") - first).astype(np.int64)
    if (value["d"] > days_in_month).any():
        return None
    ns = (first.astype(np.int64) + value["d"] - 1) * 86_400
    ns += value.get("H", 0) * 3600 + value.get("M", 0) * 60 + value.get("S", 0)
    ns *= 1_000_000_000
    return ns.view("datetime64[ns]")
