"""Spin bookkeeping shared by the check kernels.

Every kernel takes arrays with a leading spin axis, as pyscf's kernels do:

* RHF: one component; the density is the *total* density P (occupations 0/2).
* UHF: two components (alpha, beta), each with its own orbitals, occupations 0/1.
* ROHF: two components (alpha, beta) built from one set of orbitals: alpha occupies
  the orbitals with occupation ≥ 1, beta those with occupation 2.
"""

from __future__ import annotations

import numpy as np


def spin_names(nspin: int) -> tuple[str, ...]:
    return ("",) if nspin == 1 else ("alpha", "beta")


def orbitals_by_spin(method: str, c: np.ndarray, occ: np.ndarray):
    """Return (c, occ) with a leading spin axis: (ns, nao, nmo), (ns, nmo).

    RHF keeps one component with occupations 0/2; UHF is passed through; ROHF is
    split into alpha (occ ≥ 1) and beta (occ = 2) occupation vectors of 0/1.
    """
    c = np.asarray(c, dtype=float)
    occ = np.asarray(occ, dtype=float)
    if method == "rhf":
        return c[None], occ[None]
    if method == "uhf":
        return c, occ
    occ_a = (occ > 0.5).astype(float)
    occ_b = (occ > 1.5).astype(float)
    return np.stack([c, c]), np.stack([occ_a, occ_b])


def density_from_orbitals(c: np.ndarray, occ: np.ndarray) -> np.ndarray:
    """P[σ] = C[σ] diag(n[σ]) C[σ]ᵀ for each spin component (ns, nao, nao)."""
    c = np.asarray(c, dtype=float)
    return np.stack([(cs * ns) @ cs.T for cs, ns in zip(c, np.asarray(occ, dtype=float))])


def density_by_spin(method: str, density: np.ndarray) -> np.ndarray:
    """A reported density with a leading spin axis: RHF (1, nao, nao) total, else (2, ...)."""
    density = np.asarray(density, dtype=float)
    return density[None] if method == "rhf" else density


def fock_by_spin(method: str, fock: np.ndarray) -> np.ndarray:
    fock = np.asarray(fock, dtype=float)
    return fock[None] if method == "rhf" else fock


def occupation_scale(method: str) -> float:
    """Largest occupation of one orbital in one density component: 2 for RHF, else 1."""
    return 2.0 if method == "rhf" else 1.0
