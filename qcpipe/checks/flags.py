"""Flag values and how flags from several checks combine into one.

The flag scheme is the IOC/UNESCO primary quality flag scheme [IOC2013]_:
1 pass, 2 not evaluated, 3 suspect, 4 fail, 9 missing.

References
----------
.. [IOC2013] See ``docs/references.md``, key IOC2013.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .windows import blocks

PASS = np.int8(1)
NOT_EVALUATED = np.int8(2)
SUSPECT = np.int8(3)
FAIL = np.int8(4)
MISSING = np.int8(9)

#: All flag values, in the order of :data:`FLAG_MEANINGS` (CF ``flag_values``).
FLAG_VALUES = np.array([1, 2, 3, 4, 9], dtype=np.int8)
#: Space-separated meanings of :data:`FLAG_VALUES` (CF ``flag_meanings``).
FLAG_MEANINGS = "pass not_evaluated suspect fail missing"
#: The word a person reads for each flag, keyed by the flag as text ("1".."9"), as flag counts
#: are keyed in the catalog and the run summary; in the order of :data:`FLAG_VALUES`.
FLAG_WORDS = {str(v): m.replace("_", " ") for v, m in zip(FLAG_VALUES.tolist(), FLAG_MEANINGS.split())}
#: The flags as text, in order ("1", "2", "3", "4", "9").
FLAG_KEYS = tuple(FLAG_WORDS)


def grade(d: np.ndarray, suspect, fail, *, at_threshold: bool = False) -> np.ndarray:
    """Flag 1, 3 or 4 per element of `d`: 3 beyond `suspect`, 4 beyond `fail` (internal).

    "Beyond" is ``>`` (or ``>=`` with `at_threshold`); `suspect` <= `fail`, so
    a sample beyond `fail` is also beyond `suspect` and the flag is
    ``1 + 2 * [beyond suspect] + [beyond fail]``. NaN is beyond nothing (1).
    """
    beyond = np.greater_equal if at_threshold else np.greater
    out = beyond(d, suspect).view(np.int8)
    out *= 2
    out += beyond(d, fail).view(np.int8)
    out += PASS
    return out


# Severity rank of each flag value (index = flag value). Only 1, 3 and 4 carry a
# verdict; 2 (not evaluated) and 9 (missing) rank 0 and are ignored when combining.
_RANK = np.zeros(10, dtype=np.int8)
_RANK[PASS], _RANK[SUSPECT], _RANK[FAIL] = 1, 2, 3
# Flag value of each rank (rank 0 = no check evaluated the sample).
_FLAG_OF_RANK = np.array([NOT_EVALUATED, PASS, SUSPECT, FAIL], dtype=np.int8)


def _checked_flags(flag_arrays: Sequence[np.ndarray], shape: tuple[int, ...] | None):
    """The arrays, their shapes and integer dtypes checked; the flag values of one-byte arrays are
    checked as they are ranked (:func:`_worst`), those of wider arrays here."""
    arrays = [np.asarray(a) for a in flag_arrays]
    if shape is None and arrays:
        shape = arrays[0].shape
    for k, a in enumerate(arrays):
        if a.shape != shape:
            raise ValueError(
                f"flag_arrays[{k}] has shape {a.shape}; expected {shape} "
                "(one flag per sample)"
            )
        if a.dtype.kind not in "iu":
            raise ValueError(
                f"flag_arrays[{k}] has dtype {a.dtype}; expected integer flags "
                f"({', '.join(str(v) for v in FLAG_VALUES)})"
            )
        if a.dtype.itemsize > 1:
            _check_flag_values(k, a)
            arrays[k] = a.astype(np.int8)
    return arrays, shape


def _check_flag_values(k: int, a: np.ndarray) -> None:
    bad = ~np.isin(a, FLAG_VALUES)
    if bad.any():
        i = np.unravel_index(np.argmax(bad), a.shape)
        idx = i[0] if len(i) == 1 else i
        raise ValueError(
            f"flag_arrays[{k}] holds {a[i]} at index {idx}; allowed flag values "
            f"are {', '.join(str(v) for v in FLAG_VALUES)}"
        )


# Rank of each byte value of a one-byte flag array read as uint8. A byte that is no flag
# value ranks _NOT_A_FLAG, above every verdict, so one maximum per block finds it.
_NOT_A_FLAG = np.int8(4)
_RANK_OF_BYTE = np.full(256, _NOT_A_FLAG, dtype=np.int8)
_RANK_OF_BYTE[FLAG_VALUES.view(np.uint8)] = _RANK[FLAG_VALUES]


def _worst(arrays: list[np.ndarray], shape: tuple[int, ...]) -> np.ndarray:
    """Flag of the worst verdict per sample of one-byte flag arrays, block by block (the
    temporaries stay in cache); a ValueError names the first array holding a byte that is no flag."""
    size = int(np.prod(shape, dtype=np.int64))
    as_bytes = [np.ravel(a).view(np.uint8) for a in arrays]
    out = np.empty(size, dtype=np.int8)
    for b in blocks(size):
        rank = np.zeros(b.stop - b.start, dtype=np.int8)
        for a in as_bytes:
            np.maximum(rank, _RANK_OF_BYTE.take(a[b]), out=rank)
        if rank.size and rank.max() == _NOT_A_FLAG:
            for k, a in enumerate(arrays):
                _check_flag_values(k, a)
        _FLAG_OF_RANK.take(rank, out=out[b])
    return out.reshape(shape)


def worst_flag(flag_arrays: Sequence[np.ndarray]) -> np.ndarray:
    """Combine flags from several checks sample by sample, keeping the worst verdict.

    Parameters
    ----------
    flag_arrays : sequence of array_like of int
        One flag array per check, all of the same shape, values in
        :data:`FLAG_VALUES`. At least one array.

    Returns
    -------
    numpy.ndarray of int8
        Per sample, the worst of fail (4) > suspect (3) > pass (1) over the checks
        that evaluated the sample; 2 where no check gave 1, 3 or 4.

    Notes
    -----
    Flags 2 (not evaluated) and 9 (missing) from an individual check carry no
    verdict and are ignored. Missing values are not decided here; see
    :func:`aggregate_flags`. The ordering fail > suspect > pass follows the flag
    meanings of [IOC2013]_.
    """
    if len(flag_arrays) == 0:
        raise ValueError(
            "worst_flag: flag_arrays is empty; pass at least one flag array "
            "(use aggregate_flags to get 2 for every sample when no check ran)"
        )
    arrays, shape = _checked_flags(flag_arrays, None)
    return _worst(arrays, shape)


def _missing_mask(values: np.ndarray) -> np.ndarray:
    if isinstance(values, np.ma.MaskedArray):
        mask = np.ma.getmaskarray(values)
        data = values.data
    else:
        mask = np.zeros(values.shape, dtype=bool)
        data = values
    kind = data.dtype.kind
    if kind in "fc":
        mask = mask | np.isnan(data)
    elif kind in "mM":
        mask = mask | np.isnat(data)
    elif kind not in "iub":
        raise ValueError(
            f"aggregate_flags: values has dtype {data.dtype}; expected a numeric "
            "or datetime array (NaN/NaT mark missing samples)"
        )
    return mask


def aggregate_flags(values, flag_arrays: Sequence[np.ndarray]) -> np.ndarray:
    """Aggregate flag of each sample from the flags of all checks.

    Parameters
    ----------
    values : array_like
        The checked values. NaN (or NaT, or a masked element) marks a missing
        sample. Infinite values are not missing.
    flag_arrays : sequence of array_like of int
        One flag array per check, each of the same shape as `values`, values in
        :data:`FLAG_VALUES`. May be empty.

    Returns
    -------
    numpy.ndarray of int8
        9 where the value is missing; elsewhere the worst of
        fail (4) > suspect (3) > pass (1) over the checks whose flag at that
        sample is 1, 3 or 4; 2 where no check evaluated the sample.

    Notes
    -----
    A check's 2 (not evaluated) is ignored. A check's 9 at a sample whose value
    is present (e.g. a windowed check that treats an infinite value as missing)
    is ignored too: only `values` decides what is missing. Flag meanings from
    [IOC2013]_; the combination rule is common practice, no source.
    """
    v = values if isinstance(values, np.ma.MaskedArray) else np.asarray(values)
    arrays, shape = _checked_flags(flag_arrays, v.shape)
    out = _worst(arrays, shape)
    out[_missing_mask(v)] = MISSING
    return out
