"""The pyscf boundary: only ``harness/backend/`` imports pyscf, and the checks kernels
(``harness/checks/``) take arrays, never the backend.

Every module of the harness package is parsed (ast), and every import statement counts:
top-level, inside functions and classes, and under ``if TYPE_CHECKING``.
"""

from __future__ import annotations

import ast
from pathlib import Path

import harness

PACKAGE = Path(harness.__file__).resolve().parent


def _modules():
    return sorted(PACKAGE.rglob("*.py"))


def _relative(path: Path) -> str:
    return path.relative_to(PACKAGE.parent).as_posix()


def _import_names(source: str, package: list[str]):
    """(line, imported module name) of every import statement in ``source`` (a module of
    ``package``), relative imports resolved; ``from a import b`` yields both a and a.b."""
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield node.lineno, alias.name
        elif isinstance(node, ast.ImportFrom):
            base = package[:len(package) - node.level + 1] if node.level else []
            name = ".".join(base + ([node.module] if node.module else []))
            yield node.lineno, name
            for alias in node.names:  # "from harness import backend"
                yield node.lineno, f"{name}.{alias.name}"


def _imports(path: Path):
    package = list(path.relative_to(PACKAGE.parent).parts[:-1])
    return list(_import_names(path.read_text(encoding="utf-8"), package))


def _is(name: str, top: str) -> bool:
    return name == top or name.startswith(top + ".")


def _in(path: Path, sub: str) -> bool:
    return _relative(path).startswith(f"harness/{sub}/")


def test_walk_sees_the_package():
    names = {_relative(p) for p in _modules()}
    assert "harness/backend/integrals.py" in names
    assert "harness/checks/integrals.py" in names
    assert any(_is(n, "pyscf") for p in _modules() if _in(p, "backend") for _, n in _imports(p))


def test_only_the_backend_imports_pyscf():
    offenders = [f"{_relative(p)}:{line} imports {name}" for p in _modules()
                 if not _in(p, "backend") for line, name in _imports(p) if _is(name, "pyscf")]
    assert not offenders, "pyscf imported outside harness/backend/:\n" + "\n".join(offenders)


def test_checks_do_not_import_the_backend():
    offenders = [f"{_relative(p)}:{line} imports {name}" for p in _modules()
                 if _in(p, "checks") for line, name in _imports(p)
                 if _is(name, "harness.backend")]
    assert not offenders, "harness/checks/ imports the backend:\n" + "\n".join(offenders)


def test_references_and_states_do_not_import_each_other():
    """The stored references (catalogue) and the state checks (verdict) both use the
    backend's SCF driver, not each other."""
    pairs = (("harness/catalogue/references.py", "harness.verdict"),
             ("harness/verdict/states.py", "harness.catalogue.references"),
             ("harness/backend", "harness.catalogue"), ("harness/backend", "harness.verdict"))
    offenders = [f"{_relative(p)}:{line} imports {name}" for where, banned in pairs
                 for p in _modules() if _relative(p).startswith(where)
                 for line, name in _imports(p) if _is(name, banned)]
    assert not offenders, "\n".join(offenders)


def test_the_scanner_sees_every_kind_of_import():
    source = ("import os\nfrom typing import TYPE_CHECKING\nif TYPE_CHECKING:\n"
              "    from pyscf import gto\n\ndef f():\n    import pyscf.lib\n\n"
              "class C:\n    def m(self):\n        from .. import backend\n"
              "        from ..backend.integrals import integrals_for\n")
    found = list(_import_names(source, ["harness", "checks"]))
    assert [line for line, name in found if _is(name, "pyscf")] == [4, 4, 7]
    assert [line for line, name in found if _is(name, "harness.backend")] == [11, 12, 12]


def test_only_the_backend_reads_the_private_basis():
    """``mol._basis`` (pyscf's private basis dictionary) is read in harness/backend/ only;
    everyone else uses ``harness.backend.mole.basis_set`` / ``Problem.basis_set``."""
    offenders = [f"{_relative(p)}:{node.lineno} reads ._basis" for p in _modules()
                 if not _in(p, "backend")
                 for node in ast.walk(ast.parse(p.read_text(encoding="utf-8")))
                 if isinstance(node, ast.Attribute) and node.attr == "_basis"]
    assert not offenders, "\n".join(offenders)
    seen = [node for p in _modules() if _in(p, "backend")
            for node in ast.walk(ast.parse(p.read_text(encoding="utf-8")))
            if isinstance(node, ast.Attribute) and node.attr == "_basis"]
    assert seen  # the scan sees the one reader
