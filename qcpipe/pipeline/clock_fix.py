"""From a clock verdict to corrected data: plan a confirmed clock correction, write it, re-run.

``plan_clock_correction`` reads the deployment's latest dataset (its clock verdict and any
correction already in its times) and the register, and says what would be written;
``apply_clock_correction`` writes it into the register (comments and layout kept, validated
first) and re-runs the deployments from their archived raw files with :func:`run.rerun`.
Nothing is written without a plan a person confirmed (the CLI asks).

The register holds the *total* correction of a deployment (``clock_correction.shift_s``).
A verdict measured on data already corrected is a residual, so a replacing correction is
the applied one plus the residual; ``seconds`` given by hand is the total.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path

from ..archive.ncio import read_attrs
from ..config.register_edit import check_clock_corrections, correction_entry, write_clock_corrections
from ..errors import ConfigError
from ..report.model import RunSummary
from ..tide.clock import whole_hours_of
from .context import Context, load_context
from .run import Runner, rerun


@dataclass
class ClockCorrectionPlan:
    """What a confirmed clock correction writes, and why."""
    source: str                           # the deployment whose verdict it came from
    evidence: str                         # its dataset ("deployment v003"), "" without one
    verdict: str                          # the verdict's text ("" when given by hand without one)
    measured_s: float | None              # the verdict's transition offset, s (None without one)
    applied_s: float                      # correction already in the times of that dataset, s
    shift_s: float                        # the total correction written, s (+: logger ahead)
    why: str                              # how shift_s was chosen
    deployments: list[str]                # corrected deployments, the source first
    replaced: dict[str, float]            # deployment -> the shift_s it had
    confirmed_by: str
    confirmed_on: dt.date
    register: str
    entries: dict[str, dict] = field(default_factory=dict)
    companions: dict[str, dict] = field(default_factory=dict)   # deployment -> its clock_companion_* attributes


def _latest_attrs(ctx: Context, deployment_id: str) -> tuple[dict, str]:
    row = ctx.catalog.latest_dataset(deployment_id) if ctx.paths.catalog.exists() else None
    if row is None or not Path(row["path"]).exists():
        return {}, ""
    return read_attrs(row["path"]), f"{deployment_id} v{row['version']:03d}"


def plan_clock_correction(ctx: Context, deployment_id: str, *, confirmed_by: str, station: bool = False,
                          seconds: float | None = None, replace: bool = False,
                          today: dt.date | None = None) -> ClockCorrectionPlan:
    """The correction of ``deployment_id`` (and with ``station`` every deployment of its station overlapping it).

    Without ``seconds`` the latest dataset's suspected clock verdict gives the shift:
    the applied correction plus the measured offset, taken as whole hours when within
    5 min of them (a UTC-offset or daylight-saving setting), else to the second.
    ConfigError (one line) when there is nothing to correct, a deployment already has a
    correction and ``replace`` is not given, or an argument is wrong.
    """
    reg = ctx.register
    if deployment_id not in {d.id for d in reg.deployment}:
        raise ConfigError(f"{reg.path}: no deployment {deployment_id!r} in the register; "
                          "see 'qcpipe holdings' for the ids")
    if not confirmed_by or not confirmed_by.strip():
        raise ConfigError("apply-clock: --by is empty; name the person who confirms the correction")
    attrs, evidence = _latest_attrs(ctx, deployment_id)
    suspected = int(attrs.get("clock_error_suspected", 0) or 0) == 1
    verdict = str(attrs.get("clock_verdict", "")) if attrs else ""
    measured = attrs.get("clock_transition_offset_s")
    measured = None if measured is None else float(measured)
    applied = float(attrs.get("clock_correction_applied_s", 0.0) or 0.0)
    if seconds is None:
        if not suspected or measured is None:
            found = f"{evidence}: {verdict or 'no clock verdict'}" if evidence else "no dataset yet"
            raise ConfigError(f"deployment {deployment_id}: no suspected clock error in its latest dataset "
                              f"({found}); nothing to correct (give --seconds S to apply a correction measured "
                              "another way)")
        total = applied + measured
        hours = whole_hours_of(total)
        shift, why = ((3600.0 * hours, f"whole hours: the measured {total:+.0f} s is within 5 min of {hours:+d} h")
                      if hours is not None else (float(round(total)), "the measured offset to the second"))
    else:
        shift, why = float(seconds), "given by hand (--seconds)"
        if not suspected:
            verdict = ""
    deployments = [deployment_id] + (reg.station_companions(deployment_id) if station else [])
    replaced = {d: reg.deployment_by_id(d).correction_seconds for d in deployments
                if reg.deployment_by_id(d).clock_correction is not None}
    if replaced and not replace:
        have = ", ".join(f"{d} (shift_s = {s:g})" for d, s in replaced.items())
        raise ConfigError(f"{reg.path}: {have} already carry a clock_correction, the total correction of "
                          "their times; give --replace to replace it (the new shift is the total, not an addition)")
    on = today or dt.datetime.now(dt.timezone.utc).date()
    entry = correction_entry(shift_s=shift, confirmed_by=confirmed_by.strip(), confirmed_on=on,
                             verdict=verdict or "none: given by hand", evidence=evidence)
    plan = ClockCorrectionPlan(deployment_id, evidence, verdict, measured if suspected else None, applied, shift,
                               why, deployments, replaced, confirmed_by.strip(), on, str(reg.path),
                               {d: dict(entry) for d in deployments})
    for d in deployments[1:]:
        plan.companions[d] = {k: v for k, v in _latest_attrs(ctx, d)[0].items() if k.startswith("clock_companion_")}
    check_clock_corrections(reg.path, plan.entries)        # nothing invalid is shown for confirmation
    return plan


def write_clock_correction(ctx: Context, plan: ClockCorrectionPlan) -> Context:
    """Write the plan's entries into the register (validated first, atomically); the context loaded again."""
    write_clock_corrections(ctx.register.path, plan.entries)
    return load_context(ctx.workspace_path)


def apply_clock_correction(ctx: Context, plan: ClockCorrectionPlan, runner: Runner) -> RunSummary:
    """Write the confirmed plan into the register and re-run its deployments from their archived raw files."""
    return rerun(write_clock_correction(ctx, plan), runner, plan.deployments)
