"""The workspace file: where one team's register, layouts, rules, inbox and archive are.

File format (TOML, our own); relative paths are taken from the file's folder::

    [paths]
    register = "register.toml"
    layouts = "layouts.toml"
    rules = "../qc_rules/gull-cove.toml"
    inbox = "inbox"
    archive = "../demo_archive"
    annotations = "annotations.toml"     # optional: manual review flags
    [archive]
    keep_versions = 0                    # dataset versions kept per deployment (0 = all)
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from pydantic import BaseModel, ConfigDict, Field

from .loading import read_toml, validate
from .layouts import LoadedLayouts, load_layouts
from .register import LoadedRegister, load_register
from .rules import RuleSet, load_rules


class _Paths(BaseModel):
    model_config = ConfigDict(extra="forbid")
    register_file: str = Field(alias="register")
    layouts: str
    rules: str
    inbox: str
    archive: str
    annotations: str | None = None


class _ArchiveSettings(BaseModel):
    model_config = ConfigDict(extra="forbid")
    keep_versions: int = Field(0, ge=0, description="dataset versions kept per deployment (0 = all)")


class _WorkspaceFile(BaseModel):
    model_config = ConfigDict(extra="forbid")
    paths: _Paths
    archive: _ArchiveSettings = _ArchiveSettings()


@dataclass(frozen=True)
class Workspace:
    path: Path
    register_path: Path
    layouts_path: Path
    rules_path: Path
    inbox: Path
    archive: Path
    annotations_path: Path | None = None
    keep_versions: int = 0

    def load(self) -> tuple[LoadedRegister, LoadedLayouts, RuleSet]:
        """Load and cross-check register, layouts and rules (ConfigError on any problem)."""
        from ..errors import ConfigError
        register = load_register(self.register_path)
        layouts = load_layouts(self.layouts_path)
        rules = load_rules(self.rules_path)
        for i, inst in enumerate(register.instrument):
            if inst.layout not in layouts.layouts:
                raise ConfigError(
                    f"{register.path}: key instrument[{i}] (id {inst.serial!r}).layout: layout "
                    f"{inst.layout!r} is not in {layouts.path}; add it there or correct the name")
        known = {s.id for s in register.station}
        for st in rules.stations:
            if st not in known:
                raise ConfigError(f"{rules.path}: key station.{st}: station {st!r} is not in the register "
                                  f"{register.path}; correct the station id or remove the override")
        from .constituents import load_constituents
        for i, site in enumerate(register.site):
            path = register.constituents_path(site.id)
            if path is not None:
                if not path.exists():
                    raise ConfigError(f"{register.path}: key site[{i}] (id {site.id!r}).tide_constituents: file "
                                      f"{path} not found; correct the path (relative to the register)")
                load_constituents(path)
        self.load_annotations(register)
        return register, layouts, rules

    def load_annotations(self, register=None):
        """The workspace's review annotations (none without an annotations file)."""
        from ..errors import ConfigError
        from .annotations import load_annotations
        ann = load_annotations(self.annotations_path)
        if register is not None:
            stations = {s.id for s in register.station}
            for i, a in enumerate(ann.items):
                if a.station not in stations:
                    raise ConfigError(f"{self.annotations_path}: key annotation[{i}].station: station "
                                      f"{a.station!r} is not in the register; correct the station id")
        return ann


def load_workspace(path: str | Path) -> Workspace:
    path = Path(path).resolve()
    data = read_toml(path)
    model = validate(_WorkspaceFile, data, path)
    base = path.parent
    p = model.paths
    for key in ("register_file", "layouts", "rules", "inbox", "archive", "annotations"):
        value = getattr(p, key)
        if value is not None and any(ord(c) < 32 for c in value):
            from ..errors import ConfigError
            name = "register" if key == "register_file" else key
            raise ConfigError(f"{path}: key paths.{name}: contains a control character; write a plain path")
    inbox, archive = (base / p.inbox).resolve(), (base / p.archive).resolve()
    check_inbox_apart(path, inbox, archive)
    return Workspace(path, (base / p.register_file).resolve(), (base / p.layouts).resolve(),
                     (base / p.rules).resolve(), inbox, archive,
                     (base / p.annotations).resolve() if p.annotations else None, model.archive.keep_versions)


def check_inbox_apart(path: Path, inbox: Path, archive: Path) -> None:
    """ConfigError (one line) when the inbox is the archive, lies inside it or holds it (links resolved):
    the archive's own files would be read as new downloads, and quarantined or re-archived."""
    from ..errors import ConfigError

    if inbox == archive:
        why = "is the archive folder"
    elif archive in inbox.parents:
        why = f"lies inside the archive {archive}"
    elif inbox in archive.parents:
        why = f"holds the archive {archive}"
    else:
        return
    raise ConfigError(f"{path}: key paths.inbox: the inbox {inbox} {why} (links followed); give the inbox and "
                      "the archive separate folders, neither inside the other")
