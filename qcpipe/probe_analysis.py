"""Immersion state of a probe deployment from its own readings, checked against the tide reference.

A stage between the tide science (``qcpipe.tide``) and the pipeline: it takes arrays and
configuration objects, reads nothing, and returns the state, wetness, quality flags, typed
findings (``notices``: kind and sentence) and the attributes the dataset records.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .checks import FAIL, MISSING, PASS, SUSPECT
from .config.rules import ImmersionSettings, TideTiming
from .convert.sensors import wetness_from_reading
from .tide import classify
from .tide.clock import ClockVerdict, clock_error_estimate
from .tide.crossings import observed_transitions, predicted_crossings, transition_offsets
from .tide.elevation import ElevationCheck, effective_elevation, elevation_check
from .tide.probe_health import ProbeHealth, UnreliablePeriod, probe_health

from .tide_reference import SiteTide


@dataclass
class ProbeAnalysis:
    """The immersion state of a probe deployment and what was found on the way."""
    state: np.ndarray                      # int8: 1 immersed, 0 emersed, 2 unknown
    wetness: np.ndarray                    # 0..1
    quality: np.ndarray                    # int8 flags of the immersion_quality check
    threshold: float
    threshold_source: str
    bimodality: float                      # Otsu's eta (a record; the verdict uses `separation`)
    separation: float = 0.0                # Ashman's D between the two classes (robust levels and spreads)
    unreliable: np.ndarray | None = None   # bool per sample: readings that do not show the state
    periods: list[UnreliablePeriod] = field(default_factory=list)   # fouled or buried periods
    health: ProbeHealth | None = None      # the time-local measures (None when the record as a whole fails)
    findings: list[tuple[str, dict]] = field(default_factory=list)   # (finding, its figures) about the readings
    attrs: dict = field(default_factory=dict)
    clock: ClockVerdict | None = None
    elevation: ElevationCheck | None = None
    transition_time: np.ndarray | None = None      # observed transitions (UTC), floods then drains
    transition_kind: np.ndarray | None = None      # 1 flooding, 0 draining
    transition_offset_s: np.ndarray | None = None  # observed minus predicted, NaN if unmatched
    reference_level: np.ndarray | None = None      # the tide reference at the samples (NaN where none)
    reference_source: np.ndarray | None = None     # its per-sample source (tide_reference.SOURCE_MEANINGS)


def analyse_probe(times, reading, *, probe_reference, elevation_m: float, settings: ImmersionSettings,
                  timing_rules: TideTiming, tide: SiteTide | None, reference_state=None) -> ProbeAnalysis:
    """Wet/dry state of an immersion probe from its own readings, checked against the tide.

    1. Threshold by Otsu's method on the deployment's readings; the class means
       give the dry and wet levels. Readings rise when wet (capacitance grows
       with permittivity) unless the register's air/water references say otherwise.
    2. The record as a whole: if the rarer class has fewer than
       ``settings.min_class_samples`` readings held for two samples or more
       (finding ``one_state_rare``: a stuck probe with spikes), or the classes'
       separation (Ashman's D, :func:`qcpipe.tide.classify.class_separation`) is
       below ``settings.min_separation`` (``not_bimodal``: fouled, buried,
       failed), every sample's ``immersion_quality`` flag is suspect, every sample
       is ``unreliable``, and the reference midpoint is used as the threshold if
       references were taken. How rare a state is does not lower the separation, so
       a healthy probe wet 0.5 % of the time passes.
    3. With references, the automatic threshold is cross-checked against their
       midpoint (``reference_tolerance`` of their distance).
    4. Hysteresis of ``hysteresis_fraction`` of the class distance and a minimum
       state duration stop chattering.
    5. With a tide reference (the observed gauge level where it has data, else
       the prediction; :class:`qcpipe.tide_reference.SiteTide`) for more than 10
       classified samples: transition timing against it gives a clock verdict; the
       level at the (clock-corrected) transitions gives the effective elevation,
       compared with the surveyed one.  A suspected clock error or an elevation
       beyond tolerance makes the immersion series suspect.
    6. When the record as a whole passes: the time-local health
       (:func:`qcpipe.tide.probe_health.probe_health`, windows of
       ``settings.health_window``) finds fouled or buried periods, compared with
       `reference_state` (expected state from the tide reference at the sample
       times, 0/1/2; shifted by the clock offset when a clock error is suspected)
       when given. Their samples are ``unreliable`` and their ``immersion_quality``
       flag is FAIL where the evidence is strong (readings held between the levels,
       or contradicted by the reference) and SUSPECT where only a class level has
       shifted; one finding ``unreliable_period`` per period. The state stays as
       classified.
    """
    t = np.asarray(times, dtype="datetime64[ns]")
    r = np.asarray(reading, dtype=np.float64)
    ok = np.isfinite(r)
    findings: list[tuple[str, dict]] = []
    attrs: dict = {}
    quality = np.where(ok, PASS, MISSING).astype(np.int8)
    if np.count_nonzero(ok) < 10 or np.ptp(r[ok]) == 0:
        findings.append(("too_few_readings", {}))
        state = np.full(r.size, 2, np.int8)
        quality[ok] = SUSPECT
        return ProbeAnalysis(state, np.full(r.size, np.nan), quality, float("nan"), "none", 0.0, 0.0, ok.copy(),
                             findings=findings, attrs=attrs)
    thr = classify.otsu_threshold(r)
    score = classify.bimodality_score(r, thr)
    classes = classify.class_separation(r, thr)
    lo, hi = float(np.mean(r[ok & (r < thr)])), float(np.mean(r[ok & (r >= thr)]))
    wet_is_high = probe_reference.water > probe_reference.air if probe_reference else True
    dry_level, wet_level = (lo, hi) if wet_is_high else (hi, lo)
    source = "Otsu threshold of the deployment's readings"
    rare = classes.fewest_held < settings.min_class_samples
    whole_fails = rare or classes.separation < settings.min_separation
    if rare:
        low_is_rare = classes.n_low_held <= classes.n_high_held
        findings.append(("one_state_rare", {"state": "dry" if low_is_rare == wet_is_high else "wet",
                                            "held": int(classes.fewest_held),
                                            "minimum": int(settings.min_class_samples)}))
    elif whole_fails:
        findings.append(("not_bimodal", {"score": float(classes.separation), "cutoff": float(settings.min_separation)}))
    if whole_fails:
        quality[ok] = SUSPECT
        if probe_reference is not None:
            thr = 0.5 * (probe_reference.air + probe_reference.water)
            source = "midpoint of the register's air/water references (readings not bimodal)"
    elif probe_reference is not None:
        mid = 0.5 * (probe_reference.air + probe_reference.water)
        dist = abs(probe_reference.water - probe_reference.air)
        attrs["immersion_reference_midpoint"] = mid
        if abs(thr - mid) > settings.reference_tolerance * dist:
            findings.append(("threshold_differs", {"threshold": float(thr), "midpoint": float(mid),
                                                   "tolerance": float(settings.reference_tolerance)}))
    state = classify.classify_immersion(t, r, threshold=thr, hysteresis=settings.hysteresis_fraction * abs(hi - lo),
                                   min_state_s=settings.min_state, wet_is_high=wet_is_high)
    if probe_reference is not None:
        wetness = wetness_from_reading(r, air=probe_reference.air, water=probe_reference.water)
    else:
        wetness = wetness_from_reading(r, air=dry_level, water=wet_level)
    attrs.update(immersion_threshold=float(thr), immersion_threshold_source=source,
                 immersion_bimodality=round(float(score), 4),
                 immersion_separation=_round(min(classes.separation, 999.0), 2),
                 immersion_hysteresis=float(settings.hysteresis_fraction * abs(hi - lo)),
                 immersion_min_state_s=float(settings.min_state))
    result = ProbeAnalysis(state, wetness, quality, float(thr), source, float(score), float(classes.separation),
                           ok.copy() if whole_fails else np.zeros(r.size, dtype=bool), findings=findings, attrs=attrs)
    ref_level, ref_source = tide.level_and_source(t) if tide is not None else (None, None)
    result.reference_level, result.reference_source = ref_level, ref_source
    covered = np.isfinite(ref_level) if ref_level is not None else np.zeros(t.size, bool)
    if np.count_nonzero(covered & (state != 2)) > 10:
        # timing against the reference where it has a level (observed gauge, else prediction)
        timed = np.where(covered, state, 2).astype(np.int8)
        rt, rl = t[covered], ref_level[covered]
        verdict = clock_error_estimate(t, timed, rt, rl, elevation_m=elevation_m,
                                       max_lag_s=timing_rules.max_offset,
                                       threshold_s=timing_rules.clock_error_threshold)
        result.clock = verdict
        attrs.update(clock_transition_offset_s=_round(verdict.offset_s), clock_offset_spread_s=_round(verdict.spread_s),
                     clock_xcorr_lag_s=_round(verdict.lag_xcorr_s), clock_error_suspected=int(verdict.suspected),
                     clock_reference=tide.describe(ref_source[covered]))
        if verdict.suspected:
            quality[ok] = np.maximum(quality[ok], SUSPECT)
        shift = np.timedelta64(int(round(verdict.offset_s * 1e9)), "ns") if verdict.suspected else np.timedelta64(0, "ns")
        obs = observed_transitions(t, timed)
        pc = predicted_crossings(rt, rl, elevation_m=elevation_m)
        offs = transition_offsets(obs.flooding, obs.draining, pc.flooding, pc.draining,
                                  max_offset_s=timing_rules.max_offset)
        tt = np.concatenate((obs.flooding, obs.draining))
        order = np.argsort(tt, kind="stable")
        result.transition_time = tt[order]
        result.transition_kind = np.concatenate((np.ones(obs.flooding.size, np.int8),
                                                 np.zeros(obs.draining.size, np.int8)))[order]
        result.transition_offset_s = np.concatenate((offs.flood_offsets_s, offs.drain_offsets_s))[order]
        eff = effective_elevation(obs.flooding - shift, obs.draining - shift, rt, rl)
        if eff.n >= 4:
            check = elevation_check(eff, elevation_m, tolerance_m=timing_rules.elevation_tolerance_m)
            result.elevation = check
            attrs.update(effective_elevation_m=_round(eff.median_m, 3), effective_elevation_spread_m=_round(eff.spread_m, 3),
                         effective_elevation_reference=tide.describe(ref_source[covered]))
            if check.suspect:
                quality[ok] = np.maximum(quality[ok], SUSPECT)
    if not whole_fails:
        _local_health(result, t, r, classes, wet_is_high, settings, reference_state)
    return result


def _local_health(result: ProbeAnalysis, t, r, classes, wet_is_high: bool, settings: ImmersionSettings,
                  reference_state) -> None:
    """Step 6 of :func:`analyse_probe`: fouled or buried periods flagged, recorded and reported."""
    expected = None
    if reference_state is not None:
        expected = np.asarray(reference_state)
        if expected.shape != r.shape:
            raise ValueError(f"analyse_probe: reference_state must have the shape of the readings, {r.shape}; "
                             f"found {expected.shape}")
        if result.clock is not None and result.clock.suspected:
            expected = state_at_clock_corrected_times(t, expected, result.clock.offset_s)
    dry, wet = (classes.low_level, classes.high_level) if wet_is_high else (classes.high_level, classes.low_level)
    health = probe_health(t, r, dry_level=dry, wet_level=wet, reference_state=expected,
                          window_s=settings.health_window, level_band=settings.level_band,
                          max_level_shift=settings.max_level_shift, min_between_s=settings.min_between_run,
                          min_samples=settings.min_window_samples, min_period_s=settings.min_period)
    ok = np.isfinite(r)
    result.health, result.periods, result.unreliable = health, health.periods, health.unreliable
    for flag, mask in ((SUSPECT, health.unreliable & ok), (FAIL, health.strong & ok)):
        result.quality[mask] = np.maximum(result.quality[mask], flag)
    for p in health.periods:
        result.findings.append(("unreliable_period", {
            "kind": p.kind, "start": p.start, "end": p.end, "flag": int(FAIL if p.strong else SUSPECT),
            "reference": expected is not None, "wet_level": p.wet_level, "mismatch_share": p.mismatch_share,
            "dry_shift": p.dry_shift}))
    result.attrs["immersion_health_window_s"] = round(float(health.window_s), 1)
    result.attrs["immersion_health_reference"] = "tide reference" if expected is not None else "none (readings only)"
    if health.periods:
        result.attrs["immersion_unreliable_periods"] = "; ".join(
            f"{_iso(p.start)}/{_iso(p.end)} {p.kind}" for p in health.periods)


def state_at_clock_corrected_times(t: np.ndarray, expected: np.ndarray, offset_s: float) -> np.ndarray:
    """Expected state at each sample's corrected time ``t - offset_s`` (nearest sample at or after it;
    2 beyond the record). A logger running late by `offset_s` stamps water that came at ``t - offset_s``."""
    shifted = t - np.timedelta64(int(round(offset_s * 1e9)), "ns")
    idx = np.searchsorted(t, shifted, side="left")
    inside = (idx < t.size) & (shifted >= t[0])
    out = np.full(t.size, 2, dtype=np.int8)
    out[inside] = np.asarray(expected)[idx[inside]]
    return out


def _iso(t: np.datetime64) -> str:
    return np.datetime_as_string(t, unit="s") + "Z"


def _round(x, nd=1):
    return None if x is None or not np.isfinite(x) else round(float(x), nd)
