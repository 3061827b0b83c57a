"""The package's layers point one way: no import cycle, no private names across modules,
nothing imported from a higher layer, and the archive does file and catalog I/O only.

The imports are read with the standard library's ``ast`` (nothing is imported), from
``qcpipe/`` and ``flows/`` (installed as ``qcpipe.flows``).  The layers are DEVELOPERS.md's
"Layout" (read bottom to top).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: each top-level part of qcpipe and its layer: a part imports only from lower layers (or itself)
LAYER = {
    "qcpipe": 0, "errors": 0, "faults": 0, "arrays": 0, "units": 0, "progress": 0, "lazy": 0,
    "files": 1,
    "checks": 1, "tide": 1,
    "config": 2,
    "lineage": 3,
    "ingest": 4, "convert": 4, "apply_rules": 4, "tide_reference": 4, "archive": 4,
    "probe_analysis": 5, "derive": 5, "diff": 5, "long_series": 5,
    "report": 6,
    "pipeline": 7,
    "flows": 8, "review": 8,
    "cli": 9,
}
#: what the archive (file and catalog I/O) must not import: science and stages
NOT_IN_ARCHIVE = {"tide", "convert", "apply_rules", "derive", "tide_reference", "probe_analysis", "pipeline"}


def _modules() -> dict[str, Path]:
    mods = {}
    for base, pkg in ((ROOT / "qcpipe", "qcpipe"), (ROOT / "flows", "qcpipe.flows")):
        for p in base.rglob("*.py"):
            parts = [pkg, *p.relative_to(base).with_suffix("").parts]
            if parts[-1] == "__init__":
                parts = parts[:-1]
            mods[".".join(parts)] = p
    return mods


MODULES = _modules()


def _imports(name: str, path: Path) -> list[tuple[str, str, int]]:
    """(module imported, name imported or "", line) of every qcpipe import in a module."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = name.split(".") if path.name == "__init__.py" else name.split(".")[:-1]
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "qcpipe":
                continue
            for alias in node.names:
                full = f"{target}.{alias.name}"
                out.append((full if full in MODULES else target, "" if full in MODULES else alias.name,
                            node.lineno))
        elif isinstance(node, ast.Import):
            out += [(a.name, "", node.lineno) for a in node.names if a.name.split(".")[0] == "qcpipe"]
    return out


GRAPH = {m: _imports(m, p) for m, p in MODULES.items()}


def _part(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else parts[0]


def test_every_part_has_a_layer():
    assert {_part(m) for m in MODULES} <= set(LAYER), set(_part(m) for m in MODULES) - set(LAYER)


def test_no_import_cycle():
    edges = {m: {t for t, _, _ in deps if t in MODULES and t != m} for m, deps in GRAPH.items()}
    index, low, stack, on, cycles, counter = {}, {}, [], set(), [], [0]

    def visit(v):                                   # Tarjan's strongly connected components
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in edges[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                cycles.append(sorted(comp))

    for v in edges:
        if v not in index:
            visit(v)
    assert not cycles


def test_no_private_name_from_another_module():
    bad = [f"{m}:{line} imports {name} from {t}" for m, deps in GRAPH.items() for t, name, line in deps
           if t != m and (name.startswith("_") and not name.startswith("__")
                          or any(p.startswith("_") and not p.startswith("__") for p in t.split(".")))]
    assert not bad


def test_imports_point_down():
    bad = [f"{m}:{line} ({_part(m)}, layer {LAYER[_part(m)]}) imports {t} (layer {LAYER[_part(t)]})"
           for m, deps in GRAPH.items() for t, _, line in deps
           if _part(t) != _part(m) and LAYER[_part(t)] >= LAYER[_part(m)]]
    assert not bad


def test_archive_is_io_only():
    bad = [f"{m}:{line} imports {t}" for m, deps in GRAPH.items() if _part(m) == "archive"
           for t, _, line in deps if _part(t) in NOT_IN_ARCHIVE]
    assert not bad


@pytest.mark.parametrize("source, found", [
    ("from ._secret import x\n", "qcpipe.checks._secret"),
    ("from .flags import _grade\n", "_grade"),
])
def test_the_walker_sees_private_imports(tmp_path, source, found):
    # the checks above can fail: a module importing a private name is reported
    p = tmp_path / "m.py"
    p.write_text(source)
    got = _imports("qcpipe.checks.m", p)
    assert any(found in (t, name) for t, name, _ in got)
