"""AO integrals and Coulomb/exchange matrices for the checks, from pyscf.

pyscf supplies integrals only; every check is our own numpy on top of these arrays.
Units: bohr, hartree (Eh).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.contract.problem import Problem


@dataclasses.dataclass(frozen=True)
class AOIntegrals:
    """Overlap ``s``, core Hamiltonian ``h`` = T + V, nuclear repulsion ``e_nuc`` (Eh),
    and the AO labels of one problem; ``jk`` builds J and K from densities."""

    mol: object
    s: np.ndarray
    h: np.ndarray
    e_nuc: float
    labels: tuple[str, ...]

    def jk(self, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """J of the total density and K of each component: (nao, nao), (ns, nao, nao).

        J[P]_pq = Σ_rs (pq|rs) P_rs,  K[P]_pq = Σ_rs (pr|qs) P_rs, by pyscf's direct
        (integral-driven) algorithm; d has a leading spin axis (1 or 2 components).
        """
        from pyscf import scf

        vj, vk = scf.hf.get_jk(self.mol, np.ascontiguousarray(d), hermi=1)
        vj = np.asarray(vj).reshape(d.shape)
        vk = np.asarray(vk).reshape(d.shape)
        return vj.sum(axis=0), vk


def integrals_for(problem: Problem) -> AOIntegrals:
    """Build the AO integrals of ``problem`` with pyscf (the mole the reference uses)."""
    mol = problem.to_pyscf()
    s = mol.intor_symmetric("int1e_ovlp")
    h = mol.intor_symmetric("int1e_kin") + mol.intor_symmetric("int1e_nuc")
    return AOIntegrals(mol=mol, s=s, h=h, e_nuc=float(mol.energy_nuc()),
                       labels=tuple(" ".join(l.split()) for l in mol.ao_labels()))
