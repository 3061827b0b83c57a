"""Tests of qcpipe.tide.analysis (least-squares harmonic analysis).

Outside reference: the PyPI package ``utide`` (an independent least-squares
harmonic analysis after Foreman 1977).  Round trips use inputs chosen here.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from qcpipe.config.constituents import load_constituents, write_constituents
from qcpipe.tide import CONSTITUENTS, fit_constituents, predict_tide, select_constituents
from qcpipe.tide.analysis import RayleighWarning

MAJOR8 = {  # amplitude m, Greenwich phase deg: chosen values of a mid-latitude shore site
    "M2": (1.20, 123.0), "S2": (0.40, 160.0), "N2": (0.25, 100.0), "K2": (0.11, 158.0),
    "K1": (0.30, 250.0), "O1": (0.20, 230.0), "P1": (0.10, 248.0), "Q1": (0.04, 215.0),
}
# a fuller set for the round trip: the 8 majors plus long-period, minor and shallow-water terms
MANY = {**MAJOR8, "SA": (0.08, 200.0), "SSA": (0.03, 30.0), "MM": (0.02, 10.0), "MF": (0.03, 40.0),
        "MSF": (0.01, 70.0), "2N2": (0.03, 80.0), "MU2": (0.04, 90.0), "NU2": (0.05, 95.0),
        "L2": (0.04, 140.0), "T2": (0.02, 150.0), "J1": (0.015, 260.0), "OO1": (0.01, 280.0),
        "M3": (0.01, 300.0), "MK3": (0.012, 20.0), "M4": (0.06, 50.0), "MS4": (0.04, 80.0),
        "MN4": (0.02, 30.0), "M6": (0.01, 120.0)}


def _hourly(start: str, days: float) -> np.ndarray:
    t0 = np.datetime64(start, "s")
    return t0 + np.arange(0, int(days * 24) + 1) * np.timedelta64(3600, "s")


def _phase_diff(a, b):
    return (a - b + 180.0) % 360.0 - 180.0


def _assert_recovers(fit, truth, amp_atol, phase_atol):
    for name, (amp, phase) in truth.items():
        assert fit.amplitudes_m[name] == pytest.approx(amp, abs=amp_atol), name
        assert _phase_diff(fit.phases_deg[name], phase) == pytest.approx(0.0, abs=phase_atol), name


def test_round_trip_of_own_prediction_noise_free():
    t = _hourly("2026-01-01", 400)            # > 365.26 d: SA and T2 resolvable
    h = predict_tide(t, MANY, mean_level=1.5)
    fit = fit_constituents(t, h, constituents=list(MANY))
    assert not fit.dropped
    assert fit.mean_level_m == pytest.approx(1.5, abs=1e-4)
    # < 0.1 mm (the project's tolerance for noise-free synthetic records); phases of a 1 cm constituent to 0.01 deg
    _assert_recovers(fit, MANY, amp_atol=1e-4, phase_atol=0.01)
    assert fit.residual_std_m < 1e-6


def test_round_trip_with_gaps_nans_and_irregular_times():
    rng = np.random.default_rng(7)
    names = ["M2", "S2", "N2", "K1", "O1", "Q1"]   # separable in 60 days
    truth = {n: MAJOR8[n] for n in names}
    t = _hourly("2026-02-01", 60)
    t = t + rng.integers(-900, 900, t.size) * np.timedelta64(1, "s")   # jitter of +-15 min
    keep = rng.random(t.size) > 0.2
    keep[300:500] = False                                             # an 8-day gap
    t = t[keep]
    h = predict_tide(t, truth, mean_level=0.7)
    h[rng.random(h.size) < 0.05] = np.nan
    t[5] = np.datetime64("NaT")
    fit = fit_constituents(t, h, constituents=names)
    _assert_recovers(fit, truth, amp_atol=1e-4, phase_atol=0.01)
    assert fit.n_samples == int((np.isfinite(h) & ~np.isnat(t)).sum())


def test_fit_matches_utide_on_noisy_record():
    import utide

    rng = np.random.default_rng(11)
    t = _hourly("2026-04-01", 35)
    h = predict_tide(t, MAJOR8, mean_level=2.0) + rng.normal(0.0, 0.05, t.size)
    names = ["M2", "S2", "N2", "K1", "O1", "Q1"]   # separable in 35 days (K2, P1 are not)
    ours = fit_constituents(t, h, latitude=48.0, constituents=names)
    assert sorted(c.name for c in ours.constants) == sorted(names)
    ref = utide.solve(t, h, lat=48.0, method="ols", conf_int="linear", nodal=True, trend=False,
                      constit=names, verbose=False)
    for name, amp, se in zip(ref.name, ref.A, ref.A_ci):
        # 2 mm (the project's tolerance against utide): the same least squares, nodal corrections differ < 1 %
        assert ours.amplitudes_m[name] == pytest.approx(amp, abs=0.002), name
    assert ours.mean_level_m == pytest.approx(ref.mean, abs=0.002)


def test_standard_errors_for_white_noise():
    # For white noise of std s and n samples over many cycles, each cosine and sine
    # coefficient has variance 2 s^2 / n, so se(H) = s sqrt(2/n): textbook least
    # squares (e.g. Emery and Thomson, Data Analysis Methods in Physical Oceanography,
    # harmonic analysis chapter; from memory); 15 % for finite-record effects
    rng = np.random.default_rng(5)
    t = _hourly("2026-01-01", 180)
    sigma = 0.1
    h = predict_tide(t, {"M2": (1.0, 10.0), "K1": (0.3, 80.0)}) + rng.normal(0.0, sigma, t.size)
    fit = fit_constituents(t, h, constituents=["M2", "K1", "O1", "S2"])
    assert fit.residual_std_m == pytest.approx(sigma, rel=0.05)
    n = t.size
    for c in fit.constants:
        # f ~ 1 scales the column; se(H) within 15 % of the white-noise value
        assert c.amplitude_se_m == pytest.approx(sigma * np.sqrt(2.0 / n), rel=0.15), c.name
    m2 = next(c for c in fit.constants if c.name == "M2")
    assert m2.phase_se_deg == pytest.approx(np.degrees(sigma * np.sqrt(2.0 / n) / 1.0), rel=0.15)


def test_rayleigh_separates_k1_and_p1_only_after_half_a_year():
    dsigma = CONSTITUENTS["K1"].speed_deg_per_hour - CONSTITUENTS["P1"].speed_deg_per_hour
    days_needed = 360.0 / dsigma / 24.0          # 1 / (15.0411 - 14.9589 deg/h) = 182.6 d
    assert days_needed == pytest.approx(182.6, abs=0.1)
    kept, dropped = select_constituents(["P1", "K1"], (days_needed - 1.0) * 24.0)
    assert kept == ["K1"] and dropped == {"P1": "K1"}
    kept, dropped = select_constituents(["P1", "K1"], (days_needed + 1.0) * 24.0)
    assert kept == ["K1", "P1"] and dropped == {}


@pytest.mark.parametrize("days, kept_p1", [(180, False), (186, True)], ids=["180d", "186d"])
def test_fit_applies_rayleigh_to_the_record(days, kept_p1):
    t = _hourly("2026-01-01", days)
    h = predict_tide(t, MAJOR8)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        fit = fit_constituents(t, h, constituents=["K1", "P1", "M2", "O1"], infer=False)
    assert ("P1" in fit.amplitudes_m) is kept_p1
    assert ("P1" in fit.resolved) is kept_p1 and ("P1" in fit.dropped) is (not kept_p1)
    assert any(issubclass(w.category, RayleighWarning) for w in caught) is (not kept_p1)
    # with inference (the default) P1 unresolved is inferred from K1, not left out
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        fit = fit_constituents(t, h, constituents=["K1", "P1", "M2", "O1"])
    assert "P1" in fit.amplitudes_m and ("P1" in fit.inferred) is (not kept_p1)
    assert not fit.dropped and not any(issubclass(w.category, RayleighWarning) for w in caught)


def test_default_selection_keeps_priority_order_and_drops_exact_aliases():
    # MO3 and 2MK3 have the same speed (both 42.9271398 deg/h, Schureman 1958): one only
    kept, dropped = select_constituents(list(CONSTITUENTS), 400 * 24.0)
    assert "2MK3" in kept and dropped.get("MO3") == "2MK3"
    kept30, _ = select_constituents(list(CONSTITUENTS), 30 * 24.0)
    assert kept30[:4] == ["M2", "K1", "S2", "O1"] and "P1" not in kept30 and "K2" not in kept30


def test_fit_writes_a_file_the_predictor_reads(tmp_path):
    t = _hourly("2026-01-01", 40)
    h = predict_tide(t, MAJOR8, mean_level=2.0)
    fit = fit_constituents(t, h, constituents=["M2", "S2", "N2", "K1", "O1", "Q1"], latitude=-41.0)
    path = write_constituents(tmp_path / "fit.toml", fit.to_constants(site="Kelpwhistle Cove", datum="CD"))
    loaded = load_constituents(path)
    assert loaded.latitude_deg == -41.0 and loaded.site == "Kelpwhistle Cove"
    assert "40.0 days" in loaded.source
    np.testing.assert_allclose(predict_tide(t, loaded.constituents, mean_level=loaded.mean_level_m),
                               predict_tide(t, fit.constants, mean_level=fit.mean_level_m), atol=1e-12)


def test_short_record_is_refused():
    t = _hourly("2026-01-01", 10)
    with pytest.raises(ValueError, match=r"record spans 10.00 days of valid samples \(241 samples\); "
                                         r"harmonic analysis needs at least min_record_days = 15 days"):
        fit_constituents(t, np.zeros(t.size))


def test_nan_heights_shorten_the_record():
    t = _hourly("2026-01-01", 20)
    h = np.zeros(t.size)
    h[24 * 8:] = np.nan
    with pytest.raises(ValueError, match="record spans 7.96 days"):
        fit_constituents(t, h)


@pytest.mark.parametrize("kwargs, match", [
    ({"heights": np.zeros(3)}, "times and heights must have the same length; found 481 and 3"),
    ({"latitude": 95.0}, "latitude 95.0 must be within -90 to 90"),
    ({"rayleigh": -1.0}, "rayleigh factor -1.0 must be >= 0"),
], ids=["shapes", "latitude", "rayleigh"])
def test_argument_errors(kwargs, match):
    t = _hourly("2026-01-01", 20)
    args = {"heights": np.zeros(t.size), **kwargs}
    with pytest.raises(ValueError, match=match):
        fit_constituents(t, args.pop("heights"), **args)


# ---------------------------------------------------------------- inference of unresolved pairs

def test_equilibrium_ratios_agree_with_schureman_coefficients():
    # Two sources for the equilibrium amplitude ratio: Cartwright and Tayler (1971)
    # amplitudes in EQUILIBRIUM_INFERENCE, and Schureman (1958) Table 2 mean
    # coefficients (from memory): K2 0.1152 (lunar 0.0786 + solar 0.0366), S2 0.4227,
    # K1 0.5305, P1 0.1755, M2 0.9085, N2 0.1759, O1 0.3771, Q1 0.0730. 1.5 %: the
    # two tables' different expansions and rounding.
    from qcpipe.tide.analysis import EQUILIBRIUM_INFERENCE

    schureman = {"K2": 0.1152 / 0.4227, "P1": 0.1755 / 0.5305, "N2": 0.1759 / 0.9085, "Q1": 0.0730 / 0.3771}
    for name, ratio in schureman.items():
        assert EQUILIBRIUM_INFERENCE[name].amplitude_ratio == pytest.approx(ratio, rel=0.015), name
        assert EQUILIBRIUM_INFERENCE[name].phase_difference_deg == 0.0


def test_short_record_infers_k2_and_p1_and_says_so():
    # A 60-day record of a tide whose K2 and P1 follow the equilibrium relation to
    # S2 and K1 exactly: with inference the four come back to 0.5 mm and 0.1 deg;
    # without it S2 and K1 take in their neighbours and are centimetres off.
    from qcpipe.tide.analysis import EQUILIBRIUM_INFERENCE

    truth = dict(MAJOR8)
    truth["K2"] = (EQUILIBRIUM_INFERENCE["K2"].amplitude_ratio * truth["S2"][0], truth["S2"][1])
    truth["P1"] = (EQUILIBRIUM_INFERENCE["P1"].amplitude_ratio * truth["K1"][0], truth["K1"][1])
    t = _hourly("2026-03-01", 60)
    h = predict_tide(t, truth, mean_level=2.0)
    fit = fit_constituents(t, h, latitude=48.0)
    assert fit.record_days == pytest.approx(60.0)
    assert {"K2", "P1"} <= set(fit.inferred) and not {"K2", "P1"} & set(fit.resolved)
    assert fit.inferred["K2"].reference == "S2" and fit.inferred["P1"].reference == "K1"
    assert {"M2", "S2", "N2", "K1", "O1", "Q1"} <= set(fit.resolved)
    assert not set(fit.resolved) & set(fit.dropped) and not set(fit.inferred) & set(fit.dropped)
    assert set(fit.resolved) | set(fit.inferred) == set(fit.amplitudes_m)
    _assert_recovers(fit, {k: truth[k] for k in ("S2", "K2", "K1", "P1")}, amp_atol=5e-4, phase_atol=0.1)
    plain = fit_constituents(t, h, latitude=48.0, infer=False)
    assert "K2" in plain.dropped and "K2" not in plain.amplitudes_m
    assert abs(plain.amplitudes_m["S2"] - truth["S2"][0]) > 0.01


def test_inference_matches_utide():
    # utide.solve with its exact inference (K2 from S2, P1 from K1 at the same
    # ratios, no phase offset) on a noisy 90-day record whose K2 and P1 do not
    # follow the ratios exactly: amplitudes within 2 mm and phases within 0.5 deg
    # (the project's tolerances against utide)
    import utide
    from utide.utilities import Bunch

    from qcpipe.tide.analysis import EQUILIBRIUM_INFERENCE

    rng = np.random.default_rng(11)
    t = _hourly("2026-04-01", 90)
    h = predict_tide(t, MAJOR8, mean_level=2.0) + rng.normal(0.0, 0.05, t.size)
    names = ["M2", "S2", "N2", "K1", "O1", "Q1"]
    ours = fit_constituents(t, h, latitude=48.0, constituents=names + ["K2", "P1"])
    assert set(ours.inferred) == {"K2", "P1"}
    ref = utide.solve(t, h, lat=48.0, method="ols", conf_int="linear", nodal=True, trend=False,
                      constit=names, verbose=False,
                      infer=Bunch(inferred_names=["K2", "P1"], reference_names=["S2", "K1"],
                                  amp_ratios=[EQUILIBRIUM_INFERENCE["K2"].amplitude_ratio,
                                              EQUILIBRIUM_INFERENCE["P1"].amplitude_ratio],
                                  phase_offsets=[0.0, 0.0]))
    for name, amp, g in zip(ref.name, ref.A, ref.g):
        assert ours.amplitudes_m[name] == pytest.approx(amp, abs=0.002), name
        assert _phase_diff(ours.phases_deg[name], g) == pytest.approx(0.0, abs=0.5), name


def test_fit_metadata_reach_the_constants_file(tmp_path):
    t = _hourly("2026-01-01", 40)
    h = predict_tide(t, MAJOR8, mean_level=2.0)
    fit = fit_constituents(t, h, latitude=-41.0)
    constants = fit.to_constants(site="Kelpwhistle Cove", datum="CD")
    assert constants.record_days == fit.record_days and constants.resolved == fit.resolved
    assert constants.inferred == fit.inferred and constants.dropped == fit.dropped
    loaded = load_constituents(write_constituents(tmp_path / "fit.toml", constants))
    assert loaded == constants
