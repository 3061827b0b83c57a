"""The run model: what a run did, as typed records that every rendering reads.

The terminal summary, the HTML report and the orchestrator's artifacts are all rendered
from these records; nothing sorts sentences by their words.  A :class:`Notice` carries its
kind (what a person should look at) beside its sentence, so a report groups it without
reading it.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from pathlib import Path

from ..checks.flags import FLAG_KEYS

#: kinds of notices, and the words a report heads them with
NOTICE_KINDS = {
    "clock": "Clock looks wrong",
    "fouling": "Probe readings",
    "elevation": "Sensor height",
    "tide": "No tide reference",
    "quarantine": "File quarantined",
    "conflict": "Downloads disagree",
    "failures": "Failed samples",
    "reading": "Raw file reading",
    "barometer": "Air pressure",
    "rerun": "Re-read",
    "rules": "Window longer than the record",
    "run": "Run",
}


@dataclass(frozen=True)
class Notice:
    """Something a person should look at: its kind (a key of :data:`NOTICE_KINDS`), where, and the sentence."""
    kind: str
    text: str
    station: str | None = None
    deployment: str | None = None

    def __post_init__(self):
        if self.kind not in NOTICE_KINDS:
            raise ValueError(f"unknown notice kind {self.kind!r}; use one of {', '.join(NOTICE_KINDS)}")

    @property
    def where(self) -> str:
        """``station/deployment`` (or the deployment alone), empty for run-level notices."""
        if self.station and self.deployment:
            return f"{self.station}/{self.deployment}"
        return self.deployment or self.station or ""

    def line(self) -> str:
        """One line: ``where: sentence``."""
        return f"{self.where}: {self.text}" if self.where else self.text

    def as_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> Notice:
        return cls(kind=str(d["kind"]), text=str(d["text"]), station=d.get("station"), deployment=d.get("deployment"))


def earlier_notice(run_id: int, notice: Notice) -> Notice:
    """A notice of an earlier run that stopped (killed, failed) before showing it, as a later run shows it."""
    return Notice(notice.kind, f"{notice.text} (found by run {run_id}, which stopped before showing it)",
                  notice.station, notice.deployment)


def earlier_notices(run: dict) -> list[Notice]:
    """The ``earlier`` notices of a ``run`` dict (``report.html``), as this run shows them."""
    return [earlier_notice(int(n["run_id"]), Notice.from_dict(n)) for n in run.get("earlier", [])]


@dataclass
class Quarantined:
    """A raw file that could not be used, and why (one line)."""
    name: str
    reason: str

    def notice(self) -> Notice:
        """The same as a notice (kind "quarantine"), as the catalog keeps it for a run that stops before its summary."""
        return Notice("quarantine", self.reason if self.reason.startswith(self.name) else f"{self.name}: {self.reason}")


@dataclass
class DatasetWritten:
    """One dataset version written by the run."""
    station: str
    deployment: str
    dataset: str | Path
    version: int
    samples: int
    flag_counts: dict                                    # variable -> {aggregate flag "1".."9": count}
    counts: dict = field(default_factory=dict)           # duplicates, conflicts, trimmed samples of the run
    notices: list[Notice] = field(default_factory=list)
    products: list = field(default_factory=list)         # derived files written beside the dataset
    air_pressure: dict = field(default_factory=dict)     # level loggers: where the subtracted air pressure came from


@dataclass
class RunSummary:
    """What one run did: files, quarantines, datasets written, re-runs and notices."""
    files_seen: int = 0
    files_known: int = 0
    repeated_in_inbox: list = field(default_factory=list)
    skipped_in_inbox: list = field(default_factory=list)  # files not used this run (vanished, changed, links out)
    ingested: int = 0
    quarantined: list = field(default_factory=list)      # Quarantined
    results: list = field(default_factory=list)          # DatasetWritten
    archive: str = ""
    kind: str = "nightly"                                # "nightly" (inbox and changes) or "rerun" (changes only)

    reruns: dict = field(default_factory=dict)          # deployment -> why this run QC'd it (every version written)
    unchanged: list = field(default_factory=list)        # deployments asked for whose inputs had not changed
    notices: list = field(default_factory=list)          # run-level Notice records (not of one deployment)
    earlier: list = field(default_factory=list)          # (run id, Notice) of earlier runs that stopped before
                                                         # showing them (killed or failed), shown by this run
    report: str = ""                                     # path of the run's HTML report

    @property
    def nothing_new(self) -> bool:
        return self.ingested == 0 and not self.quarantined and not self.results

    def totals(self) -> dict[str, int]:
        tot = {k: 0 for k in FLAG_KEYS}
        for r in self.results:
            for per in r.flag_counts.values():
                for k, v in per.items():
                    tot[k] = tot.get(k, 0) + v
        return tot

    def as_counts(self) -> dict:
        return {"files_seen": self.files_seen, "files_known": self.files_known, "ingested": self.ingested,
                "quarantined": len(self.quarantined), "repeated_in_inbox": len(self.repeated_in_inbox),
                "skipped_in_inbox": len(self.skipped_in_inbox),
                "datasets_written": len(self.results), "samples": sum(r.samples for r in self.results),
                "flags": self.totals()}

    def all_notices(self) -> list[Notice]:
        """Run-level notices, then each dataset's, in order, then those of earlier runs that stopped before showing them."""
        return (list(self.notices) + [n for r in self.results for n in r.notices]
                + [earlier_notice(run_id, n) for run_id, n in self.earlier])
