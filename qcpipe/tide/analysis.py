"""Least-squares harmonic analysis of a water-level record, with nodal corrections
and constituent selection by the Rayleigh criterion.

The model fitted to the valid samples is

.. math::

    h(t) = Z_0 + \\sum_i f_i(t) [a_i \\cos(V_i(t) + u_i(t)) + b_i \\sin(V_i(t) + u_i(t))]

so that :math:`H_i = \\sqrt{a_i^2 + b_i^2}` and the Greenwich phase lag
:math:`g_i = \\operatorname{atan2}(b_i, a_i)`, the inverse of
:func:`qcpipe.tide.predict_tide` ([Schureman1958]_ for ``V, f, u``; the
least-squares form as in [Foreman1977]_).  ``V + u`` and ``f`` are those of
:func:`qcpipe.tide.equilibrium_arguments` (per UTC day).

Inference ([Foreman1977]_): a constituent that the record cannot separate from
its reference (the Rayleigh criterion) is carried in the reference's columns at
a fixed amplitude ratio r and phase difference d, so that the model holds
:math:`f_i a_i [\\cos(V_i + u_i) + r (f_j / f_i) \\cos(V_j + u_j - d)] + \\ldots`
and the inferred constants are :math:`H_j = r H_i`, :math:`g_j = g_i + d`.
Default pairs (:data:`EQUILIBRIUM_INFERENCE`): K2 from S2, P1 from K1, N2 from
M2 and Q1 from O1, at the ratio of their equilibrium amplitudes ([CT1971]_) and
no phase difference (equilibrium: the same Greenwich lag in Schureman's
arguments, whose constant phases make every equilibrium coefficient positive).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from .constituents import CONSTITUENTS, PRIORITY, constituent
from .harmonics import HarmonicConstant, Inference, TideConstants, day_blocks, days_from_epoch

_CHUNK = 32_768
_PRIORITY_RANK = {name: i for i, name in enumerate(PRIORITY)}

#: Equilibrium amplitudes of the tide-generating potential, m ([CT1971]_, from memory).
EQUILIBRIUM_AMPLITUDE_M = {"M2": 0.63192, "S2": 0.29400, "N2": 0.12099, "K2": 0.07996,
                           "K1": 0.36878, "O1": 0.26221, "P1": 0.12203, "Q1": 0.05020}

#: Default inference: inferred constituent -> its reference, the equilibrium amplitude
#: ratio (K2/S2 0.272, P1/K1 0.331, N2/M2 0.191, Q1/O1 0.191) and no phase difference.
EQUILIBRIUM_INFERENCE: dict[str, Inference] = {
    name: Inference(ref, EQUILIBRIUM_AMPLITUDE_M[name] / EQUILIBRIUM_AMPLITUDE_M[ref], 0.0)
    for name, ref in (("K2", "S2"), ("P1", "K1"), ("N2", "M2"), ("Q1", "O1"))
}


class RayleighWarning(UserWarning):
    """Constituents asked for by name were left out: the record cannot separate them."""


def select_constituents(names, record_hours: float, *, rayleigh: float = 1.0
                        ) -> tuple[list[str], dict[str, str]]:
    """Keep the constituents that the record can separate (Rayleigh criterion).

    Candidates are taken in the order of :data:`qcpipe.tide.PRIORITY` (largest
    expected first); the mean level (speed 0) is kept first of all.  A candidate
    is kept when, for every constituent already kept,
    ``|sigma_i - sigma_j| * T >= rayleigh * 360`` with speeds in deg/h and ``T``
    the record length in hours; otherwise it is dropped in favour of the one it
    clashes with.

    Parameters
    ----------
    names : sequence of str
        Candidate constituents.
    record_hours : float
        Record length T (last valid sample minus first), hours.
    rayleigh : float, default 1.0
        The Rayleigh factor R (dimensionless); 0 keeps all but exact aliases.

    Returns
    -------
    kept : list of str
        In priority order.
    dropped : dict
        Dropped name -> the kept constituent (or ``"Z0"``) it could not be separated from.
    """
    if not (math.isfinite(record_hours) and record_hours > 0):
        raise ValueError(f"record length {record_hours!r} h must be a positive number")
    if not (math.isfinite(rayleigh) and rayleigh >= 0):
        raise ValueError(f"rayleigh factor {rayleigh!r} must be >= 0 (1.0 is usual)")
    canon = list(dict.fromkeys(constituent(n).name for n in names))
    canon.sort(key=lambda n: _PRIORITY_RANK[n])
    need = rayleigh * 360.0 / record_hours
    kept: list[tuple[str, float]] = [("Z0", 0.0)]
    dropped: dict[str, str] = {}
    for name in canon:
        speed = CONSTITUENTS[name].speed_deg_per_hour
        clash = next((k for k, s in kept if abs(speed - s) < need or abs(speed - s) < 1e-9), None)
        if clash is None:
            kept.append((name, speed))
        else:
            dropped[name] = clash
    return [k for k, _ in kept[1:]], dropped


@dataclass(frozen=True)
class TideFit:
    """Result of :func:`fit_constituents`.

    Standard errors come from the residual variance and the covariance of the
    normal equations, ``cov = s^2 (X^T X)^-1``, which assumes white (uncorrelated)
    residuals; with a red residual (surges, seiches) they are too small.

    ``record_days``: first to last valid sample, days. ``resolved``: the
    constituents fitted on their own (priority order). ``inferred``: name ->
    :class:`qcpipe.tide.harmonics.Inference`, set from a resolved one (their
    constants are in ``constants`` too, standard errors scaled from the
    reference's). ``dropped``: left out, name -> the constituent (or ``"Z0"``)
    the record could not separate them from.
    """

    mean_level_m: float
    mean_level_se_m: float
    constants: tuple[HarmonicConstant, ...]
    residual_std_m: float
    record_days: float
    n_samples: int
    start: np.datetime64
    end: np.datetime64
    latitude_deg: float | None = None
    rayleigh: float = 1.0
    dropped: dict[str, str] = field(default_factory=dict)
    resolved: tuple[str, ...] = ()
    inferred: dict[str, Inference] = field(default_factory=dict)

    @property
    def amplitudes_m(self) -> dict[str, float]:
        """Amplitude (m) by constituent name."""
        return {c.name: c.amplitude_m for c in self.constants}

    @property
    def phases_deg(self) -> dict[str, float]:
        """Greenwich phase lag (degrees, UTC) by constituent name."""
        return {c.name: c.phase_deg for c in self.constants}

    def to_constants(self, *, site: str = "", datum: str = "", source: str | None = None) -> TideConstants:
        """The fit as :class:`qcpipe.tide.TideConstants` (what the predictor and the file use)."""
        if source is None:
            source = (f"qcpipe harmonic fit of {self.n_samples} samples, {self.start} to {self.end} UTC"
                      f" ({self.record_days:.1f} days, Rayleigh factor {self.rayleigh:g})")
        return TideConstants(site=site, datum=datum, mean_level_m=self.mean_level_m,
                             constituents=self.constants, source=source,
                             latitude_deg=self.latitude_deg, record_days=self.record_days,
                             resolved=tuple(self.resolved), inferred=dict(self.inferred),
                             dropped=dict(self.dropped))


def fit_constituents(times, heights, *, latitude: float | None = None, constituents=None,
                     min_record_days: float = 15.0, rayleigh: float = 1.0, infer=True) -> TideFit:
    """Harmonic constants of a water-level record by least squares.

    Parameters
    ----------
    times : array_like of datetime64, shape (n,)
        UTC sample times; any order, irregular spacing and NaT allowed.
    heights : array_like of float, shape (n,)
        Water level, m; NaN marks missing.
    latitude : float, optional
        Site latitude, degrees north.  Recorded in the result; Schureman's nodal
        corrections do not depend on it.
    constituents : sequence of str, optional
        Candidates; default every supported constituent.  Either way the Rayleigh
        criterion selects among them (:func:`select_constituents`); names given
        here and dropped raise a :class:`RayleighWarning`.
    min_record_days : float, default 15
        Shortest record accepted (last valid time minus first), days.
    rayleigh : float, default 1.0
        Rayleigh factor R.
    infer : bool or mapping, default True
        True: infer the pairs of :data:`EQUILIBRIUM_INFERENCE` (K2 from S2, P1
        from K1, N2 from M2, Q1 from O1). A mapping name ->
        :class:`qcpipe.tide.harmonics.Inference` gives other ratios or phase
        differences (e.g. from a nearby long record). False: none. A constituent
        is inferred only when it is a candidate, the Rayleigh criterion drops it
        in favour of exactly its reference, and the reference is resolved.

    Returns
    -------
    TideFit
        With the constituents resolved, inferred and dropped, and the record length.

    Raises
    ------
    ValueError
        Shapes differ, the record is shorter than ``min_record_days``, or the kept
        constituents cannot be separated with the record's gaps.
    """
    days = np.asarray(days_from_epoch(times), dtype=float).reshape(-1)
    y = np.asarray(heights, dtype=float).reshape(-1)
    if days.shape != y.shape:
        raise ValueError(f"times and heights must have the same length; found {days.size} and {y.size}")
    if latitude is not None and not (-90.0 <= float(latitude) <= 90.0):
        raise ValueError(f"latitude {latitude!r} must be within -90 to 90 degrees north")
    ok = np.isfinite(days) & np.isfinite(y)
    days, y = days[ok], y[ok]
    record_days = float(days.max() - days.min()) if days.size else 0.0
    if record_days < min_record_days:
        raise ValueError(
            f"record spans {record_days:.2f} days of valid samples ({days.size} samples); harmonic "
            f"analysis needs at least min_record_days = {min_record_days:g} days; use a longer record")
    explicit = constituents is not None
    candidates = list(constituents) if explicit else list(PRIORITY)
    names, dropped = select_constituents(candidates, record_days * 24.0, rayleigh=rayleigh)
    table = _inference_table(infer)
    inferred = {n: table[n] for n, clash in dropped.items()
                if n in table and table[n].reference == clash and clash in names}
    dropped = {n: c for n, c in dropped.items() if n not in inferred}
    if explicit and dropped:
        warnings.warn(
            f"record of {record_days:.1f} days cannot separate "
            + ", ".join(f"{k} from {v}" for k, v in dropped.items())
            + f" (Rayleigh factor {rayleigh:g}); those were left out", RayleighWarning, stacklevel=2)
    k = len(names)
    npar = 1 + 2 * k
    if days.size <= npar:
        raise ValueError(f"{days.size} valid samples cannot determine {npar} parameters; "
                         "use a longer record or fewer constituents")

    if k:
        b = day_blocks(names + list(inferred), days)
    merge = [(k + i, names.index(inf.reference), inf.amplitude_ratio, math.radians(inf.phase_difference_deg))
             for i, inf in enumerate(inferred.values())]
    normal = np.zeros((npar, npar))
    rhs = np.zeros(npar)
    for start in range(0, days.size, _CHUNK):
        x = _design(b, slice(start, start + _CHUNK), y[start:start + _CHUNK].size, merge) if k else None
        X = np.ones((y[start:start + _CHUNK].size, 1)) if x is None else x
        normal += X.T @ X
        rhs += X.T @ y[start:start + _CHUNK]
    scale = 1.0 / np.sqrt(np.diag(normal))
    scaled = normal * scale[:, None] * scale[None, :]
    cond = np.linalg.cond(scaled)
    if not np.isfinite(cond) or cond > 1e10:
        raise ValueError(
            f"the record's gaps leave the constituents {', '.join(names)} inseparable (condition "
            f"number {cond:.3g}); fit fewer constituents or a more complete record")
    inv = np.linalg.inv(scaled) * scale[:, None] * scale[None, :]
    beta = inv @ rhs

    ss = 0.0
    for start in range(0, days.size, _CHUNK):
        sl = slice(start, start + _CHUNK)
        X = _design(b, sl, y[sl].size, merge) if k else np.ones((y[sl].size, 1))
        r = y[sl] - X @ beta
        ss += float(r @ r)
    dof = days.size - npar
    var = ss / dof
    cov = var * inv

    consts = []
    for j, name in enumerate(names):
        ia, ib = 1 + 2 * j, 2 + 2 * j
        a, bb = beta[ia], beta[ib]
        H = math.hypot(a, bb)
        g = math.degrees(math.atan2(bb, a)) % 360.0
        va, vb, cab = cov[ia, ia], cov[ib, ib], cov[ia, ib]
        if H > 0:
            se_h = math.sqrt(max(a * a * va + bb * bb * vb + 2 * a * bb * cab, 0.0)) / H
            se_g = math.degrees(math.sqrt(max(bb * bb * va + a * a * vb - 2 * a * bb * cab, 0.0)) / H**2)
        else:
            se_h, se_g = math.sqrt(va), 180.0
        consts.append(HarmonicConstant(name, H, g, se_h, min(se_g, 180.0)))
    by_name = {c.name: c for c in consts}
    for name, inf in inferred.items():
        ref = by_name[inf.reference]
        consts.append(HarmonicConstant(name, inf.amplitude_ratio * ref.amplitude_m,
                                       (ref.phase_deg + inf.phase_difference_deg) % 360.0,
                                       inf.amplitude_ratio * ref.amplitude_se_m, ref.phase_se_deg))
    t_ok = np.asarray(times).reshape(-1)[ok].astype("datetime64[s]")
    return TideFit(
        mean_level_m=float(beta[0]), mean_level_se_m=float(math.sqrt(cov[0, 0])),
        constants=tuple(consts), residual_std_m=float(math.sqrt(var)), record_days=record_days,
        n_samples=int(days.size), start=t_ok.min(), end=t_ok.max(),
        latitude_deg=None if latitude is None else float(latitude), rayleigh=float(rayleigh),
        dropped=dropped, resolved=tuple(names), inferred=inferred)


def _inference_table(infer) -> dict[str, Inference]:
    """The inference pairs asked for: True -> EQUILIBRIUM_INFERENCE, False/None -> none."""
    if infer is True:
        return dict(EQUILIBRIUM_INFERENCE)
    if infer is False or infer is None:
        return {}
    table = {}
    for name, inf in dict(infer).items():
        if not isinstance(inf, Inference):
            raise TypeError(f"infer[{name!r}] must be a qcpipe.tide.harmonics.Inference; "
                            f"found {type(inf).__name__}")
        if not (math.isfinite(inf.amplitude_ratio) and inf.amplitude_ratio >= 0
                and math.isfinite(inf.phase_difference_deg)):
            raise ValueError(f"infer[{name!r}]: amplitude ratio {inf.amplitude_ratio!r} must be >= 0 and "
                             f"phase difference {inf.phase_difference_deg!r} deg finite")
        table[constituent(name).name] = Inference(constituent(inf.reference).name,
                                                  float(inf.amplitude_ratio), float(inf.phase_difference_deg))
    return table


def _design(b, sl: slice, m: int, merge=()) -> np.ndarray:
    """Design matrix rows for samples ``sl``: [1, f cos(V+u), f sin(V+u), ...].

    ``b`` holds the resolved constituents then the inferred ones; each ``merge``
    entry (inferred column, reference index, ratio r, phase difference d in
    radians) adds ``r f cos(V + u - d)`` and ``r f sin(V + u - d)`` of the
    inferred constituent to its reference's two columns; the inferred columns are
    not in the result.
    """
    idx = b.index[sl]
    arg = b.dt_hours[sl, None] * b.speed_rad[None, :] + b.vu_rad[idx]
    f = b.f[idx]
    k = arg.shape[1] - len(merge)
    X = np.empty((m, 1 + 2 * k))
    X[:, 0] = 1.0
    X[:, 1::2] = f[:, :k] * np.cos(arg[:, :k])
    X[:, 2::2] = f[:, :k] * np.sin(arg[:, :k])
    for col, ref, ratio, d in merge:
        X[:, 1 + 2 * ref] += ratio * f[:, col] * np.cos(arg[:, col] - d)
        X[:, 2 + 2 * ref] += ratio * f[:, col] * np.sin(arg[:, col] - d)
    return X
