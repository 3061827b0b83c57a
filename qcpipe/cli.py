"""The ``qcpipe`` command.

    qcpipe process   --workspace W      process the inbox once (the nightly flow)
    qcpipe holdings  --workspace W      list what the archive holds
    qcpipe check     --workspace W      check register, layouts and rule set; process nothing
    qcpipe schedule  --workspace W      serve the nightly flow on a cron schedule (needs a Prefect server)

Expected failures print one line ``qcpipe: error: ...`` and exit 2.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .errors import QcpipeError

DEFAULT_WORKSPACE = "qcpipe-workspace.toml"


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="qcpipe", description="Quality control of shore-based logger downloads.")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def ws(sp):
        sp.add_argument("-w", "--workspace", default=DEFAULT_WORKSPACE,
                        help=f"workspace file naming register, layouts, rules, inbox, archive "
                             f"(default: {DEFAULT_WORKSPACE})")

    sp = sub.add_parser("process", help="process new files in the inbox once (runs the nightly flow)")
    ws(sp)
    sp.add_argument("-q", "--quiet", action="store_true", help="print only the one-line outcome")
    sp.add_argument("-v", "--verbose", action="store_true", help="also show the orchestrator's info logs")

    sp = sub.add_parser("holdings", help="list raw files, datasets and runs in the archive")
    ws(sp)
    sp.add_argument("--what", choices=["datasets", "raw", "runs", "all"], default="all",
                    help="which table to list (default all)")

    sp = sub.add_parser("check", help="validate configuration without processing anything")
    ws(sp)
    sp.add_argument("--register", help="check this station register file alone")
    sp.add_argument("--layouts", help="check this logger layout file alone")
    sp.add_argument("--rules", help="check this rule set file alone")

    sp = sub.add_parser("schedule", help="serve the nightly flow on a cron schedule (needs PREFECT_API_URL)")
    ws(sp)
    sp.add_argument("--cron", default="0 2 * * *", help="cron expression (default '0 2 * * *', 02:00)")
    sp.add_argument("--timezone", default="UTC", help="time zone of the cron expression (default UTC)")
    return p


def _process(args) -> int:
    import os

    from .config import load_workspace
    from .orchestration import configure_prefect

    ws = load_workspace(args.workspace)
    ws.load()   # fail fast with one line before the orchestrator starts
    if args.verbose:
        os.environ.setdefault("PREFECT_LOGGING_HANDLERS_CONSOLE_LEVEL", "INFO")
        os.environ.setdefault("PREFECT_LOGGING_LEVEL", "INFO")
    configure_prefect(ws.archive / ".prefect")
    from .flows.nightly import nightly

    if not args.quiet:
        print(f"qcpipe: processing inbox {ws.inbox} -> archive {ws.archive} (Prefect, local mode)", flush=True)
    summary = nightly(str(ws.path))
    lines = summary.lines()
    print("\n".join(lines[:1] if args.quiet else lines))
    return 0


def _holdings(args) -> int:
    from .archive.catalog import Catalog
    from .config import load_workspace

    ws = load_workspace(args.workspace)
    cat_path = ws.archive / "catalog.sqlite"
    if not cat_path.exists():
        print(f"archive {ws.archive} is empty (no catalog yet); run 'qcpipe process' first")
        return 0
    cat = Catalog(cat_path)
    if args.what in ("datasets", "all"):
        rows = cat.datasets()
        print(f"datasets ({len(rows)}):")
        for r in rows:
            agg = {}
            for per in r["flag_counts"].values():
                for k, v in per.items():
                    agg[k] = agg.get(k, 0) + v
            print(f"  {r['station']:<10} {r['deployment']:<22} v{r['version']:03d} {r['samples']:>7} samples  "
                  f"flags {dict(sorted(agg.items()))}  {Path(r['path']).name}")
    if args.what in ("raw", "all"):
        rows = cat.raw_files()
        print(f"raw files ({len(rows)}):")
        for r in rows:
            where = f"{r['station']}/{r['deployment']}" if r["status"] == "archived" else r["reason"]
            print(f"  {r['sha256'][:12]} {r['status']:<11} {r['original_name']:<36} {where}")
    if args.what in ("runs", "all"):
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
    print(f"ok: register {ws.register_path.name}: {len(reg.station)} stations, {len(reg.instrument)} instruments, "
          f"{len(reg.deployment)} deployments (sha256 {reg.sha256[:12]})")
    print(f"ok: layouts {ws.layouts_path.name}: {', '.join(lay.layouts)}")
    print(f"ok: rule set {ws.rules_path.name}: {rules.name} (sha256 {rules.sha256[:12]})")
    return 0


def _schedule(args) -> int:
    import os

    from .config import load_workspace
    from .errors import ConfigError
    from .orchestration import configure_prefect

    ws = load_workspace(args.workspace)
    ws.load()
    if not os.environ.get("PREFECT_API_URL"):
        raise ConfigError("schedules need a running Prefect server: start one with 'prefect server start' and "
                          "set PREFECT_API_URL (README: 'Running it every night')")
    configure_prefect(ws.archive / ".prefect")
    from prefect.schedules import Cron

    from .flows.nightly import nightly

    nightly.serve(name="qcpipe-nightly", schedule=Cron(args.cron, timezone=args.timezone),
                  parameters={"workspace": str(ws.path)})
    return 0


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    handler = {"process": _process, "holdings": _holdings, "check": _check, "schedule": _schedule}[args.command]
    try:
        return handler(args)
    except QcpipeError as err:
        print(f"qcpipe: error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("qcpipe: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
