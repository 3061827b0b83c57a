"""The ``qcpipe`` command.

    qcpipe process   --workspace W      process the inbox once (the nightly flow)
    qcpipe holdings  --workspace W      list what the archive holds
    qcpipe check     --workspace W      check register, layouts and rule set; process nothing
    qcpipe rerun     --workspace W      re-QC what changed (or --deployment D) from stored data
    qcpipe apply-clock --workspace W D --by NAME   write a confirmed clock correction, re-run from raw files
    qcpipe diff      --workspace W D    flag changes between two versions of a deployment's dataset
    qcpipe lineage   --workspace W D    which raw files, rules and code made a deployment's dataset
    qcpipe audit     --workspace W      catalog accounting and SHA-256 fixity of the whole archive
    qcpipe package   --workspace W      BagIt archive packages per station and deployment
    qcpipe report    --workspace W --out DIR   a run report with the files it links, to open anywhere
    qcpipe schedule  --workspace W      serve the nightly flow on a cron schedule (needs a Prefect server)
    qcpipe inspect   --workspace W      a local web page to look at flags, mark periods and re-run QC

``process`` and ``rerun`` start the orchestrator only when the run has work: a run with
nothing to do is decided and recorded at once (``pipeline.run.run_if_nothing_to_do``).
Expected failures print one line ``qcpipe: error: ...`` and exit 2; output into a pipe closed early
(``qcpipe holdings | head``) ends quietly with status 141 (``EXIT_BROKEN_PIPE``).
"""

from __future__ import annotations

import argparse
import sys
import sqlite3
from pathlib import Path

from .errors import QcpipeError, is_transient

DEFAULT_WORKSPACE = "workspace.toml"
DEMO_WORKSPACE = "sample_raw/workspace.toml"

#: each command's example in its --help, on the demo (run from the repository's folder after 'make demo')
EXAMPLES = {
    "process": f"qcpipe process --workspace {DEMO_WORKSPACE}",
    "holdings": f"qcpipe holdings --workspace {DEMO_WORKSPACE} --status quarantined",
    "rerun": f"qcpipe rerun --workspace {DEMO_WORKSPACE} -d kc-mid-temp-2026-09",
    "apply-clock": f"qcpipe apply-clock --workspace {DEMO_WORKSPACE} kc-mid-probe-2026-09 --by \"A. Reviewer\"",
    "diff": f"qcpipe diff --workspace {DEMO_WORKSPACE} kc-mid-temp-2026-09",
    "lineage": f"qcpipe lineage --workspace {DEMO_WORKSPACE} kc-mid-temp-2026-09",
    "audit": f"qcpipe audit --workspace {DEMO_WORKSPACE}",
    "package": f"qcpipe package --workspace {DEMO_WORKSPACE} -d kc-mid-temp-2026-09 --out bags",
    "check": f"qcpipe check --workspace {DEMO_WORKSPACE}",
    "report": f"qcpipe report --workspace {DEMO_WORKSPACE} --out report-copy",
    "inspect": f"qcpipe inspect --workspace {DEMO_WORKSPACE}",
    "schedule": f"qcpipe schedule --workspace {DEMO_WORKSPACE} --cron \"0 2 * * *\"",
}


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="qcpipe", description="Quality control of shore-based logger downloads.")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def ws(sp):
        sp.add_argument("-w", "--workspace", default=DEFAULT_WORKSPACE,
                        help=f"workspace file naming register, layouts, rules, inbox, archive "
                             f"(default: {DEFAULT_WORKSPACE} in the current folder; the demo's is {DEMO_WORKSPACE})")

    sp = sub.add_parser("process", help="process new files in the inbox once (runs the nightly flow)")
    ws(sp)
    sp.add_argument("--dask", metavar="ADDRESS", help="spread the work over this Dask cluster "
                    "(e.g. tcp://127.0.0.1:8786; needs PREFECT_API_URL of a running Prefect server)")
    sp.add_argument("-q", "--quiet", action="store_true", help="print only the one-line outcome")
    sp.add_argument("-v", "--verbose", action="store_true", help="also show the orchestrator's info logs")

    sp = sub.add_parser("holdings", help="list raw files, datasets and runs in the archive")
    ws(sp)
    sp.add_argument("--what", choices=["datasets", "raw", "runs", "all"], default="all",
                    help="which table to list (default all)")
    sp.add_argument("--station", help="only this station")
    sp.add_argument("--deployment", help="only this deployment")
    sp.add_argument("--status", choices=["archived", "quarantined"], help="raw files with this status only "
                    "(lists only raw files unless --what says otherwise)")
    sp.add_argument("--all-versions", action="store_true", help="list every dataset version, not only the latest")

    sp = sub.add_parser("rerun", help="re-QC from stored data what changed, or the given deployments")
    ws(sp)
    sp.add_argument("-d", "--deployment", action="append", help="re-QC this deployment (repeatable); one whose "
                    "latest dataset was made from its current inputs is left as it is (says 'nothing changed')")
    sp.add_argument("--even-if-unchanged", action="store_true", help="with -d: write a new version even when "
                    "nothing it is made from changed")
    sp.add_argument("--dask", metavar="ADDRESS", help="spread the work over this Dask cluster (needs PREFECT_API_URL)")
    sp.add_argument("-q", "--quiet", action="store_true", help="print only the one-line outcome")
    sp.add_argument("-v", "--verbose", action="store_true", help="also show the orchestrator's info logs")

    sp = sub.add_parser("apply-clock", help="write a confirmed clock correction into the register and re-run "
                        "the deployment (or its station's loggers) from the archived raw files")
    ws(sp)
    sp.add_argument("deployment", help="deployment whose latest dataset's clock verdict gives the correction")
    sp.add_argument("--by", required=True, metavar="NAME", help="who confirms the correction (recorded)")
    sp.add_argument("--station", action="store_true", help="also correct every other deployment of its station "
                    "that overlaps it in time (loggers that shared the error)")
    sp.add_argument("--seconds", type=float, metavar="S", help="the correction to write, seconds the logger "
                    "times are ahead of true time (default: from the suspected clock verdict)")
    sp.add_argument("--replace", action="store_true", help="replace a correction already in the register "
                    "(the new one is the total correction)")
    sp.add_argument("--yes", action="store_true", help="do not ask for confirmation")
    sp.add_argument("--register-only", action="store_true", help="write the register and stop; the next "
                    "'qcpipe rerun' or 'qcpipe process' reads the raw files again")
    sp.add_argument("--dask", metavar="ADDRESS", help="spread the work over this Dask cluster (needs PREFECT_API_URL)")
    sp.add_argument("-q", "--quiet", action="store_true", help="print only the one-line outcome of the re-run")
    sp.add_argument("-v", "--verbose", action="store_true", help="also show the orchestrator's info logs")

    sp = sub.add_parser("diff", help="flag changes between two versions of a deployment's dataset")
    ws(sp)
    sp.add_argument("deployment", help="deployment id")
    sp.add_argument("--from", dest="old", type=int, help="older version (default: the one before --to)")
    sp.add_argument("--to", dest="new", type=int, help="newer version (default: the latest)")

    sp = sub.add_parser("lineage", help="raw files, rules and code version behind a deployment's dataset")
    ws(sp)
    sp.add_argument("deployment", help="deployment id")
    sp.add_argument("--version", type=int, help="dataset version (default: the latest)")

    sp = sub.add_parser("audit", help="check that every raw file is accounted for and every hash matches")
    ws(sp)

    sp = sub.add_parser("package", help="write BagIt archive packages (RFC 8493) per station and deployment")
    ws(sp)
    sp.add_argument("-d", "--deployment", action="append", help="only this deployment (repeatable)")
    sp.add_argument("-o", "--out", help="folder for the bags (default: <archive>/packages)")

    sp = sub.add_parser("report", help="copy a run report and the datasets, products and conflicts files it "
                        "links into a folder outside the archive, so it opens anywhere")
    ws(sp)
    sp.add_argument("-o", "--out", required=True, help="folder for the copy (outside the archive)")
    sp.add_argument("--run", type=int, metavar="ID", help="the run whose report to copy (default: the newest)")

    sp = sub.add_parser("check", help="validate configuration without processing anything")
    ws(sp)
    sp.add_argument("--register", help="check this station register file alone")
    sp.add_argument("--layouts", help="check this logger layout file alone")
    sp.add_argument("--rules", help="check this rule set file alone")

    sp = sub.add_parser("inspect", help="serve a local web page to look at flags, mark periods and re-run QC")
    ws(sp)
    sp.add_argument("--port", type=int, default=8750, help="port to serve on (default 8750)")
    sp.add_argument("--host", default="127.0.0.1", help="address to serve on (default 127.0.0.1, this machine "
                    "only; any other lets others on the network change annotations and start re-runs)")

    sp = sub.add_parser("schedule", help="serve the nightly flow on a cron schedule (needs PREFECT_API_URL)")
    ws(sp)
    sp.add_argument("--cron", default="0 2 * * *", help="cron expression (default '0 2 * * *', 02:00)")
    sp.add_argument("--timezone", default="UTC", help="time zone of the cron expression (default UTC)")
    for name, sp in sub.choices.items():
        sp.formatter_class = argparse.RawDescriptionHelpFormatter
        sp.epilog = f"example, on the demo (from the repository's folder, after 'make demo'):\n  {EXAMPLES[name]}"
    return p


def _take_archive(args):
    """The workspace's context, loaded and checked (one line on any problem), with the archive's lock
    taken for the rest of the command (one run at a time; held until exit)."""
    from .archive.lock import ArchiveLock
    from .pipeline.context import load_context

    ctx = load_context(args.workspace)
    ArchiveLock(ctx.paths.root).__enter__()
    return ctx


def _prepare_flow(args):
    """Settings for the orchestrator (call before it is imported), the archive's lock taken and the free
    space of both disks checked first: one line, at once, instead of a failing start."""
    import os

    from .config import load_workspace
    from .flows.prefect_settings import check_orchestrator_space, configure_prefect, orchestrator_home

    ws = load_workspace(args.workspace)
    _take_archive(args)   # fail fast with one line before the orchestrator starts
    _check_archive_space(ws.archive)
    home = orchestrator_home(ws.archive)
    check_orchestrator_space(home)
    if args.verbose:
        os.environ.setdefault("PREFECT_LOGGING_HANDLERS_CONSOLE_LEVEL", "INFO")
        os.environ.setdefault("PREFECT_LOGGING_LEVEL", "INFO")
    else:
        # qcpipe prints the outcome itself (one line for an expected failure); the orchestrator's
        # own record of a failed run, with its traceback, stays in its database
        os.environ.setdefault("PREFECT_LOGGING_HANDLERS_CONSOLE_LEVEL", "CRITICAL")
    configure_prefect(home)
    return ws


#: free space the archive's disk needs before the orchestrator starts, in kB: less than one dataset of the
#: demo (125-220 kB each), so the run would stop at its first writes anyway: it stops at once instead; above
#: it a disk that fills stops the run with the one line of ``files.storage_error`` (or the catalog's)
ARCHIVE_MIN_FREE_KB = 256


def _check_archive_space(archive: Path) -> None:
    from .errors import ArchiveError
    from .files import free_bytes

    free = free_bytes(archive)
    if free < ARCHIVE_MIN_FREE_KB * 2**10:
        raise ArchiveError(f"disk full: {free / 2**10:.0f} kB free on the disk of archive {archive}: free space "
                           "there and run again (nothing was started)")


def _on_orchestrator(args, ws, fn, *a):
    """``fn(*a)``, a flow; an unexpected failure while the orchestrator's disk is (nearly) full becomes one
    line (the embedded server answers a full disk with a server error, HTTP 500)."""
    from .errors import ArchiveError, QcpipeError
    from .files import free_bytes
    from .flows.prefect_settings import ORCHESTRATOR_MIN_FREE_MB, orchestrator_home

    try:
        return _run_with_progress(args, fn, *a)
    except (QcpipeError, KeyboardInterrupt):
        raise
    except Exception:
        home = orchestrator_home(ws.archive)
        if free_bytes(home) >= ORCHESTRATOR_MIN_FREE_MB * 2**20 // 4:
            raise
        raise ArchiveError(f"disk full: the orchestrator's folder {home} ran out of space during the run "
                           f"({free_bytes(home) / 2**20:.1f} MB free): free space on that disk, or set "
                           "QCPIPE_STATE_DIR to a folder on another one, and run again (the archive keeps every "
                           "file completed; the next run finishes the work)") from None


def _where(args) -> str:
    """Where the run's tasks go, for the command's first line."""
    import os

    if args.dask:
        return f"Dask cluster {args.dask}"
    from .flows.embedded_server import is_embedded

    url = os.environ.get("PREFECT_API_URL")
    return f"Prefect server {url}" if url and not is_embedded(url) else "Prefect, local mode"


def _start_orchestrator(args) -> None:
    """The run's embedded orchestrator server, tied to this process, so a killed run leaves none behind
    (``flows/embedded_server.py``).  Before the orchestrator is imported (it reads its settings then).
    None when PREFECT_API_URL is set, nor for a Dask cluster (it needs a server of the user's own: the
    flow says so in one line)."""
    import os

    from .flows.embedded_server import start_embedded_server

    if not args.dask:
        start_embedded_server(os.environ["PREFECT_HOME"])


def _without_orchestrator(args, deployments=None, kind="nightly", even_if_unchanged=False):
    """The run's summary when it has nothing to do (recorded, no orchestrator started); None when it has work.

    Imports no orchestrator and none of the QC's libraries (``python -X importtime``; the test
    sets ``QCPIPE_DEBUG_MODULES`` to list what was imported)."""
    from .pipeline.run import run_if_nothing_to_do

    ctx = _take_archive(args)
    summary = run_if_nothing_to_do(ctx, deployments, kind=kind, even_if_unchanged=even_if_unchanged)
    if summary is not None and not args.quiet:
        what = (f"processing inbox {ctx.inbox} -> archive {ctx.paths.root}" if kind == "nightly" else
                f"re-running QC in archive {ctx.paths.root}")
        print(f"qcpipe: {what} (nothing to do: orchestrator not started)", flush=True)
    return summary


def _debug_modules() -> None:
    """With ``QCPIPE_DEBUG_MODULES=FILE``, write the names of the modules imported so far to FILE
    (the tests check that a nothing-to-do run never imports the orchestrator)."""
    import os

    out = os.environ.get("QCPIPE_DEBUG_MODULES")
    if out:
        Path(out).write_text("\n".join(sorted(sys.modules)) + "\n", encoding="utf-8")


def _run_with_progress(args, fn, *a):
    from . import progress

    if not args.quiet:
        progress.install()
    try:
        return fn(*a)
    finally:
        progress.uninstall()


def _print_summary(summary, quiet: bool) -> None:
    from .report.summary import summary_lines

    lines = summary_lines(summary)
    print("\n".join(lines[:1] if quiet else lines))
    if summary.report and not quiet:
        print(f"report: {summary.report}")
    if not quiet and summary.results and sys.stdout.isatty():
        from rich.console import Console
        from rich.table import Table

        table = Table(title="aggregate flags by station and variable")
        for col in ("station", "deployment", "variable", "pass", "not eval.", "suspect", "fail", "missing"):
            table.add_column(col, justify="right" if col not in ("station", "deployment", "variable") else "left")
        for r in summary.results:
            for var, per in r.flag_counts.items():
                table.add_row(r.station, r.deployment, var, *(str(per.get(k, 0)) for k in ("1", "2", "3", "4", "9")))
        Console().print(table)


def _process(args) -> int:
    idle = _without_orchestrator(args)
    if idle is not None:
        _print_summary(idle, args.quiet)
        return 0
    ws = _prepare_flow(args)
    if not args.quiet:
        print(f"qcpipe: processing inbox {ws.inbox} -> archive {ws.archive} ({_where(args)})", flush=True)
    _start_orchestrator(args)
    from .flows.nightly import nightly_flow_for

    flow = nightly_flow_for(args.dask)
    _print_summary(_on_orchestrator(args, ws, flow, str(ws.path), args.dask), args.quiet)
    return 0


def _rerun(args) -> int:
    if args.even_if_unchanged and not args.deployment:
        raise QcpipeError("--even-if-unchanged needs the deployments to re-QC: add -d DEPLOYMENT")
    idle = _without_orchestrator(args, args.deployment, kind="rerun", even_if_unchanged=args.even_if_unchanged)
    if idle is not None:
        _print_summary(idle, args.quiet)
        return 0
    ws = _prepare_flow(args)
    if not args.quiet:
        print(f"qcpipe: re-running QC in archive {ws.archive} ({_where(args)})", flush=True)
    _start_orchestrator(args)
    from .flows.rerun import rerun_flow_for

    flow = rerun_flow_for(args.dask)
    _print_summary(_on_orchestrator(args, ws, flow, str(ws.path), args.deployment or None, args.dask,
                                    args.even_if_unchanged), args.quiet)
    return 0


def _apply_clock(args) -> int:
    from .pipeline import load_context
    from .pipeline.clock_fix import plan_clock_correction, write_clock_correction
    from .report.words import clock_plan_lines

    ws = _prepare_flow(args)          # the archive's lock is held from here: no run reads the register meanwhile
    ctx = _context(args)
    plan = plan_clock_correction(ctx, args.deployment, confirmed_by=args.by, station=args.station,
                                 seconds=args.seconds, replace=args.replace)
    print("\n".join(clock_plan_lines(plan)), flush=True)
    if not args.yes:
        try:
            answer = input("write this correction into the register and re-run? [y/N] ")
        except EOFError:
            answer = ""
        if answer.strip().lower() not in ("y", "yes"):
            print("qcpipe: not confirmed; nothing written")
            return 1
    write_clock_correction(ctx, plan)
    print(f"qcpipe: clock_correction written to {plan.register} for {', '.join(plan.deployments)}", flush=True)
    if args.register_only:
        print("qcpipe: run 'qcpipe rerun' to read their raw files again with the correction")
        return 0
    load_context(ws.path)             # the edited register is valid before the orchestrator starts
    _start_orchestrator(args)
    from .flows.rerun import rerun_flow_for

    flow = rerun_flow_for(args.dask)
    _print_summary(_on_orchestrator(args, ws, flow, str(ws.path), plan.deployments, args.dask), args.quiet)
    return 0


def _context(args):
    from .errors import ArchiveError
    from .pipeline import load_context

    ctx = load_context(args.workspace)
    if not ctx.paths.catalog.exists():
        raise ArchiveError(f"archive {ctx.paths.root} has no catalog yet; run 'qcpipe process' first")
    return ctx


def _versions(ctx, deployment):
    from .errors import ArchiveError

    rows = ctx.catalog.dataset_versions(deployment)
    if not rows:
        raise ArchiveError(f"no dataset of deployment {deployment!r} in {ctx.paths.root}; "
                           "see 'qcpipe holdings' for the ids")
    return {r["version"]: r for r in rows}


def _diff(args) -> int:
    from .diff import flag_diff_files
    from .errors import ArchiveError

    ctx = _context(args)
    versions = _versions(ctx, args.deployment)
    if len(versions) == 1 and args.old is None and args.new in (None, *versions):
        (v, r), = versions.items()
        print(f"deployment {args.deployment!r} has one dataset version, v{v:03d}: nothing to compare it with\n"
              f"  v{v:03d}: {Path(r['path']).name}, made {r['created']}, {r['samples']} samples, "
              f"rule set {r['rules_name']}, from {len(r['raw_sha256'])} raw file(s)\n"
              f"a second version is written when its inputs change (rules, register, raw files) or by "
              f"'qcpipe rerun -d {args.deployment}'; 'qcpipe lineage' shows what v{v:03d} was made from")
        return 0
    new = args.new or max(versions)
    old = args.old or max((v for v in versions if v < new), default=None)
    for v in (old, new):
        if v is None or v not in versions:
            raise ArchiveError(f"deployment {args.deployment!r} has versions {sorted(versions)}; "
                               "choose two of them with --from and --to")
        if versions[v]["pruned"] or not Path(versions[v]["path"]).exists():
            raise ArchiveError(f"version {v} of {args.deployment!r} is no longer kept (retention setting)")
    d = flag_diff_files(versions[old]["path"], versions[new]["path"], old_inputs=versions[old].get("qc_inputs"),
                        new_inputs=versions[new].get("qc_inputs"))
    print("\n".join(d.lines()))
    return 0


def _lineage(args) -> int:
    from .errors import ArchiveError

    ctx = _context(args)
    versions = _versions(ctx, args.deployment)
    v = args.version or max(versions)
    if v not in versions:
        raise ArchiveError(f"deployment {args.deployment!r} has versions {sorted(versions)}")
    r = versions[v]
    by_sha = {x["sha256"]: x for x in ctx.catalog.raw_files()}
    print(f"dataset {Path(r['path']).name} (version {v}, made {r['created']}, sha256 {r.get('sha256') or '?'})")
    print(f"  software: qcpipe {r['software_version']}")
    kept = {k: ctx.paths.config_snapshot(k, r[f"{k}_sha256"]) for k in ("rules", "register")}
    kept = {k: f" (copy as used: {p.relative_to(ctx.paths.root)})" if p.is_file() else "" for k, p in kept.items()}
    print(f"  rule set: {r['rules_name']} sha256 {r['rules_sha256']}{kept['rules']}")
    print(f"  station register: sha256 {r['register_sha256']}{kept['register']}")
    print(f"  QC inputs: sha256 {r.get('qc_key') or '?'}")
    print(f"  raw files ({len(r['raw_sha256'])}):")
    for sha in r["raw_sha256"]:
        x = by_sha.get(sha, {})
        print(f"    {sha[:12]} {x.get('original_name', '?'):<34} {_iso_utc(x.get('time_start'))} .. "
              f"{_iso_utc(x.get('time_end'))}  from {x.get('original_path', '?')}")
    inputs = r.get("qc_inputs") or {}
    for var, rules in (inputs.get("rules") or {}).items():
        print(f"  rules for {var}: {rules}")
    for a in inputs.get("annotations") or []:
        print(f"  annotation: {a['start']} to {a['end']} flag {a['flag']} ({a['reviewer']}): {a['reason']}")
    return 0


def _iso_utc(value) -> str:
    """A time from the catalog (ISO text to the nanosecond, or integer nanoseconds since 1970-01-01, UTC) as
    ISO 8601 UTC to the second, e.g. ``2026-09-14T10:19:58Z`` (truncated, as ``qcpipe diff`` shows times)."""
    import numpy as np

    if value is None or str(value).strip() == "":
        return "?"
    text = str(value).strip()
    t = np.datetime64(int(text), "ns") if text.lstrip("-").isdigit() else np.datetime64(text.removesuffix("Z"))
    return np.datetime_as_string(t.astype("datetime64[s]"), unit="s") + "Z"


def _audit(args) -> int:
    from .archive.audit import audit_archive

    ctx = _context(args)
    res = audit_archive(ctx.paths, ctx.catalog, ctx.inbox)
    print("\n".join(res.lines()))
    return 0 if res.ok else 1


def _package(args) -> int:
    from .archive.bag import write_bag

    from .archive.lock import archive_is_read_only
    from .errors import ArchiveError

    ctx = _context(args)
    out = Path(args.out) if args.out else ctx.paths.root / "packages"
    if not args.out and archive_is_read_only(ctx.paths.root):
        raise ArchiveError(f"archive {ctx.paths.root} is read-only: write the bags to a folder elsewhere with "
                           "--out FOLDER")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise ArchiveError(f"cannot write bags to {out} ({err.strerror}): choose a writable folder with --out "
                           "FOLDER") from None
    deps = args.deployment or [d["deployment"] for d in ctx.catalog.datasets()]
    for dep in sorted(set(deps)):
        _versions(ctx, dep)
        print(f"bag: {write_bag(ctx, dep, out)}")
    return 0


def _report(args) -> int:
    from .config import load_workspace
    from .report.export import export_report

    ws = load_workspace(args.workspace)
    index, written = export_report(ws.archive, Path(args.out), args.run)
    print(f"report: {len(written)} file(s) copied into {Path(args.out).resolve()}; open {index}")
    return 0


def _holdings(args) -> int:
    from .archive.catalog import Catalog
    from .checks.flags import FLAG_WORDS
    from .config import load_workspace

    ws = load_workspace(args.workspace)
    cat_path = ws.archive / "catalog.sqlite"
    if not cat_path.exists():
        print(f"archive {ws.archive} is empty (no catalog yet); run 'qcpipe process' first")
        return 0
    cat = Catalog(cat_path)
    what = "raw" if args.status and args.what == "all" else args.what     # a status is of raw files only
    where = {k: v for k, v in (("station", args.station), ("deployment", args.deployment)) if v}
    if what in ("datasets", "all"):
        rows = cat.datasets(**where)
        if not args.all_versions:
            latest = {}
            for r in rows:
                latest[r["deployment"]] = r
            rows = list(latest.values())
        print(f"datasets ({len(rows)}):")
        for r in rows:
            print(f"  {r['station']:<10} {r['deployment']:<22} v{r['version']:03d} {r['samples']:>7} samples  "
                  f"{Path(r['path']).name}")
            for var, per in r["flag_counts"].items():
                counts = ", ".join(f"{FLAG_WORDS[k]} {per[k]}" for k in FLAG_WORDS if per.get(k))
                print(f"      {var:<22} aggregate flags: {counts}")
    if what in ("raw", "all"):
        rows = cat.raw_files(**where, **({"status": args.status} if args.status else {}))
        print(f"raw files ({len(rows)}):")
        for r in rows:
            where = f"{r['station']}/{r['deployment']}" if r["status"] == "archived" else r["reason"]
            print(f"  {r['sha256'][:12]} {r['status']:<11} {r['original_name']:<36} {where}")
    if what in ("runs", "all"):
        rows = cat.runs()
        print(f"runs ({len(rows)}):")
        for r in rows:
            c = r.get("counts") or {}
            print(f"  #{r['id']:<4} {r['started']} -> {r['ended'] or '(not ended)'} {r['outcome'] or '':<12} "
                  f"ingested {c.get('ingested', 0)}, quarantined {c.get('quarantined', 0)}")
    return 0


def _check(args) -> int:
    from .config import load_layouts, load_register, load_rules, load_workspace

    if args.register or args.layouts or args.rules:
        if args.register:
            r = load_register(args.register)
            print(f"ok: register {args.register}: {len(r.station)} stations, {len(r.instrument)} instruments, "
                  f"{len(r.deployment)} deployments (sha256 {r.sha256[:12]})")
        if args.layouts:
            lay = load_layouts(args.layouts)
            print(f"ok: layouts {args.layouts}: {', '.join(lay.layouts)}")
        if args.rules:
            rs = load_rules(args.rules)
            print(f"ok: rule set {args.rules}: {rs.name} (sha256 {rs.sha256[:12]})")
        return 0
    ws = load_workspace(args.workspace)
    reg, lay, rules = ws.load()
    if ws.inbox.is_dir():                   # a link from the inbox into the archive is refused here too
        from .ingest.discover import list_inbox
        from .pipeline.inbox import check_no_link_into_archive

        check_no_link_into_archive(ws.path, ws.inbox, ws.archive, list_inbox(ws.inbox)[1])
    print(f"ok: register {ws.register_path.name}: {len(reg.station)} stations, {len(reg.instrument)} instruments, "
          f"{len(reg.deployment)} deployments (sha256 {reg.sha256[:12]})")
    print(f"ok: layouts {ws.layouts_path.name}: {', '.join(lay.layouts)}")
    print(f"ok: rule set {ws.rules_path.name}: {rules.name} (sha256 {rules.sha256[:12]})")
    return 0


def _schedule(args) -> int:
    import os

    from .config import load_workspace
    from .errors import ConfigError
    from .flows.prefect_settings import configure_prefect, orchestrator_home

    ws = load_workspace(args.workspace)
    ws.load()
    if not os.environ.get("PREFECT_API_URL"):
        raise ConfigError("schedules need a running Prefect server: start one with 'prefect server start' and "
                          "set PREFECT_API_URL (README: 'Running it every night')")
    configure_prefect(orchestrator_home(ws.archive))
    from prefect.schedules import Cron

    from .flows.nightly import nightly

    nightly.serve(name="qcpipe-nightly", schedule=Cron(args.cron, timezone=args.timezone),
                  parameters={"workspace": str(ws.path)})
    return 0


def _inspect(args) -> int:
    from .review import serve

    if args.host not in ("127.0.0.1", "localhost", "::1"):
        print(f"qcpipe: warning: serving on {args.host}, not only this machine: anyone who can reach it and "
              "opens the page can change annotations and start re-runs", file=sys.stderr, flush=True)
    _context(args)                     # one line, not a page, when the archive has no catalog yet
    serve(args.workspace, host=args.host, port=args.port, announce=lambda s: print(s, flush=True))
    return 0


# the exit status of a command whose output pipe was closed early: 128 + SIGPIPE (13), what a shell
# shows for a program the signal ended (POSIX, "Exit Status for Commands"); Python ignores SIGPIPE,
# so qcpipe sees BrokenPipeError instead and ends with this status, without a traceback
EXIT_BROKEN_PIPE = 141


def main(argv: list[str] | None = None) -> int:
    """Run one qcpipe command; its exit status. Output to a pipe closed early (``qcpipe holdings | head``)
    ends quietly with ``EXIT_BROKEN_PIPE``."""
    import os

    try:
        status = _main(argv)
        sys.stdout.flush()                 # a closed pipe shows here, not at interpreter exit
        return status
    except BrokenPipeError:
        # nothing more can be written; point stdout at /dev/null so the flush at exit cannot fail again
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
        return EXIT_BROKEN_PIPE


def _main(argv: list[str] | None) -> int:
    try:
        args = _parser().parse_args(argv)
    except SystemExit:
        sys.stdout.flush()                 # --help into a closed pipe: BrokenPipeError, handled in main
        raise
    handler = {"process": _process, "holdings": _holdings, "check": _check, "schedule": _schedule,
               "rerun": _rerun, "diff": _diff, "lineage": _lineage, "audit": _audit,
               "package": _package, "report": _report, "apply-clock": _apply_clock, "inspect": _inspect}[args.command]
    try:
        return handler(args)
    except QcpipeError as err:
        print(f"qcpipe: error: {err}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        raise                              # the reader went away: main ends quietly
    except (OSError, sqlite3.OperationalError) as err:
        if not is_transient(err):
            raise                          # not an expected failure: keep the traceback for the bug report
        where = f" ({err.filename})" if getattr(err, "filename", None) else ""
        print(f"qcpipe: error: {getattr(err, 'strerror', None) or err}{where}, still failing after the tasks' "
              "retries: check the archive's disk or network share and run again (only complete files were "
              "kept; the next run finishes the work)", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("qcpipe: interrupted", file=sys.stderr)
        return 130
    finally:
        _debug_modules()


if __name__ == "__main__":
    sys.exit(main())
