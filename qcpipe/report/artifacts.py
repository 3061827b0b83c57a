"""Prefect artifacts for a run: a markdown table of flags and a link to the HTML report.

``publish_artifacts`` does nothing outside a flow run (the CLI without
Prefect, a test, a script), so callers need no check of their own.  Prefect is
imported only when it is already loaded: a process that never started a flow
is not slowed by it.
"""

from __future__ import annotations

import sys
from pathlib import Path

from ..checks.flags import FLAG_KEYS, FLAG_WORDS
from .model import NOTICE_KINDS, Notice, earlier_notices

SUMMARY_KEY = "qcpipe-run-summary"
REPORT_KEY = "qcpipe-run-report"


def _cell(value) -> str:
    """Text safe inside a markdown table cell."""
    return str(value).replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def summary_markdown(run: dict) -> str:
    """Markdown: the run's counts, a table of aggregate flags by class per station and variable, the
    barometric correction, and the notices (``Notice.as_dict()``), each with the words of its kind."""
    title = f"qcpipe run {int(run['run_id'])}" if run.get("run_id") is not None else "qcpipe run"
    results = run.get("results", [])
    lines = [f"# {title}", "",
             f"files: {int(run.get('files_seen', 0))} in the inbox, {int(run.get('ingested', 0))} ingested, "
             f"{len(run.get('quarantined', []))} quarantined, {len(run.get('skipped_in_inbox', []))} skipped this run; "
             f"{len(results)} dataset version(s), "
             f"{sum(int(r.get('samples', 0)) for r in results)} samples", ""]
    for q in run.get("quarantined", []):
        lines.append(f"* quarantined {_cell(q.get('name'))}: {_cell(q.get('reason'))}")
    for x in run.get("skipped_in_inbox", []):
        lines.append(f"* skipped {_cell(x)}")
    if run.get("quarantined") or run.get("skipped_in_inbox"):
        lines.append("")
    if results:
        lines.append("| station | deployment | variable | " + " | ".join(FLAG_WORDS[k] for k in FLAG_KEYS) + " |")
        lines.append("|---|---|---|" + "---:|" * len(FLAG_KEYS))
        for r in results:
            for var, per in sorted((r.get("flag_counts") or {}).items()):
                lines.append(f"| {_cell(r['station'])} | {_cell(r['deployment'])} v{int(r.get('version', 0)):03d} "
                             f"| {_cell(var)} | " + " | ".join(str(int(per.get(k, 0))) for k in FLAG_KEYS) + " |")
    else:
        lines.append("nothing new: no dataset written")
    baro = [r for r in results if (r.get("air_pressure") or {}).get("from_barometer") is not None]
    if baro:
        lines += ["", "## Barometric correction", ""]
        lines += [f"* {_cell(r['station'])}/{_cell(r['deployment'])}: barometer "
                  f"{_cell(r['air_pressure'].get('barometer') or '(no data yet)')} at "
                  f"{int(r['air_pressure']['from_barometer'])} samples, configured constant at "
                  f"{int(r['air_pressure']['from_constant'])} (flagged suspect)" for r in baro]
    notices = [Notice.from_dict(n) for r in results for n in r.get("notices", [])]
    notices += [Notice.from_dict(n) for n in run.get("notices", [])] + earlier_notices(run)
    if notices:
        lines += ["", "## Needs attention", ""] + [f"* {NOTICE_KINDS[n.kind]}: {_cell(n.line())}" for n in notices]
    return "\n".join(lines) + "\n"


def publish_artifacts(run: dict, report_path: str | Path) -> list | None:
    """Create the summary (key ``qcpipe-run-summary``) and report link (``qcpipe-run-report``) artifacts.

    Returns the artifacts' ids inside a flow run, None (and does nothing) outside one.
    """
    if "prefect" not in sys.modules:
        return None
    from prefect.context import FlowRunContext

    if FlowRunContext.get() is None:
        return None
    from prefect.artifacts import create_link_artifact, create_markdown_artifact

    url = Path(report_path).resolve().as_uri()
    ids = [create_markdown_artifact(summary_markdown(run), key=SUMMARY_KEY,
                                    description="aggregate flags by class per station and variable"),
           create_link_artifact(url, link_text="run report (HTML)", key=REPORT_KEY,
                                description="static HTML report of this run")]
    return [str(i) for i in ids]
