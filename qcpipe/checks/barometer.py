"""Barometer fallback test: water levels computed with the configured constant air pressure."""

from __future__ import annotations

import numpy as np

from .. import arrays as v
from .flags import MISSING, PASS, SUSPECT


def barometer_fallback_flags(values, fell_back) -> np.ndarray:
    """Flag water levels whose air pressure is the configured constant, not the site's barometer.

    Parameters
    ----------
    values : array_like of float, shape (n,)
        The water levels (m); NaN or infinite values are missing.
    fell_back : array_like of bool, shape (n,)
        True where the barometer had no valid value at the sample (missing,
        failed its own QC, a gap longer than the configured one, or outside its
        record) and the configured constant was subtracted instead.

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        3 (suspect) where ``fell_back``, 1 (pass) elsewhere, 9 where the value is
        missing.

    Notes
    -----
    Weather moves air pressure by tens of hectopascals; each hectopascal not
    removed is about 1 cm of false water level in seawater (100 Pa / (rho g)
    with rho about 1025 kg m-3 and g about 9.81 m s-2), so a level on the
    constant is suspect, not failed.  Element-wise, O(n).  Definition: common
    practice, no source.
    """
    func = "barometer_fallback_flags"
    x = v.as_1d(v.as_values(values, func=func), func=func, name="values")
    mask = np.asarray(fell_back)
    if mask.dtype != bool:
        raise ValueError(f"{func}: fell_back has dtype {mask.dtype}; expected a boolean array")
    v.same_shape(x, mask, func=func, names=("values", "fell_back"))
    out = np.where(mask, SUSPECT, PASS).astype(np.int8)
    out[~np.isfinite(x)] = MISSING
    return out
