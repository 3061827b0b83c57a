"""Archive paths (atomic writes: :mod:`qcpipe.files`).

Layout of an archive folder (all names are ours)::

    catalog.sqlite                                   the catalog (SQLite)
    raw/<station>/<deployment>/<sha12>_<name>        copies of accepted raw files
    quarantine/<sha12>_<name> (+ .reason.txt)        files that could not be used
    ingested/<station>/<deployment>.nc               pre-QC level: merged, UTC, raw units
    datasets/<station>/qcpipe_<station>_<deployment>_v<NNN>.nc   QC'd, CF/ACDD, versioned
    conflicts/<deployment>.csv                       records whose values disagree between downloads
    derived/<station>/...                            tide events, datums, fitted constants, exposure
    sites/<site>/fitted_constituents.toml (+ .json)  constants fitted to all the site's gauge records
    config/<kind>/<sha256>.toml                      configuration files as used, by content hash (rules,
                                                     register, layouts; tide_constants by the file's SHA-256)
    .lock                                            one run at a time (archive/lock.py)

The orchestrator's own state is not in the archive but in the user's state folder
(flows/prefect_settings.orchestrator_home); a ``.prefect/`` folder left by older versions is not
read any more and is skipped when stale temporaries are removed.
"""

from __future__ import annotations

import re
from pathlib import Path

from ..config.loading import check_safe_id

_UNSAFE = re.compile(r"[^A-Za-z0-9_.\-]")
_SHA256 = re.compile(r"[0-9a-f]{64}")


def _digest(sha256: str) -> str:
    if not isinstance(sha256, str) or not _SHA256.fullmatch(sha256):
        raise ValueError(f"{sha256!r} is not a SHA-256 digest (64 lowercase hex digits)")
    return sha256


def safe_file_name(name: str) -> str:
    """A file name with anything but letters, digits, '-', '_', '.' replaced by '_'."""
    base = _UNSAFE.sub("_", Path(name).name).lstrip(".") or "unnamed"
    return base[:120]


class ArchivePaths:
    """Where each kind of thing lives in an archive folder; ids are checked to stay inside."""

    def __init__(self, root: str | Path):
        self.root = Path(root).resolve()

    def _inside(self, p: Path) -> Path:
        p = p.resolve()
        if self.root not in p.parents and p != self.root:
            raise ValueError(f"path {p} would leave the archive {self.root}")
        return p

    @property
    def catalog(self) -> Path:
        return self.root / "catalog.sqlite"

    def raw_copy(self, station: str, deployment: str, sha256: str, name: str) -> Path:
        check_safe_id(station, "station id"); check_safe_id(deployment, "deployment id")
        return self._inside(self.root / "raw" / station / deployment / f"{_digest(sha256)[:12]}_{safe_file_name(name)}")

    def quarantine(self, sha256: str, name: str) -> Path:
        return self._inside(self.root / "quarantine" / f"{_digest(sha256)[:12]}_{safe_file_name(name)}")

    def ingested(self, station: str, deployment: str) -> Path:
        check_safe_id(station, "station id"); check_safe_id(deployment, "deployment id")
        return self._inside(self.root / "ingested" / station / f"{deployment}.nc")

    def dataset(self, station: str, deployment: str, version: int) -> Path:
        check_safe_id(station, "station id"); check_safe_id(deployment, "deployment id")
        return self._inside(self.root / "datasets" / station /
                            f"qcpipe_{station}_{deployment}_v{version:03d}.nc")

    def derived(self, station: str, name: str) -> Path:
        check_safe_id(station, "station id")
        return self._inside(self.root / "derived" / station / safe_file_name(name))

    def site_product(self, site: str, name: str) -> Path:
        check_safe_id(site, "site id")
        return self._inside(self.root / "sites" / site / safe_file_name(name))

    def config_snapshot(self, kind: str, sha256: str) -> Path:
        """The archived copy of a configuration file of ``kind`` whose content hash is ``sha256``."""
        check_safe_id(kind, "configuration kind")
        return self._inside(self.root / "config" / kind / f"{_digest(sha256)}.toml")

    def conflicts(self, deployment: str) -> Path:
        check_safe_id(deployment, "deployment id")
        return self._inside(self.root / "conflicts" / f"{deployment}.csv")
