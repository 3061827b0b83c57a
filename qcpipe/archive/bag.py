"""Archive packages: one BagIt bag (RFC 8493) per station and deployment, for submission.

Contents (under ``data/``): the raw files, the current dataset version, its
derived products, the rule set and register excerpt used, the station's review
annotations, and a README describing it all; SHA-256 payload and tag manifests.
The bag is built in a temporary folder and renamed into place.
"""

from __future__ import annotations

import datetime as dt
import os
import shutil
import tempfile
from pathlib import Path

from .. import __version__
from ..files import sha256_of_file, toml_text
from ..lineage import qc_inputs


def register_excerpt(inputs: dict) -> str:
    """The register entries a dataset used (site, station, instrument, deployment) as TOML."""
    reg = inputs["register"]
    return toml_text({k: [reg[k]] for k in ("site", "station", "instrument", "deployment")},
                     comment="excerpt of the station register used for this dataset (written by qcpipe)")


def write_bag(ctx, deployment_id: str, out_dir: str | Path) -> Path:
    """Write the bag of one deployment into ``out_dir``; returns the bag folder."""
    from ..errors import ArchiveError

    reg = ctx.register
    dep = reg.deployment_by_id(deployment_id)
    station = reg.station_by_id(dep.station)
    cat = ctx.catalog
    latest = cat.latest_dataset(dep.id)
    if latest is None or not Path(latest["path"]).exists():
        raise ArchiveError(f"deployment {dep.id!r} has no dataset in {ctx.paths.root}; run 'qcpipe process' first")
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    final = out_dir / f"qcpipe_{station.id}_{dep.id}_bag"
    tmp = Path(tempfile.mkdtemp(prefix=f".{final.name}.", dir=out_dir))
    try:
        data = tmp / "data"
        payload: list[tuple[str, Path]] = []

        def put(src: Path, rel: str):
            dest = data / rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(src, dest)
            payload.append((f"data/{rel}", dest))

        raws = cat.raw_files(deployment=dep.id, status="archived")
        for r in raws:
            put(Path(r["archived_path"]), f"raw/{Path(r['archived_path']).name}")
        ds_path = Path(latest["path"])
        put(ds_path, f"dataset/{ds_path.name}")
        derived_dir = ctx.paths.root / "derived" / station.id
        derived = sorted(p for p in derived_dir.glob(f"qcpipe_{station.id}_{dep.id}_v{latest['version']:03d}_*")) \
            if derived_dir.is_dir() else []
        for p in derived:
            put(p, f"derived/{p.name}")
        rules_note = _put_rule_set(ctx, latest, put)
        inputs = latest.get("qc_inputs") or qc_inputs(ctx, dep.id)
        (data / "config").mkdir(parents=True, exist_ok=True)
        kept_notes = _put_config_copies(ctx, latest, inputs, put)
        excerpt = data / "config" / "register_excerpt.toml"
        excerpt.write_text(register_excerpt(inputs), encoding="utf-8")
        payload.append(("data/config/register_excerpt.toml", excerpt))
        ann = inputs.get("annotations") or []
        ann_file = data / "config" / "annotations.toml"
        ann_file.write_text(toml_text({"annotation": list(ann)},
                                      comment="review annotations of this station (written by qcpipe)"),
                            encoding="utf-8")
        payload.append(("data/config/annotations.toml", ann_file))
        readme = data / "README.txt"
        readme.write_text(_readme(station, dep, latest, raws, derived, [rules_note, *kept_notes], ann),
                          encoding="utf-8")
        payload.append(("data/README.txt", readme))

        manifest = "".join(f"{sha256_of_file(p)}  {rel}\n" for rel, p in sorted(payload))
        (tmp / "manifest-sha256.txt").write_text(manifest, encoding="utf-8")
        (tmp / "bagit.txt").write_text("BagIt-Version: 1.0\nTag-File-Character-Encoding: UTF-8\n", encoding="utf-8")
        octets = sum(p.stat().st_size for _, p in payload)
        info = [f"Bagging-Date: {dt.date.today().isoformat()}", f"Payload-Oxum: {octets}.{len(payload)}",
                f"Bag-Software-Agent: qcpipe {__version__}",
                f"Source-Organization: {reg.info.institution or reg.info.creator_name}",
                f"External-Identifier: {Path(latest['path']).stem}",
                f"External-Description: quality-controlled logger data of station {station.id}, deployment "
                f"{dep.id}, with the raw files, configuration and derived products"]
        (tmp / "bag-info.txt").write_text("\n".join(info) + "\n", encoding="utf-8")
        tags = "".join(f"{sha256_of_file(tmp / n)}  {n}\n" for n in ("bag-info.txt", "bagit.txt", "manifest-sha256.txt"))
        (tmp / "tagmanifest-sha256.txt").write_text(tags, encoding="utf-8")
        if final.exists():
            old = final.with_name(final.name + ".old")
            os.replace(final, old)
            os.replace(tmp, final)
            shutil.rmtree(old)
        else:
            os.replace(tmp, final)
        return final
    finally:
        if tmp.exists():
            shutil.rmtree(tmp)


def _put_rule_set(ctx, latest: dict, put) -> str:
    """Enclose the rule set file that made the dataset: the archive's copy of it by content hash
    (``config/rules/<sha256>.toml``, kept when the dataset was made), else the workspace's file if it still
    has that hash.  An archive made before such copies were kept may have neither: then the current file is
    enclosed under another name and the README says so.  Returns the README's line on it."""
    name = Path(ctx.rules.path).name
    snapshot = ctx.paths.config_snapshot("rules", latest["rules_sha256"])
    if snapshot.is_file():
        put(snapshot, f"config/{name}")
        return f"config/{name}: the rule set file that made the dataset (SHA-256 {latest['rules_sha256']})"
    if ctx.rules.sha256 == latest["rules_sha256"]:
        put(ctx.rules.path, f"config/{name}")
        return f"config/{name}: the rule set file that made the dataset (SHA-256 {latest['rules_sha256']})"
    put(ctx.rules.path, f"config/current_{name}")
    return (f"config/current_{name}: the CURRENT rule set (SHA-256 {ctx.rules.sha256}), not the one that made "
            "the dataset: the archive kept no copy of that one (made before qcpipe kept configuration copies)")


def _put_config_copies(ctx, latest: dict, inputs: dict, put) -> list[str]:
    """Enclose the whole station register and the site's harmonic constants file as they were when the
    dataset was made (the archive's copies by content hash); returns the README's lines on them."""
    notes = []
    reg_copy = ctx.paths.config_snapshot("register", latest["register_sha256"])
    name = Path(ctx.register.path).name
    if reg_copy.is_file():
        put(reg_copy, f"config/{name}")
        notes.append(f"config/{name}: the whole station register as used (SHA-256 {latest['register_sha256']})")
    else:
        notes.append("the whole station register as used is not enclosed: the archive kept no copy of it (made "
                     "before qcpipe kept configuration copies); config/register_excerpt.toml has its entries")
    const_sha = inputs.get("tide_constants_sha256")
    if const_sha:
        copy = ctx.paths.config_snapshot("tide_constants", const_sha)
        if copy.is_file():
            put(copy, "config/harmonic_constants.toml")
            notes.append(f"config/harmonic_constants.toml: the site's harmonic constants as used (SHA-256 {const_sha})")
        else:
            notes.append(f"the site's harmonic constants (SHA-256 {const_sha}) are not enclosed: the archive "
                         "kept no copy of them")
    return notes


def _readme(station, dep, latest, raws, derived, rules_notes, ann) -> str:
    lines = [
        f"Archive package of station {station.id} ({station.name}), deployment {dep.id}",
        "",
        f"Dataset: dataset/{Path(latest['path']).name} (version {latest['version']}, CF-1.8 / ACDD-1.3 NetCDF-4,",
        "IOC primary quality flags: 1 pass, 2 not evaluated, 3 suspect, 4 fail, 9 missing).",
        f"Made by qcpipe {latest['software_version']} with rule set {latest['rules_name']} "
        f"(SHA-256 {latest['rules_sha256']}).",
        "",
        f"raw/         {len(raws)} raw logger file(s) as downloaded (file names prefixed with their SHA-256)",
        f"derived/     {len(derived)} derived product(s): tide events, datums, exposure (NetCDF and CSV)",
        f"config/      the rule set file, the register (whole, and its entries used: register_excerpt.toml),",
        f"             {len(ann)} review annotation(s) of the station as used",
        *(f"             {note}" for note in rules_notes),
        "",
        "Tide values in these files are for data quality control only, not for navigation or safety planning.",
        "Manifests: manifest-sha256.txt (payload), tagmanifest-sha256.txt (tag files); BagIt 1.0 (RFC 8493).",
    ]
    return "\n".join(lines) + "\n"
