"""Apply a rule set to a station's variables: one int8 flag array per check, then the aggregate.

Plain function over numpy arrays (no files, no Prefect); the pipeline calls it.
"""

from __future__ import annotations

import numpy as np

from . import checks
from .config.rules import CHECK_ORDER, RuleSet, VariableRules


#: windowed checks that can flag nothing on a record shorter than their window: a flat stretch is never
#: longer than the record, so a flat-line test whose ``suspect_after`` exceeds the record's span would pass
#: every sample without having looked; it flags 2 (not evaluated) instead.  The spike and rate-of-change
#: tests still run on such a record: their windows are cut at the record's ends, as they are for the first
#: and last samples of every record, and each flags 2 itself where a sample has too few neighbours.
CANNOT_RUN_WHEN_LONGER = frozenset({"flat_line"})


def check_windows(rules: VariableRules) -> dict[str, float]:
    """The stretch of record (s) each windowed check of ``rules`` needs to run: the spike test's whole
    window (twice ``half_window``), the rate-of-change window, the flat-line test's ``suspect_after``."""
    out = {}
    if rules.spike is not None:
        out["spike"] = 2 * rules.spike.half_window
    if rules.rate_of_change is not None:
        out["rate_of_change"] = rules.rate_of_change.window
    if rules.flat_line is not None:
        out["flat_line"] = rules.flat_line.suspect_after
    return out


def record_span_s(values, times) -> float:
    """Seconds from the first to the last sample with a value (0 with fewer than two)."""
    t = np.asarray(times, dtype="datetime64[ns]")[~np.isnan(np.asarray(values, dtype=np.float64))]
    return float((t.max() - t.min()).astype(np.int64)) / 1e9 if t.size > 1 else 0.0


def windows_longer_than_record(values, times, rules: VariableRules) -> dict[str, tuple[float, float]]:
    """Checks of ``rules`` whose window (:func:`check_windows`) is longer than the record's span
    (:func:`record_span_s`): {check: (window s, span s)}.  They cannot run and flag 2 (not evaluated)."""
    span = record_span_s(values, times)
    return {c: (w, span) for c, w in check_windows(rules).items() if w > span}


def not_evaluated_flags(values) -> np.ndarray:
    """2 (not evaluated) where a value exists, 9 where it is missing."""
    v = np.asarray(values, dtype=np.float64)
    return np.where(np.isnan(v), checks.MISSING, checks.NOT_EVALUATED).astype(np.int8)


def flags_for_variable(values, times, rules: VariableRules) -> dict[str, np.ndarray]:
    """Run every check ``rules`` configures on one variable; returns {check: int8 flags}.

    A check of :data:`CANNOT_RUN_WHEN_LONGER` whose window is longer than the record
    (:func:`windows_longer_than_record`) is not run: it flags 2 (not evaluated) where a value exists."""
    too_long = {c: w for c, w in windows_longer_than_record(values, times, rules).items()
                if c in CANNOT_RUN_WHEN_LONGER}
    if too_long:
        rules = rules.model_copy(update={c: None for c in too_long})
    out: dict[str, np.ndarray] = {c: not_evaluated_flags(values) for c in too_long}
    if rules.gross_range is not None:
        g = rules.gross_range
        out["gross_range"] = checks.gross_range_flags(values, sensor_min=g.sensor_min, sensor_max=g.sensor_max,
                                                      expected_min=g.expected_min, expected_max=g.expected_max)
    if rules.climatology is not None:
        out["climatology"] = checks.climatology_flags(
            values, times, ranges=[(s.months, s.min, s.max) for s in rules.climatology])
    if rules.spike is not None:
        s = rules.spike
        out["spike"] = checks.spike_flags(values, times, half_window_s=s.half_window, suspect=s.suspect,
                                          fail=s.fail, min_neighbours=s.min_neighbours,
                                          one_sided_edges=s.one_sided_edges)
    if rules.rate_of_change is not None:
        r = rules.rate_of_change
        out["rate_of_change"] = checks.rate_of_change_flags(values, times, window_s=r.window, n_sigma=r.n_sigma,
                                                            min_samples=r.min_samples)
    if rules.flat_line is not None:
        f = rules.flat_line
        out["flat_line"] = checks.flat_line_flags(values, times, tolerance=f.tolerance,
                                                  suspect_after_s=f.suspect_after, fail_after_s=f.fail_after,
                                                  reference=f.reference, mode=f.mode)
    if rules.gap is not None:
        out["gap"] = checks.gap_flags(times, values, max_gap_s=rules.gap.max_gap)
    if too_long:
        out = {c: out[c] for c in CHECK_ORDER if c in out}
    return out


def unevaluated_checks(variables: dict[str, np.ndarray], times, rule_set: RuleSet, station: str,
                       ) -> dict[tuple[str, str], tuple[float, float]]:
    """{(variable, check): (window s, record span s)} for the checks whose window is longer than the record
    (the longest window of the base and state-aware parameters): those of :data:`CANNOT_RUN_WHEN_LONGER`
    are left not evaluated by :func:`apply_rule_set`, the others ran with their windows cut at the
    record's ends."""
    out: dict[tuple[str, str], tuple[float, float]] = {}
    for name, values in variables.items():
        rules = rule_set.for_variable(name, station)
        if rules is None:
            continue
        for r in [rules] + [rules.for_state(s) for s in ("immersed", "emersed") if getattr(rules, f"when_{s}")]:
            for check, (w, span) in windows_longer_than_record(values, times, r).items():
                if w > out.get((name, check), (0.0, 0.0))[0]:
                    out[(name, check)] = (w, span)
    return out


def conflict_flags(values, conflict_mask) -> np.ndarray:
    """Suspect (3) where overlapping downloads disagreed on the value, else pass; 9 where missing."""
    v = np.asarray(values, dtype=np.float64)
    out = np.where(np.asarray(conflict_mask, dtype=bool), checks.SUSPECT, checks.PASS).astype(np.int8)
    out[np.isnan(v)] = checks.MISSING
    return out


def manual_flags(values, times, ranges) -> np.ndarray:
    """A reviewer's flags: ``flag`` inside each (start, end, flag) range (inclusive), 2 elsewhere, 9 where missing.

    Later ranges win where ranges overlap (annotations apply in file order).
    """
    t = np.asarray(times, dtype="datetime64[ns]")
    out = np.full(t.size, checks.NOT_EVALUATED, np.int8)
    for start, end, flag in ranges:
        out[(t >= np.datetime64(start, "ns")) & (t <= np.datetime64(end, "ns"))] = flag
    out[np.isnan(np.asarray(values, dtype=np.float64))] = checks.MISSING
    return out


def with_manual_precedence(aggregate, manual) -> np.ndarray:
    """The aggregate with a reviewer's flag (1, 3 or 4) in place of the automated result."""
    agg = np.asarray(aggregate).copy()
    m = np.asarray(manual)
    use = np.isin(m, (checks.PASS, checks.SUSPECT, checks.FAIL))
    agg[use] = m[use]
    return agg


def state_aware_flags(values, times, rules: VariableRules, immersion) -> dict[str, np.ndarray]:
    """Flags with the ``when_immersed`` / ``when_emersed`` parameters applied by sample state.

    Each check runs once with the base parameters and once with each state's
    parameters over the whole series (windows see both states); a sample takes
    the flag computed with its own state's parameters (the base ones where the
    state is unknown).
    """
    state = np.asarray(immersion)
    base = flags_for_variable(values, times, rules)
    for state_name, code in (("immersed", 1), ("emersed", 0)):
        if getattr(rules, f"when_{state_name}") is None:
            continue
        alt = flags_for_variable(values, times, rules.for_state(state_name))
        sel = state == code
        for check, arr in alt.items():
            base[check] = np.where(sel, arr, base.get(check, arr)).astype(np.int8)
    return base


def apply_rule_set(variables: dict[str, np.ndarray], times, rule_set: RuleSet, station: str,
                   conflicts: dict[str, np.ndarray] | None = None, *, immersion=None, reference_level=None,
                   predicted_level=None, elevation_m: float | None = None, readings=None,
                   extra: dict[str, dict[str, np.ndarray]] | None = None,
                   manual: dict[str, list] | None = None) -> dict[str, dict[str, np.ndarray]]:
    """Flags of every variable, with the aggregate under key "aggregate".

    Parameters
    ----------
    variables : {name: values} in stored units, all on ``times``
    conflicts : {name: bool mask} records whose values differed between downloads
    immersion : int8 immersion state of the station at ``times`` (1 immersed, 0 emersed, 2 unknown),
        for state-aware thresholds, companion gating and the consistency check
    reference_level : water level (m above the site datum) at ``times``, gauge or prediction
    predicted_level : harmonic prediction at ``times`` (for the water-level residual check)
    elevation_m : the sensing point's elevation above the datum (consistency check)
    readings : raw probe readings (missing readings flag 9 in the consistency check)
    extra : {name: {check: flags}} flags computed elsewhere (e.g. immersion quality)
    manual : {name: [(start, end, flag), ...]} review annotations; they become the ``manual``
        check and take precedence over the automated checks in the aggregate

    Variables the rule set does not cover get only an aggregate (2 where a
    value exists: not evaluated; 9 where missing), so every variable carries
    a flag.  A check whose inputs are absent (no immersion, no prediction) is
    not run and does not appear.
    """
    from .checks import tide as tide_checks

    flags: dict[str, dict[str, np.ndarray]] = {}
    for name, values in variables.items():
        rules = rule_set.for_variable(name, station)
        per: dict[str, np.ndarray] = {}
        if rules is not None:
            if rules.state_aware and immersion is not None:
                per = state_aware_flags(values, times, rules, immersion)
            else:
                per = flags_for_variable(values, times, rules)
            if rules.immersion_gating is not None and immersion is not None:
                g = tide_checks.companion_gating_flags(times, immersion, settle_s=rules.immersion_gating.settle)
                g[np.isnan(np.asarray(values, dtype=np.float64))] = checks.MISSING
                per["immersion_gating"] = g
            if rules.tide_residual is not None and predicted_level is not None:
                r = rules.tide_residual
                per["tide_residual"] = tide_checks.water_level_residual_flags(values, predicted_level,
                                                                              suspect_m=r.suspect, fail_m=r.fail)
            if (rules.immersion_consistency is not None and immersion is not None
                    and reference_level is not None and elevation_m is not None):
                c = rules.immersion_consistency
                per["immersion_consistency"] = tide_checks.immersion_consistency_flags(
                    times, immersion, reference_level, elevation_m=elevation_m, margin_m=c.margin_m,
                    fail_after_s=c.fail_after, reading=readings)
        per.update((extra or {}).get(name, {}))
        if conflicts and name in conflicts and np.any(conflicts[name]):
            per["download_conflict"] = conflict_flags(values, conflicts[name])
        ranges = (manual or {}).get(name)
        if ranges:
            per["manual"] = manual_flags(values, times, ranges)
            auto = checks.aggregate_flags(values, [v for k, v in per.items() if k != "manual"])
            per["aggregate"] = with_manual_precedence(auto, per["manual"])
        else:
            per["aggregate"] = checks.aggregate_flags(values, list(per.values()))
        flags[name] = per
    return flags


def flag_counts(flags: dict[str, dict[str, np.ndarray]]) -> dict[str, dict[str, int]]:
    """Counts of the aggregate flag classes per variable: {var: {"1": n, "3": n, ...}}."""
    out = {}
    for name, per in flags.items():
        agg = per["aggregate"]
        vals, counts = np.unique(agg, return_counts=True)
        out[name] = {str(int(v)): int(c) for v, c in zip(vals, counts)}
    return out
