"""The terminal summary of a run: the sentences a person reads after `qcpipe process`."""

from __future__ import annotations

from ..checks.flags import FLAG_WORDS
from .model import RunSummary


def air_pressure_words(a: dict) -> str:
    """One line on a level dataset's air pressure (from :func:`air_pressure_summary`)."""
    if "from_barometer" not in a:
        return a["source"]
    n = a["from_barometer"] + a["from_constant"]
    return (f"barometer {a['barometer'] or '(no data yet)'} at {a['from_barometer']} of {n} samples; configured "
            f"constant {a['constant_hpa']:.2f} hPa at {a['from_constant']} (flagged suspect by barometer_fallback)")


#: why an inbox file was not used this run (``ingest.discover.InboxSkip.why``), and what happens next
_SKIP_WORDS = {
    "vanished": "vanished from the inbox after it was listed; skipped this run (read next run if it is back)",
    "changed": "changed while this run was reading it ({detail}); skipped this run (read next run once it "
               "stays unchanged)",
    "unreadable": "could not be read ({detail}); skipped this run (check its permissions; read next run)",
    "link_out": "is a link leading out of the inbox ({detail}); not read: links are followed only within "
                "the inbox, so copy the file into the inbox",
}


def inbox_skip_text(skip) -> str:
    """One line on an inbox file not used this run (an ``InboxSkip``)."""
    detail = skip.detail or ("it leads nowhere" if skip.why == "link_out" else "")
    return f"{skip.path}: " + _SKIP_WORDS[skip.why].format(detail=detail)


def summary_lines(run: RunSummary) -> list[str]:
    """The terminal summary of a run, one string per line."""
    if run.nothing_new and run.kind == "rerun" and run.unchanged:
        return [f"nothing changed: the latest dataset of {', '.join(run.unchanged)} was made from its current raw "
                "files, rules, register, constants, annotations and software; nothing re-QC'd, nothing written "
                "(to write a new version anyway: qcpipe rerun -d DEPLOYMENT --even-if-unchanged)"] + _attention(run)
    if run.nothing_new and run.kind == "rerun":
        return [f"nothing changed: every dataset in the archive {run.archive} was made from the current rules, "
                "register, constants, annotations and software; nothing re-QC'd, nothing written "
                "(to write a new version anyway: qcpipe rerun -d DEPLOYMENT --even-if-unchanged)"] + _attention(run)
    skipped = [f"  skipped {s}" for s in run.skipped_in_inbox]
    if run.nothing_new and not skipped:
        return ([f"nothing new: {run.files_seen} file(s) in the inbox, all already in the archive {run.archive}"]
                + _attention(run))
    if run.nothing_new:
        return [f"nothing new: {run.files_seen} file(s) in the inbox, {run.files_known} already in the archive "
                f"{run.archive}, {len(skipped)} skipped this run", *skipped, *_attention(run)]
    out = [f"files: {run.files_seen} in inbox, {run.ingested} ingested, {len(run.quarantined)} quarantined, "
           f"{run.files_known} already archived, {len(run.repeated_in_inbox)} repeated copies skipped, "
           f"{len(skipped)} skipped this run"]
    for q in run.quarantined:
        out.append(f"  quarantined {q.name}: {q.reason}")
    for rep in run.repeated_in_inbox:
        out.append(f"  skipped repeated copy {rep}")
    out += skipped
    first = {r.deployment for r in run.results if r.version == 1}
    for dep, why in run.reruns.items():
        out.append(f"  {'QC' if dep in first else 're-QC'} {dep}: " + "; ".join(why[:4])
                   + (f"; and {len(why) - 4} more" if len(why) > 4 else ""))
    for dep in run.unchanged:
        out.append(f"  not re-QC'd {dep}: nothing changed since its latest dataset (--even-if-unchanged to force)")
    samples = sum(r.samples for r in run.results)
    dup = sum(r.counts.get("duplicates", 0) for r in run.results)
    con = sum(r.counts.get("conflicts", 0) for r in run.results)
    pre = sum(r.counts.get("pre_deployment", 0) for r in run.results)
    post = sum(r.counts.get("post_recovery", 0) for r in run.results)
    cut = sum(r.counts.get("truncated_last_line", 0) for r in run.results)
    unordered = sum(r.counts.get("out_of_order", 0) for r in run.results)
    out.append(f"samples: {samples} in {len(run.results)} dataset(s); {dup} repeated records from overlapping "
               f"downloads dropped, {con} conflicting timestamps kept and flagged suspect; "
               f"{pre} pre-deployment and {post} post-recovery samples trimmed"
               + (f"; {cut} truncated last line(s) not read" if cut else "")
               + (f"; {unordered} record(s) out of time order sorted" if unordered else ""))
    tot = run.totals()
    out.append("flags (aggregate, all variables): " +
               ", ".join(f"{FLAG_WORDS[k]} {tot.get(k, 0)}" for k in FLAG_WORDS))
    for r in run.results:
        parts = "; ".join(f"{var}: " + " ".join(f"{FLAG_WORDS[k][:4]}={v}" for k, v in sorted(per.items()))
                          for var, per in r.flag_counts.items())
        out.append(f"  {r.station}/{r.deployment} v{r.version:03d}: {parts}")
    baro = [r for r in run.results if r.air_pressure]
    if baro:
        out.append("barometric correction (air pressure subtracted for water level):")
        out += [f"  {r.station}/{r.deployment}: {air_pressure_words(r.air_pressure)}" for r in baro]
    out += _attention(run)
    n_products = sum(len(r.products) for r in run.results)
    out.append(f"outputs: {run.archive}/datasets, {n_products} derived products in {run.archive}/derived "
               f"(catalog {run.archive}/catalog.sqlite)")
    return out


def _attention(run: RunSummary) -> list[str]:
    """The "needs attention" lines: every notice of the run, and those earlier runs stopped before showing."""
    notices = run.all_notices()
    return ["needs attention:"] + [f"  {n.line()}" for n in notices] if notices else []
