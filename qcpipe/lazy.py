"""A package's public names, imported from their modules only when first used.

A package ``__init__`` that imports all its modules makes every ``import pkg.small_module``
pay for the heavy ones too (xarray, pandas, matplotlib, the orchestrator).  The command's
nothing-to-do path (``qcpipe process`` with an unchanged inbox) imports only what deciding
needs, so the packages it passes through export their names with :func:`exports`::

    __getattr__, __dir__ = exports(__name__, {"Store": ".store", "load_store": ".store"})
"""

from __future__ import annotations

import importlib


def exports(package: str, where: dict[str, str]):
    """``__getattr__`` and ``__dir__`` for a package whose name ``n`` lives in module ``where[n]``
    (relative to the package); the name is imported on first access and kept in the package."""
    namespace = importlib.import_module(package).__dict__

    def __getattr__(name: str):
        if name not in where:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(where[name], package), name)
        namespace[name] = value
        return value

    def __dir__():
        return sorted(set(namespace) | set(where))

    return __getattr__, __dir__
