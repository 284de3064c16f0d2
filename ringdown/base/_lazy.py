"""Deferred imports, so that ``import ringdown`` and ``ringdown --help`` start fast."""

from __future__ import annotations

import importlib
from types import ModuleType
from typing import Any


class _LazyModule:
    """Stands in for a module and imports it on first attribute access."""

    __slots__ = ("_name", "_module")

    def __init__(self, name: str) -> None:
        self._name = name
        self._module: ModuleType | None = None

    def __getattr__(self, attr: str) -> Any:
        if self._module is None:
            self._module = importlib.import_module(self._name)
        return getattr(self._module, attr)


def lazy_module(name: str) -> Any:
    """A stand-in for module ``name`` that imports it when first used."""
    return _LazyModule(name)
