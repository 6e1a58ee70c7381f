"""Packaging: the wheel carries every package and every reference file.

pyproject.toml lists the packages by hand (the reference data is the package
``harness.catalogue.data``, mapped onto the top-level ``references/`` folder), so a new
package under harness/ or a new file type under references/ must be added there. CI
(.ci/run) also builds the wheel, installs it and certifies the smoke suite with it.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from harness.catalogue import cases

ROOT = Path(__file__).resolve().parents[2]


def _setuptools():
    return tomllib.loads((ROOT / "pyproject.toml").read_text("utf-8"))["tool"]["setuptools"]


def test_every_package_under_harness_is_listed():
    on_disk = {".".join(p.parent.relative_to(ROOT).parts)
               for p in (ROOT / "harness").rglob("__init__.py")}
    assert set(_setuptools()["packages"]) == on_disk | {cases.REFERENCE_PACKAGE}


def test_reference_package_is_the_references_folder():
    config = _setuptools()
    assert config["package-dir"] == {cases.REFERENCE_PACKAGE: "references"}
    assert (ROOT / "references" / "__init__.py").is_file()


def test_every_reference_file_type_is_package_data():
    globs = set(_setuptools()["package-data"][cases.REFERENCE_PACKAGE])
    files = [p for p in (ROOT / "references").rglob("*")
             if p.is_file() and "__pycache__" not in p.parts and p.name != "__init__.py"]
    assert files
    missing = sorted({p.suffix for p in files} - {g.removeprefix("**/*") for g in globs})
    assert missing == [], f"add '**/*<suffix>' to the package-data of {cases.REFERENCE_PACKAGE}"


def test_source_tree_reads_its_own_references(monkeypatch):
    monkeypatch.delenv(cases.REFERENCES_ENV, raising=False)
    assert cases.default_reference_dir() == ROOT / "references"


def test_without_a_source_tree_the_package_data_is_used(monkeypatch):
    # An installed wheel: no pyproject.toml beside harness/, the data found with
    # importlib.resources (here the editable install's mapping, or, when this tree is
    # only on PYTHONPATH, the fallback path beside the package).
    monkeypatch.delenv(cases.REFERENCES_ENV, raising=False)
    monkeypatch.setattr(cases, "_source_tree_references", lambda: None)
    found = cases.default_reference_dir()
    assert (found / "cases.toml").is_file() and (found / "data").is_dir()


def test_environment_variable_wins(monkeypatch, tmp_path):
    monkeypatch.setenv(cases.REFERENCES_ENV, str(tmp_path))
    assert cases.default_reference_dir() == tmp_path
