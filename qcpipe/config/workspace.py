"""The workspace file: where one team's register, layouts, rules, inbox and archive are.

File format (TOML, our own); relative paths are taken from the file's folder::

    [paths]
    register = "register.toml"
    layouts = "layouts.toml"
    rules = "../qc_rules/gull-cove.toml"
    inbox = "inbox"
    archive = "../demo_archive"
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from pydantic import BaseModel, ConfigDict, Field

from ._load import read_toml, validate
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


class _WorkspaceFile(BaseModel):
    model_config = ConfigDict(extra="forbid")
    paths: _Paths


@dataclass(frozen=True)
class Workspace:
    path: Path
    register_path: Path
    layouts_path: Path
    rules_path: Path
    inbox: Path
    archive: Path

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
        return register, layouts, rules


def load_workspace(path: str | Path) -> Workspace:
    path = Path(path).resolve()
    data = read_toml(path)
    model = validate(_WorkspaceFile, data, path)
    base = path.parent
    p = model.paths
    return Workspace(path, (base / p.register_file).resolve(), (base / p.layouts).resolve(),
                     (base / p.rules).resolve(), (base / p.inbox).resolve(), (base / p.archive).resolve())
