"""Apply a rule set to a station's variables: one int8 flag array per check, then the aggregate.

Plain function over numpy arrays (no files, no Prefect); the pipeline calls it.
"""

from __future__ import annotations

import numpy as np

from . import checks
from .config.rules import RuleSet, VariableRules


def flags_for_variable(values, times, rules: VariableRules) -> dict[str, np.ndarray]:
    """Run every check ``rules`` configures on one variable; returns {check: int8 flags}."""
    out: dict[str, np.ndarray] = {}
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
                                          fail=s.fail, min_neighbours=s.min_neighbours)
    if rules.rate_of_change is not None:
        r = rules.rate_of_change
        out["rate_of_change"] = checks.rate_of_change_flags(values, times, window_s=r.window, n_sigma=r.n_sigma,
                                                            min_samples=r.min_samples)
    if rules.flat_line is not None:
        f = rules.flat_line
        out["flat_line"] = checks.flat_line_flags(values, times, tolerance=f.tolerance,
                                                  suspect_after_s=f.suspect_after, fail_after_s=f.fail_after)
    if rules.gap is not None:
        out["gap"] = checks.gap_flags(times, values, max_gap_s=rules.gap.max_gap)
    return out


def conflict_flags(values, conflict_mask) -> np.ndarray:
    """Suspect (3) where overlapping downloads disagreed on the value, else pass; 9 where missing."""
    v = np.asarray(values, dtype=np.float64)
    out = np.where(np.asarray(conflict_mask, dtype=bool), checks.SUSPECT, checks.PASS).astype(np.int8)
    out[np.isnan(v)] = checks.MISSING
    return out


def apply_rule_set(variables: dict[str, np.ndarray], times, rule_set: RuleSet, station: str,
                   conflicts: dict[str, np.ndarray] | None = None) -> dict[str, dict[str, np.ndarray]]:
    """Flags of every variable the rule set covers, with the aggregate under key "aggregate".

    Variables the rule set does not cover get only an aggregate (2 where a
    value exists: not evaluated; 9 where missing), so every variable carries
    a flag.
    """
    flags: dict[str, dict[str, np.ndarray]] = {}
    for name, values in variables.items():
        rules = rule_set.for_variable(name, station)
        per = flags_for_variable(values, times, rules) if rules is not None else {}
        if conflicts and name in conflicts and np.any(conflicts[name]):
            per["download_conflict"] = conflict_flags(values, conflicts[name])
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
