"""Array helpers shared by the checks and the tide maths: argument checks, times as int64 ns,
a sorted series.  Every function raises ValueError naming the calling function, the argument and
what is expected."""

from __future__ import annotations

import math
import numbers

import numpy as np

#: nanoseconds per second and per day: the one definition of the time constants
NS = 1_000_000_000
DAY_NS = 86400 * NS

# Longest duration accepted: durations are held as int64 nanoseconds.
_MAX_SECONDS = 100 * 366 * 86400.0


def as_values(values, *, func: str, name: str = "values") -> np.ndarray:
    """`values` as a float64 array; masked elements become NaN."""
    if isinstance(values, np.ma.MaskedArray):
        values = np.ma.filled(values.astype(np.float64), np.nan)
    arr = np.asarray(values)
    if arr.dtype.kind not in "iufb":
        raise ValueError(
            f"{func}: {name} has dtype {arr.dtype}; expected a numeric array "
            "(use NaN for missing values)"
        )
    return arr.astype(np.float64, copy=False)


def as_1d(arr: np.ndarray, *, func: str, name: str) -> np.ndarray:
    if arr.ndim != 1:
        raise ValueError(
            f"{func}: {name} must be one-dimensional; found shape {arr.shape}"
        )
    return arr


def same_shape(a: np.ndarray, b: np.ndarray, *, func: str, names: tuple[str, str]):
    if a.shape != b.shape:
        raise ValueError(
            f"{func}: {names[0]} and {names[1]} must have the same shape; "
            f"found {a.shape} and {b.shape}"
        )


def real_number(value, *, func: str, name: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ValueError(
            f"{func}: {name} = {value!r}; expected a real number"
        )
    value = float(value)
    if math.isnan(value):
        raise ValueError(f"{func}: {name} = nan; expected a number")
    return value


def positive(value, *, func: str, name: str, allow_zero: bool = False) -> float:
    value = real_number(value, func=func, name=name)
    if not math.isfinite(value) or value < 0 or (value == 0 and not allow_zero):
        bound = ">= 0" if allow_zero else "> 0"
        raise ValueError(f"{func}: {name} = {value!r}; must be a finite number {bound}")
    return value


def count(value, *, func: str, name: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ValueError(f"{func}: {name} = {value!r}; expected an integer >= {minimum}")
    if value < minimum:
        raise ValueError(f"{func}: {name} = {value!r}; must be an integer >= {minimum}")
    return int(value)


def one_of(value, *, func: str, name: str, allowed: tuple[str, ...]) -> str:
    """`value` if it is one of the words `allowed`."""
    if not isinstance(value, str) or value not in allowed:
        raise ValueError(f"{func}: {name} = {value!r}; expected one of {', '.join(map(repr, allowed))}")
    return value


def flag(value, *, func: str, name: str) -> bool:
    """`value` if it is True or False."""
    if not isinstance(value, (bool, np.bool_)):
        raise ValueError(f"{func}: {name} = {value!r}; expected True or False")
    return bool(value)


def duration_ns(seconds, *, func: str, name: str) -> int:
    """A duration given in seconds (> 0) as whole nanoseconds (rounded)."""
    seconds = positive(seconds, func=func, name=name)
    if seconds > _MAX_SECONDS:
        raise ValueError(
            f"{func}: {name} = {seconds!r} s; must be at most {_MAX_SECONDS:.0f} s "
            "(100 years)"
        )
    ns = int(round(seconds * 1e9))
    if ns == 0:
        raise ValueError(f"{func}: {name} = {seconds!r} s; must be at least 1 ns")
    return ns


def ordered(low: float, high: float, *, func: str, names: tuple[str, str], strict: bool):
    if (low >= high) if strict else (low > high):
        rel = "<" if strict else "<="
        raise ValueError(
            f"{func}: {names[0]} = {low!r} and {names[1]} = {high!r}; "
            f"expected {names[0]} {rel} {names[1]} (are the limits swapped?)"
        )


def as_ns(times, *, func: str = "as_ns", name: str = "times") -> np.ndarray:
    """Times as a 1-D int64 array of nanoseconds since 1970-01-01.

    Parameters
    ----------
    times : array_like of numpy.datetime64 (any unit) or of int
        Datetimes, or integer nanoseconds since 1970-01-01 (time zone as given;
        qcpipe uses UTC).

    Returns
    -------
    numpy.ndarray of int64
    """
    arr = np.asarray(times)
    if arr.ndim != 1:
        raise ValueError(f"{func}: {name} must be one-dimensional; found shape {arr.shape}")
    kind = arr.dtype.kind
    if kind == "M":
        nat = np.isnat(arr)
        if nat.any():
            raise ValueError(
                f"{func}: {name}[{int(np.argmax(nat))}] is NaT; every sample needs a time "
                "(drop records without a time first)"
            )
        return arr.astype("datetime64[ns]", copy=False).view(np.int64)
    if kind in "iu":
        if kind == "u" and arr.size and arr.max() > np.iinfo(np.int64).max:
            raise ValueError(f"{func}: {name} holds values beyond the int64 nanosecond range")
        return arr.astype(np.int64, copy=False)
    raise ValueError(
        f"{func}: {name} has dtype {arr.dtype}; expected numpy datetime64 or "
        "int64 nanoseconds since 1970-01-01"
    )


def check_non_decreasing(t: np.ndarray, *, func: str, name: str = "times") -> None:
    """Raise ValueError naming the first index where `t` steps backward."""
    if t.size < 2:
        return
    back = np.less(t[1:], t[:-1])
    if back.any():
        i = int(np.argmax(back)) + 1
        raise ValueError(
            f"{func}: {name} must be non-decreasing; {name}[{i}] = "
            f"{np.datetime64(int(t[i]), 'ns')} is earlier than {name}[{i - 1}] = "
            f"{np.datetime64(int(t[i - 1]), 'ns')}; sort the records by time first"
        )


def series(values, times, *, func: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(x float64, t int64 ns, ok = finite x) for a 1-D series sorted by time."""
    x = as_1d(as_values(values, func=func), func=func, name="values")
    t = as_ns(times, func=func)
    same_shape(x, t, func=func, names=("values", "times"))
    check_non_decreasing(t, func=func)
    return x, t, np.isfinite(x)


#: immersion states of a sample, the one definition: 0 emersed, 1 immersed, 2 unknown
EMERSED, IMMERSED, UNKNOWN = np.int8(0), np.int8(1), np.int8(2)
STATES = (EMERSED, IMMERSED, UNKNOWN)


def as_states(state, *, func: str, n: int | None = None) -> np.ndarray:
    """`state` as a 1-D int8 array holding only immersion states (0, 1, 2); ``n``: its expected length."""
    s = np.asarray(state)
    if s.size == 0 and s.ndim == 1:
        s = s.astype(np.int8)
    elif s.dtype.kind not in "iu":
        raise ValueError(
            f"{func}: state has dtype {s.dtype}; expected integer immersion states "
            "(1 immersed, 0 emersed, 2 unknown)"
        )
    as_1d(s, func=func, name="state")
    if s.size and not (EMERSED <= s.min() and s.max() <= UNKNOWN):   # 0, 1, 2: no gaps in between
        i = int(np.argmax(~np.isin(s, STATES)))
        raise ValueError(
            f"{func}: state[{i}] = {s[i]}; allowed immersion states are "
            "1 immersed, 0 emersed, 2 unknown"
        )
    if n is not None and s.size != n:
        raise ValueError(f"{func}: times and state must have the same shape; found ({n},) and {s.shape}")
    return s.astype(np.int8, copy=False)


def sorted_ns(times, *, func: str, name: str = "times") -> np.ndarray:
    """Times as int64 ns (:func:`as_ns`), checked to be non-decreasing."""
    t = as_ns(times, func=func, name=name)
    check_non_decreasing(t, func=func, name=name)
    return t


def times_and_state(times, state, *, func: str) -> tuple[np.ndarray, np.ndarray]:
    """(int64 ns times, int8 states) of a state series sorted by time, both checked."""
    t = as_ns(times, func=func)
    s = as_states(state, func=func)
    same_shape(s, t, func=func, names=("state", "times"))
    check_non_decreasing(t, func=func)
    return t, s


def joined(pieces: list[np.ndarray]) -> np.ndarray:
    """The arrays of ``pieces`` end to end, without a copy when there is one; the list is emptied, so each
    piece can be freed once copied (big files: the peak is the result plus what is left of the pieces)."""
    out = pieces[0] if len(pieces) == 1 else np.concatenate(pieces)
    pieces.clear()
    return out
