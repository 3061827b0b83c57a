"""A site's tide reference: observed gauge first, then the register's constants, then constants fitted
to the site's own gauge records; every sample labelled with where its level came from.

Check values are worked by hand from the inputs (interpolation between two gauge samples, the
order of preference written in issue 15 and the README); the fitted constants are compared with
``utide.solve`` (PyPI, an independent least-squares harmonic analysis) on the same record.
"""

from __future__ import annotations

import json
from types import SimpleNamespace

import numpy as np
import pytest

from qcpipe.archive.store import ArchivePaths
from qcpipe.derive.products import site_fitted_constants
from qcpipe.tide.harmonics import HarmonicConstant, TideConstants, predict_tide
from qcpipe.tide_reference import (FITTED_PREDICTION, NO_REFERENCE, OBSERVED_GAUGE, REGISTER_PREDICTION, SiteTide,
                                   immersion_source_from_reference, state_from_level)

T0 = np.datetime64("2026-03-01T00:00", "ns")
MIN = np.timedelta64(60, "s")
# invented constants of a diurnal-dominated test site (form factor (0.30 + 0.25) / (0.15 + 0.05) = 2.75)
DIURNAL = (HarmonicConstant("K1", 0.30, 110.0), HarmonicConstant("O1", 0.25, 95.0),
           HarmonicConstant("M2", 0.15, 200.0), HarmonicConstant("S2", 0.05, 230.0))


def constants(mean=1.2, source="test constants"):
    return TideConstants(site="test", datum="test datum", mean_level_m=mean, constituents=DIURNAL, source=source)


def gauge(n=7, step_min=10, start_min=60):
    t = T0 + np.arange(n) * step_min * MIN + start_min * MIN
    return t, np.linspace(1.0, 1.6, n)


def test_observed_level_is_the_gauge_between_its_samples_and_nan_outside():
    gt, gl = gauge()                                   # 01:00 .. 02:00 every 10 min, 1.0 .. 1.6 m
    tide = SiteTide("s", None, gt, gl, "g1")
    at = T0 + np.array([30, 60, 65, 120, 150]) * MIN
    level, source = tide.level_and_source(at)
    # by hand: 01:05 lies halfway between 1.0 m (01:00) and 1.1 m (01:10)
    np.testing.assert_allclose(level, [np.nan, 1.0, 1.05, 1.6, np.nan], atol=1e-12)
    assert source.tolist() == [NO_REFERENCE, OBSERVED_GAUGE, OBSERVED_GAUGE, OBSERVED_GAUGE, NO_REFERENCE]


def test_register_prediction_fills_outside_the_gauge_and_across_its_long_gaps():
    gt, gl = gauge(n=13)
    keep = np.r_[0:4, 9:13]                            # a 60-min hole (> the 30-min largest gap) in the middle
    tide = SiteTide("s", constants(), gt[keep], gl[keep], "g1")
    at = T0 + np.array([0, 60, 105, 150, 180, 300]) * MIN
    level, source = tide.level_and_source(at)
    pred = predict_tide(at, DIURNAL, mean_level=1.2)
    assert source.tolist() == [REGISTER_PREDICTION, OBSERVED_GAUGE, REGISTER_PREDICTION, OBSERVED_GAUGE,
                               OBSERVED_GAUGE, REGISTER_PREDICTION]
    np.testing.assert_allclose(level[source == REGISTER_PREDICTION], pred[source == REGISTER_PREDICTION])
    np.testing.assert_allclose(level[1], gl[0])


def test_register_constants_win_over_fitted_ones_and_fitted_ones_are_used_without_them():
    at = T0 + np.arange(3) * 60 * MIN
    fitted = constants(mean=5.0, source="fitted")
    both = SiteTide("s", constants(), fitted=fitted, fitted_from="gauge g1")
    only_fit = SiteTide("s", None, fitted=fitted, fitted_from="gauge g1")
    assert (both.level_and_source(at)[1] == REGISTER_PREDICTION).all()
    assert (only_fit.level_and_source(at)[1] == FITTED_PREDICTION).all()
    np.testing.assert_allclose(only_fit.predicted(at), predict_tide(at, DIURNAL, mean_level=5.0))
    # a gauge is never checked against constants fitted to itself
    assert only_fit.register_predicted(at) is None
    assert "fitted to the site's gauge records (gauge g1): 100.0 % of samples" in only_fit.describe(
        only_fit.level_and_source(at)[1])


def test_no_reference_at_all():
    tide = SiteTide("s")
    level, source = tide.level_and_source(T0 + np.arange(4) * MIN)
    assert np.isnan(level).all() and (source == NO_REFERENCE).all()
    assert tide.reference(T0 + np.arange(4) * MIN) == (None, "none")
    assert not tide.has_reference


def test_state_from_level_and_its_source():
    level = np.array([0.5, 0.95, 1.0, 1.05, 1.5, np.nan])
    # elevation 1.0 m, margin 0.1 m: wet above 1.1, dry below 0.9, unknown between (and without a level)
    assert state_from_level(None, level, elevation_m=1.0, margin_m=0.1).tolist() == [0, 2, 2, 2, 1, 2]
    src = np.array([NO_REFERENCE, OBSERVED_GAUGE, REGISTER_PREDICTION, FITTED_PREDICTION])
    # immersion_source meanings: unknown, immersion_probe, observed gauge, register, fitted
    assert immersion_source_from_reference(src).tolist() == [0, 2, 3, 4]


# --- constants fitted to a site's gauge records ------------------------------------------------

def _ctx(tmp_path):
    return SimpleNamespace(paths=ArchivePaths(tmp_path))


SITE = SimpleNamespace(id="test-site", name="Test site (invented)", vertical_datum="test datum")


# a month cannot separate P1 from K1 or K2 from S2: a real tide has them near their equilibrium ratios to K1
# and S2 (0.331 and 0.272, Cartwright and Tayler 1971, from memory), which the fit assumes; so does this one
WITH_MINOR = DIURNAL + (HarmonicConstant("P1", 0.331 * 0.30, 110.0), HarmonicConstant("K2", 0.272 * 0.05, 230.0))


def _record(days, step_min=10, seed=1):
    t = T0 + np.arange(int(days * 24 * 60 / step_min)) * step_min * MIN
    rng = np.random.default_rng(seed)
    return t, predict_tide(t, WITH_MINOR, mean_level=1.2) + rng.normal(0, 0.01, t.size)


def test_fitted_constants_predict_the_tide_and_are_read_back_until_the_gauge_changes(tmp_path):
    ctx = _ctx(tmp_path)
    t, h = _record(30)
    first, described, why = site_fitted_constants(ctx, SITE, t, h, {"g1": {"qc_key": "a"}}, latitude=45.0)
    assert why == "" and "g1" in described and "30.0 days" in described
    ours = predict_tide(t, first.constituents, mean_level=first.mean_level_m)
    truth = predict_tide(t, WITH_MINOR, mean_level=1.2)
    # 1 cm within the record, against the noise-free tide that made it (1 cm of white noise added)
    assert np.sqrt(np.mean((ours - truth) ** 2)) < 0.01
    toml = tmp_path / "sites" / "test-site" / "fitted_constituents.toml"
    record = json.loads(toml.with_suffix(".json").read_text())
    assert record["record_days"] == pytest.approx(30.0, abs=0.01) and "K1" in record["resolved"]
    before = toml.stat().st_mtime_ns
    again, _, _ = site_fitted_constants(ctx, SITE, t[:10], h[:10], {"g1": {"qc_key": "a"}}, latitude=45.0)
    assert toml.stat().st_mtime_ns == before                    # read back, not fitted again (10 samples could not be)
    assert [c.amplitude_m for c in again.constituents] == pytest.approx([c.amplitude_m for c in first.constituents])
    t2, h2 = _record(45, seed=2)
    refit, described2, _ = site_fitted_constants(ctx, SITE, t2, h2, {"g1": {"qc_key": "b"}}, latitude=45.0)
    assert "45.0 days" in described2 and json.loads(toml.with_suffix(".json").read_text())["record_days"] > 44


def test_a_short_gauge_record_gives_no_constants_and_says_why(tmp_path):
    t, h = _record(6)
    constants_, _, why = site_fitted_constants(_ctx(tmp_path), SITE, t, h, {"g1": {}}, latitude=45.0)
    assert constants_ is None and "too short" in why and "6.0 days" in why
