"""Helpers for the tests: solve a case once and write the result in each file format.

Solutions come from the bundled example SCF code (``harness.testing.example_scf``), energies in
Eh; Molden files are written with pyscf's Molden writer (``pyscf.tools.molden``).
"""

from __future__ import annotations

import functools
import json
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
LAB_CODE = HERE / "lab_code.py"
BAD_CODE = HERE / "bad_code.py"
C_SOURCE = HERE / "rhf.c"
C_WRAPPER = HERE / "c_wrapper.py"


@functools.lru_cache(maxsize=None)
def problem(name: str):
    from harness.catalogue.cases import load_catalogue

    return load_catalogue().case(name).problem()


@functools.lru_cache(maxsize=None)
def solved(name: str) -> dict:
    """The example code's plug-in dict for catalogue case ``name`` (cached; do not modify)."""
    from harness.testing.example_scf import solve

    return solve(problem(name))


def write_npz(path, result: dict) -> Path:
    np.savez(path, **{k: np.asarray(v) for k, v in result.items()})
    return Path(path)


def write_json(path, result: dict, **extra) -> Path:
    doc = {k: (np.asarray(v).tolist() if isinstance(v, np.ndarray) else v)
           for k, v in result.items()}
    doc.update(extra)
    Path(path).write_text(json.dumps(doc), encoding="utf-8")
    return Path(path)


def write_h5(path, result: dict, skip=()) -> Path:
    import h5py

    with h5py.File(path, "w") as fh:
        for k, v in result.items():
            if k not in skip:
                fh[k] = np.asarray(v)
    return Path(path)


def write_molden(path, mol, result: dict, *, energy: bool = True) -> Path:
    """Molden file of ``result`` for pyscf ``mol`` (+ ``<stem>.json`` with the energy)."""
    from pyscf.tools import molden

    path = Path(path)
    with open(path, "w") as fh:
        molden.header(mol, fh)
        c, e, occ = (np.asarray(result[k]) for k in ("coefficients", "orbital_energies",
                                                     "occupations"))
        if c.ndim == 3:
            molden.orbital_coeff(mol, fh, c[0], spin="Alpha", ene=e[0], occ=occ[0])
            molden.orbital_coeff(mol, fh, c[1], spin="Beta", ene=e[1], occ=occ[1])
        else:
            molden.orbital_coeff(mol, fh, c, ene=e, occ=occ)
    if energy:
        path.with_suffix(".json").write_text(json.dumps(
            {"energy": float(result["energy"]), "converged": bool(result["converged"])}))
    return path
