"""The sentences a person reads about a deployment's findings, written from typed results.

Science modules return numbers and typed results (a clock verdict, an elevation check, a
probe's findings); the words are chosen here, once, for the terminal summary, the report
and the datasets' ``clock_verdict`` attribute alike.
"""

from __future__ import annotations

import numpy as np

from ..checks import FAIL
from ..tide.clock import ClockVerdict
from ..tide.elevation import ElevationCheck


def _minutes(seconds: float) -> str:
    return "nan min" if not np.isfinite(seconds) else f"{int(round(seconds / 60)):+d} min"


def clock_verdict_text(v: ClockVerdict) -> str:
    """One line on a probe's clock: not assessed, no error, or the error and how to correct it."""
    if not v.assessed:
        return (f"clock not assessed: {v.n_transitions} transitions matched to the prediction, at least "
                f"{v.min_transitions} needed")
    off = v.offset_s
    detail = (f"median transition offset {_minutes(off)} (spread {v.spread_s / 60:.0f} min, "
              f"{v.n_transitions} transitions), cross-correlation lag {_minutes(v.lag_xcorr_s)}")
    if not v.suspected:
        return f"no clock error suspected: {detail}"
    side = "late" if off > 0 else "early"
    fix = (f"logger times {'ahead' if off > 0 else 'behind'} by {abs(off) / 60:.0f} min: "
           f"{'subtract' if off > 0 else 'add'} it to correct")
    if v.whole_hours is not None:
        return (f"probe clock about {60 * v.whole_hours:+d} min off: likely a UTC-offset or "
                f"daylight-saving setting; transitions {side}, {detail}; {fix}")
    return (f"probe clock about {off / 60:+.0f} min off: transitions {side}, {detail}; "
            f"check the logger clock; {fix}")


def elevation_text(c: ElevationCheck) -> str:
    """One line on the effective elevation of a sensing point against its surveyed one."""
    if not np.isfinite(c.difference_m):
        return "elevation not assessed: no transitions inside the reference series"
    e = c.effective
    detail = (f"effective elevation {e.median_m:.3f} m (spread {e.spread_m:.3f} m, {e.n} transitions) "
              f"vs surveyed {c.surveyed_m:.3f} m: difference {c.difference_m:+.3f} m")
    if c.suspect:
        return f"elevation suspect: {detail}, beyond {c.tolerance_m:.3f} m; check the survey and the datum"
    return f"elevation consistent: {detail}, within {c.tolerance_m:.3f} m"


def _utc_minute(t) -> str:
    return np.datetime_as_string(np.datetime64(t, "m")).replace("T", " ") + " UTC"


def probe_finding_text(finding: str, figures: dict) -> str:
    """One line on a probe record's readings (``ProbeAnalysis.findings``)."""
    if finding == "too_few_readings":
        return "too few distinct probe readings to tell wet from dry; immersion unknown"
    if finding == "not_bimodal":
        return (f"probe readings not clearly in two groups (separation {figures['score']:.1f} < "
                f"{figures['cutoff']:.1f}): fouled, buried or failed probe? immersion flagged suspect")
    if finding == "one_state_rare":
        return (f"probe readings held {figures['state']} for only {figures['held']} samples (at least "
                f"{figures['minimum']} needed): a stuck probe with spikes cannot be told from a working one; "
                "immersion flagged suspect")
    if finding == "unreliable_period":
        days = (np.datetime64(figures["end"], "s") - np.datetime64(figures["start"], "s")) / np.timedelta64(86400, "s")
        what = ("water readings sagging toward the air level" if figures["kind"] == "fouled"
                else "readings stuck near the air level")
        basis = "against the tide reference" if figures["reference"] else "from the readings alone"
        grade = "fail" if figures["flag"] == FAIL else "suspect"
        return (f"probe {figures['kind']} from {_utc_minute(figures['start'])} to {_utc_minute(figures['end'])} "
                f"({days:.1f} days): {what} ({basis}); wetness immersion_quality flagged {grade} there, "
                "the state is kept as classified")
    if finding == "threshold_differs":
        return (f"automatic wet/dry threshold {figures['threshold']:.4g} differs from the air/water reference "
                f"midpoint {figures['midpoint']:.4g} by more than {figures['tolerance']:.0%} of their distance; "
                "check the references or the probe")
    raise ValueError(f"unknown probe finding {finding!r}")


def _duration_words(seconds: float) -> str:
    for unit, size in (("d", 86400), ("h", 3600), ("min", 60)):
        if seconds >= size:
            return f"{seconds / size:.3g} {unit}"
    return f"{seconds:.3g} s"


def window_longer_than_record_text(variable: str, check: str, window_s: float, span_s: float, *,
                                   evaluated: bool) -> str:
    """A check whose window is longer than the record: not run (``evaluated`` False), or run with its window
    cut at the record's ends."""
    if not evaluated:
        return (f"{variable}: the {check} check was not evaluated (flag 2): its window, "
                f"{_duration_words(window_s)}, is longer than the record, {_duration_words(span_s)} from first "
                "to last value; shorten the window in the rule set or wait for a longer record")
    return (f"{variable}: the {check} check's window, {_duration_words(window_s)}, is longer than the record, "
            f"{_duration_words(span_s)} from first to last value: it ran on the samples the record has (flag 2 "
            "where a sample had too few); shorten the window in the rule set if that was not meant")


def no_reference_text(why: str) -> str:
    """A probe checked against no tide: which checks did not run, and why."""
    return (f"no tide reference: {why}; the probe's clock check, sensor-height check and tide-consistency check "
            "did not run (name published harmonic constants in the register, or add a water-level logger with "
            "at least 15 days of record)")


def clock_correction_text(entry: dict) -> str:
    """The history sentence of a dataset whose times carry a confirmed clock correction (register entry as a dict)."""
    shift = float(entry["shift_s"])
    out = (f"times moved {'back' if shift > 0 else 'forward'} by {abs(shift):.0f} s for a confirmed clock error "
           f"(clock_correction shift_s = {shift:g}, confirmed by {entry['confirmed_by']} on {entry['confirmed_on']}")
    if entry.get("evidence"):
        out += f", from the clock verdict of {entry['evidence']}"
    if entry.get("verdict"):
        out += f": {entry['verdict']}"
    return out + ")"


def companion_clock_text(probe: str, companions: list[tuple[str, dict]]) -> str:
    """What the station's other loggers say about a probe's suspected clock error.

    ``companions``: (deployment, its ``clock_companion_*`` attributes, empty when no
    lag could be estimated) for each of the station's other deployments.
    """
    parts = []
    for dep, a in companions:
        if not a or not int(a.get("clock_companion_found", 0) or 0):
            why = a.get("clock_companion_note", "no step signal at the probe's transitions") if a else \
                "no temperature record to time against the probe"
            parts.append(f"{dep} (lag not estimated: {why})")
            continue
        shares = int(a.get("clock_companion_shares_probe_error", 0) or 0) == 1
        parts.append(f"{dep} (temperature steps {_minutes(a['clock_companion_step_lag_s'])} from the probe's "
                     f"transitions over {a['clock_companion_steps_matched']} of them: own clock about "
                     f"{_minutes(a['clock_companion_offset_s'])} off, "
                     f"{'shares the error' if shares else 'does not share the error'})")
    if not parts:
        return f"no other logger at the station of {probe}"
    sharing = any(a and int(a.get("clock_companion_shares_probe_error", 0) or 0) == 1 for _, a in companions)
    how = (f"to correct all that share it: qcpipe apply-clock {probe} --station --by NAME" if sharing else
           f"to correct the probe alone: qcpipe apply-clock {probe} --by NAME")
    return "these loggers at the station may share the error: " + "; ".join(parts) + "; " + how


def clock_plan_lines(plan) -> list[str]:
    """What ``qcpipe apply-clock`` is about to write, for the person confirming it (a ClockCorrectionPlan)."""
    shift = plan.shift_s
    lines = [f"clock correction from {plan.evidence or plan.source}: {plan.verdict or 'no clock verdict (given by hand)'}"]
    if plan.measured_s is not None:
        lines.append(f"  measured transition offset {plan.measured_s:+.0f} s"
                     + (f" on data already corrected by {plan.applied_s:+.0f} s" if plan.applied_s else ""))
    lines.append(f"  correction: shift_s = {shift:g} (logger times {'ahead' if shift > 0 else 'behind'} by "
                 f"{abs(shift):.0f} s; every sample time moves {'back' if shift > 0 else 'forward'} by that much)"
                 + (f", {plan.why}" if plan.why else ""))
    lines.append(f"  register {plan.register}: clock_correction set on {len(plan.deployments)} deployment(s):")
    for d in plan.deployments:
        old = plan.replaced.get(d)
        notes = [f"replacing shift_s = {old:g}"] if old is not None else []
        a = plan.companions.get(d) or {}
        if int(a.get("clock_companion_found", 0) or 0):
            shares = int(a.get("clock_companion_shares_probe_error", 0) or 0) == 1
            notes.append(f"its temperature steps say its own clock is about "
                         f"{_minutes(a['clock_companion_offset_s'])} off: "
                         + ("shares the error" if shares else "does NOT share the error; check before confirming"))
        lines.append(f"    {d}" + (f" ({'; '.join(notes)})" if notes else ""))
    lines.append(f"  confirmed by {plan.confirmed_by} on {plan.confirmed_on}; then the deployments are re-run "
                 "from their archived raw files")
    return lines


def reading_counts_texts(name: str, counts: dict) -> list[str]:
    """What reading one raw file dropped or reordered, as sentences (none when nothing was).

    ``counts``: the file's ingest counts (``truncated_last_line``: a final record cut short, not read;
    ``out_of_order``: records earlier than the record before them, put in time order)."""
    out = []
    if counts.get("truncated_last_line"):
        out.append(f"{name}: its last line is cut short (the logger stopped or the download ended mid-line); "
                   "that record was not read")
    n = int(counts.get("out_of_order", 0))
    if n:
        out.append(f"{name}: {n} record(s) are earlier than the record before them in the file; the records "
                   "were sorted into time order (check the logger's clock was not reset during the deployment)")
    return out


def conflicts_dropped_text(dropped: int, kept: int) -> str:
    """A deployment read again whose conflicts file lost rows: how many, and that they were trimmed."""
    return (f"{dropped} conflicting record(s) listed in its conflicts file before are no longer in the deployment's "
            "records after its raw files were read again (outside the deployment window, or moved by new clock "
            f"settings): trimmed; the conflicts file now lists the {kept} that remain")
