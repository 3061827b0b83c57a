"""Tests for qcpipe.tide.classify and qcpipe.tide.exposure.

Outside references: skimage.filters.threshold_otsu (scikit-image) for the Otsu
threshold; analytical values of Otsu's separability for a normal (2/pi) and a
uniform (3/4) sample; scipy.stats.halfnorm for the robust separation (Ashman's D)
of a normal sample split at its mean; scipy.constants.epsilon_0 (CODATA) for the capacitor;
hand-worked state sequences. Typical probe readings 0.06 nF dry and 0.17 nF wet
are common practice, no source; water's relative permittivity of about 80 at
20 degC is from the CRC Handbook of Chemistry and Physics (from memory).
"""

import numpy as np
import pytest
import scipy.constants
import scipy.optimize
import scipy.stats
from skimage.filters import threshold_otsu

from qcpipe.tide.classify import (
    BIMODALITY_CUTOFF,
    MAD_TO_SD,
    SEPARATION_CUTOFF,
    bimodality_score,
    class_separation,
    classify_immersion,
    held_count,
    otsu_threshold,
)
from qcpipe.tide.exposure import daily_exposure, exposure_periods, immersion_at, transitions

#: Typical dry and wet readings of a small capacitive probe, nF (common practice, no source):
#: the scale of the synthetic records below.
AIR_READING_NF = 0.06
WATER_READING_NF = 0.17
#: Relative permittivity of water at about 20 degC, CRC Handbook of Chemistry and Physics (from memory).
WATER_RELATIVE_PERMITTIVITY = 80.0


def capacitance_from_geometry(area_m2, separation_m, *, relative_permittivity=1.0):
    """Ideal parallel-plate capacitance C = eps0 eps_r A / d, F (eps0: CODATA 2018 via scipy.constants)."""
    area, d = np.asarray(area_m2, dtype=float), np.asarray(separation_m, dtype=float)
    if np.any(area <= 0) or np.any(d <= 0):
        raise ValueError("capacitance_from_geometry: area_m2 and separation_m; both must be > 0")
    return scipy.constants.epsilon_0 * relative_permittivity * area / d

S = 10**9
T0 = np.datetime64("2024-03-01T18:00:00", "ns").view(np.int64)
M2 = 28.9841042  # deg/h, Schureman 1958 (from memory)


def minutes(n):
    return np.arange(n, dtype=np.int64) * 60 * S


def probe_readings(truth, rng, noise_nf=0.004):
    return AIR_READING_NF + (WATER_READING_NF - AIR_READING_NF) * truth + rng.normal(0, noise_nf, truth.size)


# --- Otsu threshold and bimodality -------------------------------------------


@pytest.mark.parametrize("nbins", [256, 64], ids=["256_bins", "64_bins"])
@pytest.mark.parametrize("wet_fraction", [0.5, 0.2, 0.05], ids=["half", "fifth", "twentieth"])
def test_otsu_agrees_with_scikit_image(nbins, wet_fraction):
    # Overlapping groups (noise 25 pF): the between-class variance has a single
    # maximum, so both implementations must find the same bin.
    rng = np.random.default_rng(42)
    truth = rng.uniform(size=20000) < wet_fraction
    x = probe_readings(truth, rng, noise_nf=0.025)
    x[::97] = np.nan
    finite = x[np.isfinite(x)]
    ref = threshold_otsu(finite, nbins=nbins)  # scikit-image, the outside reference
    width = (finite.max() - finite.min()) / nbins
    assert abs(otsu_threshold(x, nbins=nbins) - ref) <= width


def test_otsu_threshold_is_mid_gap_for_separated_groups():
    # Noise 4 pF: no reading between about 0.08 and 0.15 nF, the criterion is
    # flat there, and the documented choice is the middle of the gap between
    # the largest dry and the smallest wet reading (within one bin).
    rng = np.random.default_rng(9)
    truth = rng.uniform(size=20000) < 0.4
    x = probe_readings(truth, rng)
    mid = (x[~truth].max() + x[truth].min()) / 2
    width = (x.max() - x.min()) / 256
    assert abs(otsu_threshold(x) - mid) <= width


def test_otsu_agrees_with_scikit_image_on_a_skewed_sample():
    rng = np.random.default_rng(5)
    x = np.concatenate([rng.gamma(2.0, 1.0, 5000), 9 + rng.gamma(1.5, 0.5, 1500)])
    width = (x.max() - x.min()) / 256
    assert abs(otsu_threshold(x) - threshold_otsu(x)) <= width


def test_otsu_of_constant_or_empty_readings_is_nan():
    assert np.isnan(otsu_threshold(np.full(10, 0.06)))
    assert np.isnan(otsu_threshold([np.nan, np.nan]))


def test_separability_of_unimodal_samples_is_analytical():
    # Normal split at its mean: halves' means +-sigma sqrt(2/pi), so
    # eta = (1/4)(2 sigma sqrt(2/pi))^2 / sigma^2 = 2/pi. Uniform on [-a, a]:
    # halves' means +-a/2, eta = (a^2/4) / (a^2/3) = 3/4. Tolerance 0.01:
    # sampling error for n = 200000 and the threshold off by up to one bin.
    rng = np.random.default_rng(1)
    normal = rng.normal(0.115, 0.01, 200000)
    uniform = rng.uniform(0.06, 0.17, 200000)
    assert bimodality_score(normal, otsu_threshold(normal)) == pytest.approx(2 / np.pi, abs=0.01)
    assert bimodality_score(uniform, otsu_threshold(uniform)) == pytest.approx(0.75, abs=0.01)


def test_unimodal_probe_scores_below_cutoff_and_clean_probe_above():
    rng = np.random.default_rng(2)
    fouled = rng.normal(0.10, 0.01, 5000)  # stuck between air and water
    assert bimodality_score(fouled, otsu_threshold(fouled)) < BIMODALITY_CUTOFF
    truth = rng.uniform(size=5000) < 0.3
    clean = probe_readings(truth, rng)
    assert bimodality_score(clean, otsu_threshold(clean)) > 0.98
    # A probe wet only 5 % of the time still scores clearly above the cutoff.
    rare = probe_readings(rng.uniform(size=5000) < 0.05, rng)
    assert bimodality_score(rare, otsu_threshold(rare)) > BIMODALITY_CUTOFF


def test_bimodality_score_by_hand():
    # Readings 0, 0, 1, 1 split at 0.5: w0 = w1 = 1/2, sigma_B^2 = 1/4,
    # sigma_T^2 = 1/4 -> 1. Readings 0, 1, 2, 3 split at 1.5: sigma_B^2 =
    # (1/4) * 2^2 = 1, sigma_T^2 = 5/4 -> 0.8.
    assert bimodality_score([0, 0, 1, 1], 0.5) == pytest.approx(1.0)
    assert bimodality_score([0, 1, 2, 3, np.nan], 1.5) == pytest.approx(0.8)
    assert bimodality_score([0, 1, 2, 3], 10.0) == 0.0  # one class empty
    assert bimodality_score([0, 1], np.nan) == 0.0


# --- separation of the two classes (Ashman's D, robust) -----------------------


def test_mad_scale_is_the_normal_quartile():
    # 1 / Phi^-1(3/4): the MAD of a normal sample is 0.6745 sigma (Rousseeuw and Croux 1993)
    assert MAD_TO_SD == pytest.approx(1 / scipy.stats.norm.ppf(0.75), rel=1e-12)


def test_separation_of_a_normal_sample_split_at_its_mean_is_analytical():
    # Each half is a half-normal: median m = sigma * halfnorm.ppf(1/2), MAD d solves
    # F(m + d) - F(m - d) = 1/2 with F the half-normal cdf (scipy.stats.halfnorm). So
    # D = sqrt(2) * 2m / sqrt(2 (1.4826 d)^2) = 2m / (1.4826 d), about 2.3: far below the cutoff.
    m = scipy.stats.halfnorm.ppf(0.5)
    d = scipy.optimize.brentq(lambda d: scipy.stats.halfnorm.cdf(m + d) - scipy.stats.halfnorm.cdf(m - d) - 0.5,
                              1e-6, 3.0)
    expected = 2 * m / (MAD_TO_SD * d)
    x = np.random.default_rng(3).normal(0.115, 0.01, 400000)
    got = class_separation(x, 0.115).separation
    assert got == pytest.approx(expected, rel=0.02)           # sampling error of medians, n = 400000
    assert got < SEPARATION_CUTOFF / 2


@pytest.mark.parametrize("k", [8.0, 12.0])
@pytest.mark.parametrize("rare", [0.5, 0.05, 0.005], ids=["half", "5%", "0.5%"])
def test_separation_of_two_normal_classes_does_not_depend_on_how_rare_one_is(k, rare):
    # Two normal classes of equal sigma, means k sigma apart, split half-way: D = k (Ashman et al.
    # 1994, equal spreads), whatever the classes' sizes; Otsu's eta falls with the rarer share.
    # (Closer classes are not tested: the large class's tail beyond the split then lands in a rare
    # class and widens it, e.g. k = 4 with 5 %: D = 2.8; those readings are not separable anyway.)
    rng = np.random.default_rng(int(k * 10 + rare * 1000))
    n = 200000
    x = np.concatenate([rng.normal(0.0, 1.0, n), rng.normal(k, 1.0, int(n * rare))])
    # tolerance: truncation at k/2 shortens each class by Phi(-k/2) (0.02 at k = 4), plus sampling error
    assert class_separation(x, k / 2).separation == pytest.approx(k, rel=0.1)


def test_rare_wet_probe_passes_and_stuck_probe_with_spikes_does_not():
    # Issue 13 section 3: the rarity of a state no longer lowers the verdict, and a stuck probe's lone
    # spikes do not count as a state. Readings as probe_readings above; 4032 samples = 28 days at 10 min.
    rng = np.random.default_rng(8)
    n = 4032
    truth = np.zeros(n, bool)
    for s in range(100, n, 400):                       # ten immersions of two samples: 0.5 % wet
        truth[s:s + 2] = True
    rare = probe_readings(truth, rng)
    c = class_separation(rare, otsu_threshold(rare))
    assert bimodality_score(rare, otsu_threshold(rare)) < BIMODALITY_CUTOFF     # the old verdict failed it
    assert c.separation > SEPARATION_CUTOFF and c.fewest_held == 20
    stuck = probe_readings(np.zeros(n, bool), rng)
    stuck[np.arange(50, n, 500)] = WATER_READING_NF    # eight lone spikes at the water level
    s = class_separation(stuck, otsu_threshold(stuck))
    assert s.separation > SEPARATION_CUTOFF            # tight spikes: the separation alone would pass it
    assert s.fewest_held == 0 and s.n_high == 8        # but none is held: no second state


def test_held_count_by_hand():
    assert held_count([1, 0, 1, 1, 0, 1, 1, 1, 0]) == 5
    assert held_count([1]) == 0 and held_count([]) == 0
    assert held_count([0, 1, 0, 1, 0]) == 0


def test_class_separation_edge_cases():
    assert class_separation([0.0, 0.0, 1.0, 1.0], 0.5).separation == np.inf      # both spreads zero
    assert class_separation([0.0, 0.1, 0.2], 5.0).separation == 0.0               # one class empty
    c = class_separation([0.0, np.nan, 0.0, 1.0, 1.0, 1.0], 0.5)
    assert (c.n_low, c.n_high, c.n_low_held, c.n_high_held) == (2, 3, 2, 3)       # NaN dropped
    with pytest.raises(ValueError, match="threshold"):
        class_separation([0.0, 1.0], float("nan"))


# --- the capacitor -------------------------------------------------------------


def test_parallel_plate_gives_the_order_of_probe_readings():
    # Geometry chosen: plates of 10 cm x 10 cm (A = 0.01 m^2), 1.5 mm apart.
    # C_air = eps0 * 0.01 / 0.0015 = 5.90e-11 F = 0.059 nF: the order of the
    # 0.06 nF dry reading. eps0 from scipy.constants (CODATA).
    c_air = capacitance_from_geometry(0.01, 0.0015)
    assert c_air == pytest.approx(scipy.constants.epsilon_0 * 0.01 / 0.0015, rel=1e-12)
    assert 0.5 * AIR_READING_NF < c_air * 1e9 < 2 * AIR_READING_NF
    c_water = capacitance_from_geometry(0.01, 0.0015, relative_permittivity=WATER_RELATIVE_PERMITTIVITY)
    assert c_water / c_air == pytest.approx(80.0, rel=1e-12)  # CRC Handbook, ~80 at 20 degC
    # The ideal wet value (4.7 nF) is far above the 0.17 nF read by a coated
    # probe: the reason the readings differ by a factor of about 3, not 80.
    assert c_water * 1e9 > 10 * WATER_READING_NF


def test_capacitor_geometry_error():
    with pytest.raises(ValueError, match="both must be > 0"):
        capacitance_from_geometry(0.01, 0.0)


# --- hysteresis and minimum duration: hand-worked cases ------------------------


def test_hysteresis_ignores_chattering_near_the_threshold():
    # Band 0.105..0.125 nF around 0.115. By hand: dry until 0.13 > 0.125, wet
    # until 0.10 < 0.105; readings 0.11 and 0.12 inside the band change nothing.
    x = [0.06, 0.11, 0.12, 0.11, 0.12, 0.13, 0.12, 0.11, 0.12, 0.10, 0.11, 0.12]
    got = classify_immersion(minutes(12), x, threshold=0.115, hysteresis=0.01, min_state_s=0)
    assert got.dtype == np.int8
    np.testing.assert_array_equal(got, [0, 0, 0, 0, 0, 1, 1, 1, 1, 0, 0, 0])
    # Without hysteresis the same readings chatter (> 0.115 wet, < 0.115 dry).
    bare = classify_immersion(minutes(12), x, threshold=0.115, hysteresis=0, min_state_s=0)
    np.testing.assert_array_equal(bare, [0, 0, 1, 0, 1, 1, 1, 0, 1, 0, 0, 1])


def test_band_edges_keep_the_state():
    # threshold 1, hysteresis 0.5: 1.5 and 0.5 lie on the band edges -> no change.
    got = classify_immersion(minutes(6), [0, 1.5, 2, 1.5, 0.5, 0], threshold=1, hysteresis=0.5, min_state_s=0)
    np.testing.assert_array_equal(got, [0, 0, 1, 1, 1, 0])


@pytest.mark.parametrize(
    "x, expected",
    [([1.0, 1.2, 2.0, 1.0], [1, 1, 1, 1]),  # start from the first reading outside
     ([0.0, np.nan, 1.2, 2.0], [0, 2, 0, 1]),  # NaN is unknown, keeps the state
     ([1.0, 1.2, np.nan], [2, 2, 2])],  # nothing outside the band
    ids=["start_state", "nan", "all_in_band"],
)
def test_start_state_and_nan(x, expected):
    got = classify_immersion(minutes(len(x)), x, threshold=1, hysteresis=0.5, min_state_s=0)
    np.testing.assert_array_equal(got, expected)


def test_wet_is_low():
    got = classify_immersion(minutes(3), [5.0, 1.0, 5.0], threshold=3, hysteresis=1, min_state_s=0,
                             wet_is_high=False)
    np.testing.assert_array_equal(got, [0, 1, 0])


def states_from(pattern):
    """'W'/'D' string -> readings 1/0 (threshold 0.5, no hysteresis)."""
    return np.array([1.0 if c == "W" else 0.0 for c in pattern])


@pytest.mark.parametrize(
    "pattern, min_s, expected",
    [
        # A 2-sample dry run lasts 120 s (to the next run's first sample).
        ("W" * 10 + "DD" + "W" * 10, 180, "W" * 22),
        ("W" * 10 + "DD" + "W" * 10, 120, "W" * 10 + "DD" + "W" * 10),  # not shorter
        # Chatter W D WW D...: the 60-s D run is the shortest, it goes first and
        # the wet period extends to the last crossing.
        ("W" * 10 + "D" + "WW" + "D" * 10, 180, "W" * 13 + "D" * 10),
        # W DD W D...: now the 60-s W run goes first -> dry from the first crossing.
        ("W" * 10 + "DD" + "W" + "D" * 10, 180, "W" * 10 + "D" * 13),
        # Three 60-s runs W D W D W: flipping all at once would leave a D; merging
        # the shortest first (earliest on ties) gives all wet.
        ("W" * 10 + "DWD" + "W" * 10, 180, "W" * 23),
        # A short run at the record start stays (its length is unknown).
        ("D" + "W" * 10, 180, "D" + "W" * 10),
    ],
    ids=["short_dry", "not_shorter", "shortest_first_dry", "shortest_first_wet", "no_flip_all",
         "edge_run_kept"],
)
def test_min_state_duration(pattern, min_s, expected):
    got = classify_immersion(minutes(len(pattern)), states_from(pattern), threshold=0.5,
                             hysteresis=0, min_state_s=min_s)
    np.testing.assert_array_equal(got, (states_from(expected)).astype(np.int8))


def test_synthetic_probe_with_wave_wash_is_classified():
    # Tide M2, amplitude 1.2 m, plus 10-s waves of 5 cm; probe at +0.3 m; 1-min
    # sampling for 3 days; readings 0.06 / 0.17 nF with 4 pF noise, 1 % NaN.
    rng = np.random.default_rng(9)
    t = np.arange(0, 3 * 86400, 60.0)
    w = np.deg2rad(M2) / 3600.0
    tide = 1.2 * np.cos(w * t)
    level = tide + 0.05 * np.sin(2 * np.pi * t / 10.0 + rng.uniform(0, 2 * np.pi, t.size))
    x = probe_readings(level > 0.3, rng)
    x[rng.uniform(size=t.size) < 0.01] = np.nan
    thr = otsu_threshold(x)
    assert abs(thr - 0.115) < 0.01
    got = classify_immersion((t * S).astype(np.int64), x, threshold=thr, hysteresis=0.01, min_state_s=900)
    np.testing.assert_array_equal(got[np.isnan(x)], 2)
    known = ~np.isnan(x)
    # Away from the wash zone (the tide within 5 cm of the probe) the state is
    # the truth; transitions fall within the zone, analytical crossings at
    # w t = +-arccos(0.25) + 2 pi k; the zone lasts 0.05 / (1.2 w sin) = 5.1 min
    # on each side of a crossing, so 6 min is allowed.
    far = known & (np.abs(tide - 0.3) > 0.05)
    np.testing.assert_array_equal(got[far], (tide[far] > 0.3).astype(np.int8))
    fl, dr = transitions((t * S).astype(np.int64), got)
    period = 2 * np.pi / w
    phi = np.arccos(0.25) / w
    k = np.arange(-1, 8)
    flood_ref = np.sort(np.concatenate([k * period - phi]))
    drain_ref = np.sort(np.concatenate([k * period + phi]))
    flood_ref = flood_ref[(flood_ref > 0) & (flood_ref < t[-1])]
    drain_ref = drain_ref[(drain_ref > 0) & (drain_ref < t[-1])]
    assert fl.size == flood_ref.size and dr.size == drain_ref.size
    np.testing.assert_allclose(fl.view(np.int64) / S, flood_ref, atol=360, rtol=0)
    np.testing.assert_allclose(dr.view(np.int64) / S, drain_ref, atol=360, rtol=0)


# --- transitions and immersion at other times -----------------------------------


def test_transitions_by_hand():
    # States at minutes 0..10; unknowns skipped: flooding at 2 and 10 min,
    # draining at 6 min; the 0 at 9 min follows the 0 at 6 min (no change).
    s = np.array([0, 0, 1, 1, 2, 1, 0, 2, 2, 0, 1], dtype=np.int8)
    fl, dr = transitions(minutes(11), s)
    np.testing.assert_array_equal(fl.view(np.int64), np.array([2, 10]) * 60 * S)
    np.testing.assert_array_equal(dr.view(np.int64), np.array([6]) * 60 * S)
    assert fl.dtype == np.dtype("datetime64[ns]")


def test_immersion_at_by_hand():
    tp = np.array([0, 60, 120, 300]) * S
    sp = np.array([0, 1, 1, 0], dtype=np.int8)
    tt = np.array([-10, 0, 30, 60, 119, 200, 300, 400]) * S
    # Latest probe sample at or before each target, within 90 s; else 2.
    expected = [2, 0, 0, 1, 1, 1, 0, 2]
    np.testing.assert_array_equal(immersion_at(tt, tp, sp, max_gap_s=90), expected)
    order = np.array([7, 3, 0, 5, 1, 6, 2, 4])  # unsorted targets
    np.testing.assert_array_equal(immersion_at(tt[order], tp, sp, max_gap_s=90), np.array(expected)[order])


def test_state_values_are_checked():
    with pytest.raises(ValueError, match=r"transitions: state\[1\] = 5; allowed immersion states are 1 immersed, 0 emersed, 2 unknown"):
        transitions(minutes(3), np.array([0, 5, 1]))


# --- exposure --------------------------------------------------------------------


@pytest.fixture
def exposure_case():
    # Hourly probe samples from 2024-03-01 18:00 to 03-02 12:00 (19 samples);
    # temperature every 30 min from 18:00 (37 samples), value = sample number
    # k, except NaN at k = 5 (20:30).
    t = T0 + np.arange(19) * 3600 * S
    state = np.array([1, 1, 0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 0, 0, 1, 1, 1, 2, 0], dtype=np.int8)
    tt = T0 + np.arange(37) * 1800 * S
    temp = np.arange(37, dtype=float)
    temp[5] = np.nan
    return t, state, tt, temp


def test_exposure_periods_by_hand(exposure_case):
    t, state, tt, temp = exposure_case
    p = exposure_periods(t, state, tt, temp)
    # A: 20:00 -> 03:00 (first wet sample) = 7 h; B: 06:00 -> 08:00 = 2 h;
    # C: 12:00, the last sample, after an unknown one: 0 h, not observed.
    h = 3600 * S
    np.testing.assert_array_equal(p.start.view(np.int64) - T0, np.array([2, 12, 18]) * h)
    np.testing.assert_array_equal(p.end.view(np.int64) - T0, np.array([9, 14, 18]) * h)
    np.testing.assert_array_equal(p.duration_s, [7 * 3600, 2 * 3600, 0])
    np.testing.assert_array_equal(p.complete, [True, True, False])
    # Temperatures in [start, end): A holds k = 4..17 without 5 -> max 17,
    # mean (147 - 5) / 13; B k = 24..27 -> 27, 25.5; C closed [12:00, 12:00]: 36.
    np.testing.assert_allclose(p.max_temperature, [17, 27, 36])
    np.testing.assert_allclose(p.mean_temperature, [142 / 13, 25.5, 36])


def test_exposure_without_temperature(exposure_case):
    t, state, _, _ = exposure_case
    p = exposure_periods(t, state)
    assert len(p) == 3
    assert np.isnan(p.max_temperature).all()


def test_daily_exposure_across_midnight(exposure_case):
    t, state, tt, temp = exposure_case
    d = daily_exposure(exposure_periods(t, state), temperature_times=tt, temperature=temp)
    # A is split at midnight: 4 h on 03-01 and 3 h on 03-02; 03-02 also holds
    # B (2 h) and C (0 h): 5 h, 3 emersions, longest part 3 h. Aerial maxima:
    # 03-01 k = 4..11 -> 11; 03-02 k up to 17 (A), 27 (B), 36 (C) -> 36.
    np.testing.assert_array_equal(d.day, np.array(["2024-03-01", "2024-03-02"], dtype="datetime64[D]"))
    np.testing.assert_allclose(d.emersed_h, [4, 5])
    np.testing.assert_array_equal(d.n_emersions, [1, 3])
    np.testing.assert_allclose(d.longest_emersion_h, [4, 3])
    np.testing.assert_allclose(d.max_temperature, [11, 36])


def test_daily_exposure_reports_requested_days(exposure_case):
    t, state, _, _ = exposure_case
    days = np.array(["2024-02-29", "2024-03-01", "2024-03-02", "2024-03-03"], dtype="datetime64[D]")
    d = daily_exposure(exposure_periods(t, state), days=days)
    np.testing.assert_allclose(d.emersed_h, [0, 4, 5, 0])
    np.testing.assert_array_equal(d.n_emersions, [0, 1, 3, 0])
    assert np.isnan(d.max_temperature).all()
