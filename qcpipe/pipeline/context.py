"""A run's context: the workspace's configuration, loaded and checked once, and the archive's paths."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path


from ..archive.catalog import Catalog
from ..archive.store import ArchivePaths
from ..config import load_workspace
from ..config.annotations import Annotations
from ..config.layouts import LoadedLayouts
from ..config.register import LoadedRegister
from ..config.rules import RuleSet


@dataclass
class Context:
    """Everything a run needs, loaded and validated once."""
    workspace_path: Path
    inbox: Path
    register: LoadedRegister
    layouts: LoadedLayouts
    rules: RuleSet
    paths: ArchivePaths
    annotations: Annotations = field(default_factory=lambda: Annotations([], None))
    keep_versions: int = 0

    @property
    def catalog(self) -> Catalog:
        return Catalog(self.paths.catalog)


def load_context(workspace_path: str | Path) -> Context:
    """Load and cross-check the workspace's configuration (ConfigError on any problem)."""
    ws = load_workspace(workspace_path)
    register, layouts, rules = ws.load()
    return Context(ws.path, ws.inbox, register, layouts, rules, ArchivePaths(ws.archive),
                   ws.load_annotations(register), ws.keep_versions)
