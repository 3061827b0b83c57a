"""Tidal constituents: astronomical argument coefficients, speeds and nodal corrections.

Each constituent's equilibrium argument is written as Doodson-style integer
coefficients on six mean astronomical arguments plus a constant phase:

.. math::

    V = k_1 \\tau + k_2 s + k_3 h + k_4 p + k_5 N' + k_6 p_1 + c

with :math:`\\tau` the mean lunar time (hour angle of the mean moon, zero at
upper transit, :math:`\\tau = T + h - s` where :math:`T` is the hour angle of the
mean sun), :math:`s, h, p` the mean longitudes of the moon, the sun and the
lunar perigee, :math:`N' = -N` the negative longitude of the moon's ascending
node and :math:`p_1` the longitude of the solar perigee.  The arguments and the
constant phases :math:`c` follow Table 2 of [Schureman1958]_ rewritten in
:math:`\\tau` (Schureman's :math:`T = \\tau + s - h`); the tables here were
written from memory of that table and are checked in the tests against published
speeds and against an independent program.

M1 is Schureman's composite of two lunar terms with arguments about
:math:`\\tau \\pm P` (:math:`P = p - \\xi`, [Schureman1958]_): its equilibrium argument is
:math:`V = T - s + h - 90° = \\tau - 90°` and its nodal angle
:math:`u = \\xi - \\nu + Q` holds the angle Q, which turns once per revolution of
the lunar perigee (8.85 years).  The perigee therefore enters through u only; its
mean rate is added to the speed (14.4966939 deg/h, Schureman's Table 2), not to V.
Counting p in V as well would count the perigee twice (a phase drift of about 41
degrees a year).

Nodal corrections (the factor :math:`f` and the angle :math:`u`) use the
formulas of [Schureman1958]_ in the lunar orbit's inclination to the equator
:math:`I` and the angles :math:`\\nu, \\xi, \\nu', 2\\nu''`.  Shallow-water and
compound constituents take the products of their parents' factors and the sums of
their parents' angles (``f = prod f_k^|n_k|``, ``u = sum n_k u_k``), as in
[Schureman1958]_ and [Foreman1977]_.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Rates of the mean astronomical arguments in degrees per mean solar hour: the
# linear coefficients (degrees per Julian century of 36525 days) of the
# polynomials in qcpipe.tide.harmonics, from memory of [Schureman1958] Table 1,
# divided by 876600 hours.  T, the hour angle of the mean sun, turns 15 deg/h.
_HOURS_PER_CENTURY = 36525.0 * 24.0
RATE_S = 481267.8831 / _HOURS_PER_CENTURY
RATE_H = 36000.768925 / _HOURS_PER_CENTURY
RATE_P = 4069.034033 / _HOURS_PER_CENTURY
RATE_N = -1934.142008 / _HOURS_PER_CENTURY
RATE_P1 = 1.719175 / _HOURS_PER_CENTURY
RATE_T = 15.0
RATE_TAU = RATE_T + RATE_H - RATE_S

#: degrees per hour of (tau, s, h, p, N' = -N, p1)
ARGUMENT_RATES = np.array([RATE_TAU, RATE_S, RATE_H, RATE_P, -RATE_N, RATE_P1])


@dataclass(frozen=True)
class Constituent:
    """One tidal constituent.

    Attributes
    ----------
    name : str
        Upper-case name, e.g. ``"M2"``, ``"2MK3"``, ``"LAM2"``.
    doodson : tuple of 6 int
        Coefficients of (tau, s, h, p, N', p1) in the equilibrium argument.
    phase_deg : float
        Constant part of the equilibrium argument, degrees.
    nodal : tuple of (str, int)
        Nodal formulas and their multiplicities: ``(("M2", 2),)`` for M4,
        ``(("M2", -1),)`` for MSF (= S2 - M2); empty for purely solar terms.
    description : str
        What the constituent is.
    u_rate : tuple of 6 int
        Coefficients of (tau, s, h, p, N', p1) in the mean rate of the nodal
        angle u: zero except for M1, whose u turns with the perigee, (0, 0, 0,
        1, 0, 0).  The speed is the rate of V plus this rate.
    """

    name: str
    doodson: tuple[int, int, int, int, int, int]
    phase_deg: float
    nodal: tuple[tuple[str, int], ...]
    description: str = ""
    u_rate: tuple[int, int, int, int, int, int] = (0, 0, 0, 0, 0, 0)

    @property
    def speed_deg_per_hour(self) -> float:
        """Angular speed in degrees per mean solar hour: (V's coefficients + u's mean
        rate coefficients) x the rates of the arguments."""
        return float(np.dot(np.add(self.doodson, self.u_rate), ARGUMENT_RATES))

    @property
    def species(self) -> int:
        """Number of cycles per lunar day (the coefficient of tau)."""
        return self.doodson[0]


def _c(name, doodson, phase, nodal, description, u_rate=(0, 0, 0, 0, 0, 0)):
    return Constituent(name, tuple(doodson), float(phase), tuple(nodal), description, tuple(u_rate))


def _compound(name, parts, description):
    """A compound constituent: the sum of ``n * parent`` over ``parts``."""
    doodson = np.zeros(6, dtype=int)
    u_rate = np.zeros(6, dtype=int)
    phase = 0.0
    nodal: dict[str, int] = {}
    for parent_name, n in parts:
        parent = _BASE[parent_name]
        doodson += n * np.array(parent.doodson)
        u_rate += n * np.array(parent.u_rate)
        phase += n * parent.phase_deg
        for key, m in parent.nodal:
            nodal[key] = nodal.get(key, 0) + n * m
    nodal_t = tuple((k, m) for k, m in nodal.items() if m != 0)
    return Constituent(name, tuple(int(x) for x in doodson), float(np.mod(phase, 360.0)),
                       nodal_t, description, tuple(int(x) for x in u_rate))


# Astronomical constituents.  V from [Schureman1958] Table 2 (from memory),
# rewritten with T = tau + s - h; nodal formula names refer to _nodal_formulas.
_BASE: dict[str, Constituent] = {c.name: c for c in [
    # long period
    _c("SA", (0, 0, 1, 0, 0, 0), 0.0, (), "solar annual"),
    _c("SSA", (0, 0, 2, 0, 0, 0), 0.0, (), "solar semiannual"),
    _c("MSM", (0, 1, -2, 1, 0, 0), 0.0, (("MM", 1),), "lunar monthly (evectional)"),
    _c("MM", (0, 1, 0, -1, 0, 0), 0.0, (("MM", 1),), "lunar monthly"),
    _c("MSF", (0, 2, -2, 0, 0, 0), 0.0, (("M2", -1),), "lunisolar synodic fortnightly (S2 - M2)"),
    _c("MF", (0, 2, 0, 0, 0, 0), 0.0, (("MF", 1),), "lunisolar fortnightly"),
    # diurnal
    _c("2Q1", (1, -3, 0, 2, 0, 0), 90.0, (("O1", 1),), "lunar elliptic, second order"),
    _c("SIG1", (1, -3, 2, 0, 0, 0), 90.0, (("O1", 1),), "lunar variational"),
    _c("Q1", (1, -2, 0, 1, 0, 0), 90.0, (("O1", 1),), "larger lunar elliptic diurnal"),
    _c("RHO1", (1, -2, 2, -1, 0, 0), 90.0, (("O1", 1),), "larger lunar evectional diurnal"),
    _c("O1", (1, -1, 0, 0, 0, 0), 90.0, (("O1", 1),), "principal lunar diurnal"),
    _c("M1", (1, 0, 0, 0, 0, 0), -90.0, (("M1", 1),),
       "smaller lunar elliptic diurnal (Schureman's composite M1; p enters through u = xi - nu + Q)",
       u_rate=(0, 0, 0, 1, 0, 0)),
    _c("PI1", (1, 1, -3, 0, 0, 1), 90.0, (), "solar elliptic diurnal"),
    _c("P1", (1, 1, -2, 0, 0, 0), 90.0, (), "principal solar diurnal"),
    _c("S1", (1, 1, -1, 0, 0, 0), 0.0, (), "solar diurnal (mostly radiational)"),
    _c("K1", (1, 1, 0, 0, 0, 0), -90.0, (("K1", 1),), "lunisolar diurnal"),
    _c("PSI1", (1, 1, 1, 0, 0, -1), -90.0, (), "solar elliptic diurnal"),
    _c("PHI1", (1, 1, 2, 0, 0, 0), -90.0, (), "solar declinational diurnal"),
    _c("THE1", (1, 2, -2, 1, 0, 0), -90.0, (("J1", 1),), "lunar evectional diurnal"),
    _c("J1", (1, 2, 0, -1, 0, 0), -90.0, (("J1", 1),), "smaller lunar elliptic diurnal"),
    _c("OO1", (1, 3, 0, 0, 0, 0), -90.0, (("OO1", 1),), "lunar diurnal, second order"),
    # semidiurnal
    _c("2N2", (2, -2, 0, 2, 0, 0), 0.0, (("M2", 1),), "lunar elliptic semidiurnal, second order"),
    _c("MU2", (2, -2, 2, 0, 0, 0), 0.0, (("M2", 1),), "variational"),
    _c("N2", (2, -1, 0, 1, 0, 0), 0.0, (("M2", 1),), "larger lunar elliptic semidiurnal"),
    _c("NU2", (2, -1, 2, -1, 0, 0), 0.0, (("M2", 1),), "larger lunar evectional"),
    _c("M2", (2, 0, 0, 0, 0, 0), 0.0, (("M2", 1),), "principal lunar semidiurnal"),
    _c("LAM2", (2, 1, -2, 1, 0, 0), 180.0, (("M2", 1),), "smaller lunar evectional"),
    _c("L2", (2, 1, 0, -1, 0, 0), 180.0, (("L2", 1),), "smaller lunar elliptic semidiurnal"),
    _c("T2", (2, 2, -3, 0, 0, 1), 0.0, (), "larger solar elliptic"),
    _c("S2", (2, 2, -2, 0, 0, 0), 0.0, (), "principal solar semidiurnal"),
    _c("R2", (2, 2, -1, 0, 0, -1), 180.0, (), "smaller solar elliptic"),
    _c("K2", (2, 2, 0, 0, 0, 0), 0.0, (("K2", 1),), "lunisolar semidiurnal"),
    # terdiurnal
    _c("M3", (3, 0, 0, 0, 0, 0), 0.0, (("M3", 1),), "lunar terdiurnal"),
]}

# Compound (shallow-water) constituents: sums of astronomical ones.
_COMPOUND = [
    _compound("MKS2", (("M2", 1), ("K2", 1), ("S2", -1)), "M2 + K2 - S2"),
    _compound("2SM2", (("S2", 2), ("M2", -1)), "2 S2 - M2"),
    _compound("SO1", (("S2", 1), ("O1", -1)), "S2 - O1"),
    _compound("2MK3", (("M2", 2), ("K1", -1)), "2 M2 - K1"),
    _compound("MO3", (("M2", 1), ("O1", 1)), "M2 + O1"),
    _compound("MK3", (("M2", 1), ("K1", 1)), "M2 + K1"),
    _compound("SO3", (("S2", 1), ("O1", 1)), "S2 + O1"),
    _compound("SK3", (("S2", 1), ("K1", 1)), "S2 + K1"),
    _compound("MN4", (("M2", 1), ("N2", 1)), "M2 + N2"),
    _compound("M4", (("M2", 2),), "2 M2"),
    _compound("SN4", (("S2", 1), ("N2", 1)), "S2 + N2"),
    _compound("MS4", (("M2", 1), ("S2", 1)), "M2 + S2"),
    _compound("MK4", (("M2", 1), ("K2", 1)), "M2 + K2"),
    _compound("S4", (("S2", 2),), "2 S2"),
    _compound("SK4", (("S2", 1), ("K2", 1)), "S2 + K2"),
    _compound("2MN6", (("M2", 2), ("N2", 1)), "2 M2 + N2"),
    _compound("M6", (("M2", 3),), "3 M2"),
    _compound("2MS6", (("M2", 2), ("S2", 1)), "2 M2 + S2"),
    _compound("S6", (("S2", 3),), "3 S2"),
    _compound("M8", (("M2", 4),), "4 M2"),
]

#: every supported constituent, by name, in order of speed
CONSTITUENTS: dict[str, Constituent] = {
    c.name: c for c in sorted([*_BASE.values(), *_COMPOUND], key=lambda c: c.speed_deg_per_hour)
}

#: Order in which the Rayleigh criterion keeps constituents when two cannot be
#: separated: roughly the size of the constituent in the equilibrium tide and at
#: typical shore sites, shallow-water terms after the astronomical ones of their
#: band.  Common practice, no source.
PRIORITY: tuple[str, ...] = (
    "M2", "K1", "S2", "O1", "N2", "P1", "K2", "Q1",
    "SA", "SSA", "M4", "MS4", "MN4", "MF", "MM", "MSF",
    "NU2", "MU2", "2N2", "L2", "T2", "J1", "M1", "OO1", "LAM2", "RHO1", "2Q1",
    "MK3", "2MK3", "M3", "M6", "S4", "MK4", "SN4", "2MS6", "2MN6", "M8", "S6",
    "MSM", "MKS2", "2SM2", "SIG1", "PI1", "PHI1", "PSI1", "THE1", "S1", "SO1",
    "MO3", "SO3", "SK3", "SK4", "R2",
)
assert set(PRIORITY) == set(CONSTITUENTS), set(PRIORITY) ^ set(CONSTITUENTS)


def constituent(name: str) -> Constituent:
    """Look up a constituent by name (case-insensitive); KeyError names close matches."""
    key = str(name).strip().upper()
    try:
        return CONSTITUENTS[key]
    except KeyError:
        import difflib

        close = difflib.get_close_matches(key, list(CONSTITUENTS), n=3)
        hint = f"; did you mean {', '.join(close)}?" if close else ""
        raise KeyError(f"unknown tidal constituent {name!r}{hint} "
                       f"(supported: {', '.join(CONSTITUENTS)})") from None


def _nodal_formulas(N_deg: np.ndarray, p_deg: np.ndarray) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Schureman's nodal factor f and angle u (degrees) for each basic formula.

    Formula numbers are those of [Schureman1958] (from memory): f from formulas
    73-78, 149, 215 (L2, via 1/Ra), 206-207 (M1, via 1/Qa), 227 (K1) and 235 (K2);
    u from Table 2.  I, nu, xi from Schureman's equations in N with the
    obliquity 23.452 deg and the lunar orbit's inclination 5.145 deg
    (constants 0.91370, 0.03569, 1.01883, 0.64412 as printed there).
    """
    N = np.deg2rad(np.mod(np.asarray(N_deg, dtype=float) + 180.0, 360.0) - 180.0)
    p = np.deg2rad(np.asarray(p_deg, dtype=float))
    cos_i = 0.91370 - 0.03569 * np.cos(N)
    I = np.arccos(cos_i)
    a = 2.0 * np.arctan(1.01883 * np.tan(N / 2.0))     # N - xi + nu
    b = 2.0 * np.arctan(0.64412 * np.tan(N / 2.0))     # N - xi - nu
    nu = (a - b) / 2.0
    xi = N - (a + b) / 2.0
    sin_i, sin_2i = np.sin(I), np.sin(2.0 * I)
    nu1 = np.arctan2(sin_2i * np.sin(nu), sin_2i * np.cos(nu) + 0.3347)                  # nu'
    nu2x2 = np.arctan2(sin_i**2 * np.sin(2 * nu), sin_i**2 * np.cos(2 * nu) + 0.0727)  # 2 nu''
    half = I / 2.0
    P = p - xi                                       # longitude of lunar perigee from the intersection
    tan2 = np.tan(half) ** 2
    # L2: 1/Ra and R, Schureman eqs 213-215
    inv_ra = np.sqrt(1.0 - 12.0 * tan2 * np.cos(2 * P) + 36.0 * tan2**2)
    R = np.arctan2(np.sin(2 * P), 1.0 / (6.0 * tan2) - np.cos(2 * P))
    # M1: 1/Qa and Q, Schureman eqs 197, 203, 206-207
    inv_qa = np.sqrt(0.25 + 1.5 * cos_i / np.cos(half) ** 2 * np.cos(2 * P)
                     + 2.25 * cos_i**2 / np.cos(half) ** 4)
    Q = np.arctan2((5.0 * cos_i - 1.0) * np.sin(P), (7.0 * cos_i + 1.0) * np.cos(P))

    f_m2 = np.cos(half) ** 4 / 0.9154
    f_o1 = sin_i * np.cos(half) ** 2 / 0.3800
    deg = np.rad2deg
    return {
        "MM": ((2.0 / 3.0 - sin_i**2) / 0.5021, np.zeros_like(N)),
        "MF": (sin_i**2 / 0.1578, deg(-2 * xi)),
        "O1": (f_o1, deg(2 * xi - nu)),
        "J1": (sin_2i / 0.7214, deg(-nu)),
        "OO1": (sin_i * np.sin(half) ** 2 / 0.0164, deg(-2 * xi - nu)),
        "M2": (f_m2, deg(2 * xi - 2 * nu)),
        "M3": (np.cos(half) ** 6 / 0.8758, deg(3 * xi - 3 * nu)),
        "L2": (f_m2 * inv_ra, deg(2 * xi - 2 * nu - R)),
        "M1": (f_o1 * inv_qa, deg(xi - nu + Q)),
        "K1": (np.sqrt(0.8965 * sin_2i**2 + 0.6001 * sin_2i * np.cos(nu) + 0.1006), deg(-nu1)),
        "K2": (np.sqrt(19.0444 * sin_i**4 + 2.7702 * sin_i**2 * np.cos(2 * nu) + 0.0981), deg(-nu2x2)),
    }


def nodal_corrections(names, N_deg, p_deg) -> tuple[np.ndarray, np.ndarray]:
    """Nodal factors f and angles u of constituents for given node and perigee longitudes.

    Parameters
    ----------
    names : sequence of str
        Constituent names.
    N_deg, p_deg : array_like of float, shape (m,)
        Longitude of the moon's ascending node N and of the lunar perigee p, degrees.

    Returns
    -------
    f : numpy.ndarray, shape (m, len(names))
        Nodal factors (dimensionless, about 1).
    u : numpy.ndarray, shape (m, len(names))
        Nodal angles, degrees.

    Notes
    -----
    Formulas of [Schureman1958]_; compound constituents multiply their parents'
    ``f`` (each to the power ``|n|``) and add ``n`` times their ``u``.
    """
    cons = [constituent(n) for n in names]
    N_deg = np.atleast_1d(np.asarray(N_deg, dtype=float))
    p_deg = np.atleast_1d(np.asarray(p_deg, dtype=float))
    table = _nodal_formulas(N_deg, p_deg)
    f = np.ones((N_deg.size, len(cons)))
    u = np.zeros((N_deg.size, len(cons)))
    for j, c in enumerate(cons):
        for key, n in c.nodal:
            fk, uk = table[key]
            f[:, j] *= fk ** abs(n)
            u[:, j] += n * uk
    return f, u
