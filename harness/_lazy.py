"""Lazy re-exports for a package's ``__init__``: names imported on first use.

Used by ``harness`` (so ``import harness`` stays cheap) and ``harness.checks`` (so the
declared check table can be read without numpy). Standard library only.
"""

from __future__ import annotations

import importlib
from typing import Callable


def lazy_exports(package: str, exports: dict[str, str], namespace: dict
                 ) -> tuple[Callable[[str], object], Callable[[], list[str]]]:
    """``(__getattr__, __dir__)`` for ``package``: ``exports`` maps a public name to the
    module that defines it; a name is imported when first asked for and then kept in
    ``namespace`` (the package's ``globals()``)."""

    def __getattr__(name: str):
        module = exports.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(module), name)
        namespace[name] = value
        return value

    def __dir__():
        return sorted(set(namespace) | set(namespace.get("__all__", ())))

    return __getattr__, __dir__
