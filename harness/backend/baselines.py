"""pyscf pieces of the bench (``harness.bench.accelerators``): J/K contractions, OpenMP
thread scopes, the integrals of a Hamiltonian, pyscf's DIIS objects and its second-order
SCF object. The bench drives them; its loop and measures are our own numpy. Eh, bohr.
"""

from __future__ import annotations

import numpy as np


def hamiltonian_integrals(problem, incore_nao: int):
    """``(mol, s, h, e_nuc, eri)`` of ``problem`` (the molecule the reference uses): S and
    H = T + V (nao, nao), E_nuc (Eh), and pyscf's 8-fold packed ERI when nao ≤
    ``incore_nao`` (else None)."""
    mol = problem.to_pyscf()
    s = mol.intor_symmetric("int1e_ovlp")
    h = mol.intor_symmetric("int1e_kin") + mol.intor_symmetric("int1e_nuc")
    eri = mol.intor("int2e", aosym="s8") if mol.nao_nr() <= incore_nao else None
    return mol, s, h, float(mol.energy_nuc()), eri


def jk_incore(eri: np.ndarray, d: np.ndarray, threads: int):
    """(vj, vk) of densities ``d`` from a packed ERI, with ``threads`` OpenMP threads."""
    from pyscf import lib, scf

    with lib.with_omp_threads(threads):
        return scf.hf.dot_eri_dm(eri, d, hermi=1)


def jk_direct(mol, d: np.ndarray):
    """(vj, vk) of densities ``d`` by pyscf's integral-direct algorithm."""
    from pyscf import scf

    return scf.hf.get_jk(mol, d, hermi=1)


def omp_threads(threads: int | None):
    """Context manager: pyscf's OpenMP threads set to ``threads`` (None: unchanged)."""
    from pyscf import lib

    return lib.with_omp_threads(threads)


def pyscf_diis(kind: str):
    """A fresh pyscf DIIS object: ``kind`` one of "cdiis", "ediis", "adiis"."""
    from pyscf.scf import diis

    return {"cdiis": diis.CDIIS, "ediis": diis.EDIIS, "adiis": diis.ADIIS}[kind]()


def newton_scf(method: str, mol, eri: np.ndarray | None):
    """pyscf's second-order SCF object (``mf.newton()``) of ``method`` for ``mol``, quiet,
    using the packed ``eri`` when given."""
    from pyscf import scf

    cls = {"rhf": scf.RHF, "uhf": scf.UHF, "rohf": scf.ROHF}[method]
    mf = cls(mol)
    mf.verbose = 0
    if eri is not None:
        mf._eri = eri
    return mf.newton()
