"""Digest of an archive's outputs, for regression checks across refactorings.

Every NetCDF variable (values, dtype, attributes), every global attribute, and the text of
every CSV, TOML and JSON file under ``datasets/``, ``ingested/``, ``derived/``, ``conflicts/`` and ``sites/`` is
hashed, leaving out only what belongs to the run itself (times of writing, history lines, and
the SHA-256 of source dataset files, which carry those times).
Two archives made from the same inputs by code that should not change outputs have equal
digests.

    python tools/output_digest.py ARCHIVE            # prints JSON {relative path: sha256}
    python tools/output_digest.py ARCHIVE --against FILE   # exit 1 listing what differs
"""

from __future__ import annotations

import argparse
import hashlib
import json
import re
import sys
from pathlib import Path

import numpy as np

#: global attributes that record the run rather than the data
RUN_ATTRS = {"date_created", "date_modified", "date_issued", "date_metadata_modified", "history",
             "source_dataset_sha256"}       # the SHA-256 of source dataset files, which carry their run's times
#: timestamps written into text outputs (CSV/TOML "generated at" lines)
_STAMP = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d+)?Z")
#: SHA-256 digests in text outputs (a fitted constants file's source dataset: see RUN_ATTRS)
_SHA256 = re.compile(r"\b[0-9a-f]{64}\b")
FOLDERS = ("datasets", "ingested", "derived", "conflicts", "sites")


def _attr_text(value) -> str:
    if isinstance(value, np.ndarray):
        return repr(value.tolist())
    if isinstance(value, np.generic):
        return repr(value.item())
    return repr(value)


def netcdf_digest(path: Path) -> str:
    import netCDF4

    h = hashlib.sha256()
    with netCDF4.Dataset(path) as nc:
        nc.set_auto_mask(False)
        for name in sorted(nc.ncattrs()):
            if name not in RUN_ATTRS:
                h.update(f"global {name}={_attr_text(nc.getncattr(name))}\n".encode())
        for name in sorted(nc.variables):
            var = nc.variables[name]
            h.update(f"var {name} {var.dtype} {var.dimensions}\n".encode())
            for a in sorted(var.ncattrs()):
                h.update(f"  {a}={_attr_text(var.getncattr(a))}\n".encode())
            data = var[...]
            h.update(np.ascontiguousarray(np.asarray(data)).tobytes() if var.dtype != str
                     else "\0".join(map(str, np.asarray(data).ravel())).encode())
    return h.hexdigest()


def text_digest(path: Path) -> str:
    text = _SHA256.sub("<sha256>", _STAMP.sub("<time>", path.read_text(encoding="utf-8")))
    return hashlib.sha256(text.encode()).hexdigest()


def archive_digest(root: Path) -> dict[str, str]:
    out = {}
    for folder in FOLDERS:
        for p in sorted((root / folder).rglob("*")):
            if not p.is_file() or p.name.startswith("."):
                continue
            rel = str(p.relative_to(root))
            if p.suffix == ".nc":
                out[rel] = netcdf_digest(p)
            elif p.suffix in (".csv", ".toml", ".json"):
                out[rel] = text_digest(p)
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("archive", type=Path)
    ap.add_argument("--against", type=Path, help="a digest JSON written earlier")
    args = ap.parse_args(argv)
    got = archive_digest(args.archive)
    if args.against is None:
        print(json.dumps(got, indent=1, sort_keys=True))
        return 0
    want = json.loads(args.against.read_text())
    diff = sorted(k for k in set(got) | set(want) if got.get(k) != want.get(k))
    for k in diff:
        print(f"differs: {k}" if k in got and k in want else f"only in {'archive' if k in got else 'digest'}: {k}")
    print(f"{len(got) - len([k for k in diff if k in got])} of {len(got)} outputs identical")
    return 1 if diff else 0


if __name__ == "__main__":
    sys.exit(main())
