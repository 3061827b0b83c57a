"""Accounting and fixity: every raw file ever seen is archived or quarantined, byte for byte."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ..files import sha256_of_file


@dataclass
class AuditResult:
    raw_files: int = 0
    archived: int = 0
    quarantined: int = 0
    datasets_checked: int = 0
    problems: list[str] = field(default_factory=list)
    not_yet_processed: list[str] = field(default_factory=list)
    orphans: list[str] = field(default_factory=list)
    config_checked: int = 0
    config_not_kept: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems

    def lines(self) -> list[str]:
        out = [f"raw files in the catalog: {self.raw_files} ({self.archived} archived, {self.quarantined} "
               f"quarantined); datasets checked: {self.datasets_checked}; configuration copies checked: "
               f"{self.config_checked}"]
        out += [f"  PROBLEM {p}" for p in self.problems]
        out += [f"  not yet processed: {p}" for p in self.not_yet_processed]
        out += [f"  not in the catalog (left by an interrupted run?): {p}" for p in self.orphans]
        out += [f"  configuration not kept in the archive (datasets made before qcpipe kept copies): {p}"
                for p in self.config_not_kept]
        out.append("all accounted for, all hashes match" if self.ok else f"{len(self.problems)} problem(s)")
        return out


def audit_archive(paths, catalog, inbox: Path | None = None) -> AuditResult:
    """Check catalog accounting and the SHA-256 of every archived raw copy and dataset.

    Problems: a raw file that is neither archived nor quarantined, a quarantined
    file without a reason, a missing copy, a copy or dataset whose SHA-256 differs
    from the catalog's (tampering or corruption), a copy or dataset the catalog
    places outside this archive (``paths.root``: the archive given is the one
    checked, never another one the catalog may point at).  Inbox files not in the
    catalog are listed as not yet processed; archive files the catalog does not
    know are listed as orphans.
    """
    res = AuditResult()
    rows = catalog.raw_files()
    res.raw_files = len(rows)
    known_paths = set()
    for r in rows:
        name = r["original_name"]
        if r["status"] == "archived":
            res.archived += 1
        elif r["status"] == "quarantined":
            res.quarantined += 1
            if not (r["reason"] or "").strip():
                res.problems.append(f"{name}: quarantined without a reason")
        else:
            res.problems.append(f"{name}: status {r['status']!r} is neither archived nor quarantined")
            continue
        copy = Path(r["archived_path"] or "")
        known_paths.add(copy.resolve())
        if r["archived_path"] and not _inside(copy, paths.root):
            res.problems.append(f"{name}: the catalog places its archive copy at {copy}, outside this archive "
                                f"{paths.root}")
        elif not copy.is_file():
            res.problems.append(f"{name}: archive copy {copy} is missing")
        elif sha256_of_file(copy) != r["sha256"]:
            res.problems.append(f"{name}: archive copy {copy} does not match its SHA-256 {r['sha256'][:12]}")
    for d in catalog.datasets():
        p = Path(d["path"])
        known_paths.add(p.resolve())
        if d.get("pruned"):
            continue
        res.datasets_checked += 1
        if not _inside(p, paths.root):
            res.problems.append(f"dataset {p.name}: the catalog places it at {p}, outside this archive {paths.root}")
        elif not p.is_file():
            res.problems.append(f"dataset {p.name} is missing (expected at {p})")
        elif d.get("sha256") and sha256_of_file(p) != d["sha256"]:
            res.problems.append(f"dataset {p.name} does not match its SHA-256 {d['sha256'][:12]}")
    _check_config_copies(paths, catalog, res)
    seen = {r["sha256"] for r in rows}
    if inbox is not None and Path(inbox).is_dir():
        for p in sorted(Path(inbox).rglob("*")):
            if p.is_file() and not p.name.startswith(".") and sha256_of_file(p) not in seen:
                res.not_yet_processed.append(str(p.relative_to(inbox)))
    for folder in ("raw", "datasets"):
        for p in sorted((paths.root / folder).rglob("*")):
            if p.is_file() and not p.name.startswith(".") and p.resolve() not in known_paths:
                res.orphans.append(str(p.relative_to(paths.root)))
    return res


def config_copy_hash(path: Path) -> str | None:
    """The hash a configuration copy ``config/<kind>/<sha256>.toml`` must be named by: the file's SHA-256
    for harmonic constants, the content hash of its TOML for the others (as the catalog records them);
    None when the file is not valid UTF-8 TOML."""
    import tomllib

    from ..config.loading import content_sha256

    if path.parent.name == "tide_constants":
        return sha256_of_file(path)
    try:
        return content_sha256(tomllib.loads(path.read_bytes().decode("utf-8")))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError):
        return None


def _check_config_copies(paths, catalog, res: AuditResult) -> None:
    """Every configuration copy holds what its name says; every dataset's rule set and register are kept."""
    folder = paths.root / "config"
    for p in sorted(folder.glob("*/*.toml")) if folder.is_dir() else []:
        res.config_checked += 1
        if config_copy_hash(p) != p.stem:
            res.problems.append(f"configuration copy {p.relative_to(paths.root)} does not hold what its name "
                                "(its content's SHA-256) says")
    missing = set()
    for d in catalog.datasets():
        if d.get("pruned"):
            continue
        for kind in ("rules", "register"):
            sha = d.get(f"{kind}_sha256")
            if sha and not paths.config_snapshot(kind, sha).is_file():
                missing.add(f"{'rule set' if kind == 'rules' else 'station register'} {sha[:12]}")
    res.config_not_kept = sorted(missing)


def _inside(path: Path, root: Path) -> bool:
    """Whether ``path`` lies inside the archive folder ``root`` (both taken as absolute, links resolved)."""
    return Path(root).resolve() in Path(path).resolve().parents
