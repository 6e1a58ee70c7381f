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
    and the AO labels of one problem; ``jk`` builds J and K from densities, ``j`` J
    alone; ``kinetic``, ``nuclear_attraction`` and ``eri`` return T, V and (pq|rs).
    ``mol`` is the pyscf ``Mole`` (for backend code and plug-ins, not for the checks)."""

    mol: object
    s: np.ndarray
    h: np.ndarray
    e_nuc: float
    labels: tuple[str, ...]
    _cache: dict = dataclasses.field(default_factory=dict, repr=False, compare=False)

    def jk(self, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """J of the total density and K of each component: (nao, nao), (ns, nao, nao).

        J[P]_pq = Σ_rs (pq|rs) P_rs,  K[P]_pq = Σ_rs (pr|qs) P_rs, by pyscf's direct
        (integral-driven) algorithm; d has a leading spin axis (1 or 2 components).
        """
        vj, vk = self.jk_components(d)
        return vj.sum(axis=0), vk

    def jk_components(self, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """J and K of each component of ``d`` (leading spin axis): both (ns, nao, nao)."""
        from pyscf import scf

        vj, vk = scf.hf.get_jk(self.mol, np.ascontiguousarray(d), hermi=1)
        return np.asarray(vj).reshape(d.shape), np.asarray(vk).reshape(d.shape)

    def fitted_jk_components(self, d: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
        """Density-fitted J̃ and K̃ of each component of ``d`` (leading spin axis), or None
        when the fitted tensor would exceed ``harness.backend.fitting.FITTING_MAX_BYTES``.
        For small density *differences* only (``harness.verdict.coulomb``); the fitted
        tensor is built on first use and kept with these integrals (Eh)."""
        from harness.backend import fitting

        cache = self._cache
        if "fitted" not in cache:
            cache["fitted"] = (fitting.FittedJK(self.mol)
                               if fitting.fitting_bytes(self.mol) <= fitting.FITTING_MAX_BYTES
                               else None)
        fitted = cache["fitted"]
        return None if fitted is None else fitted.jk_components(d)

    def prepare_fitting(self) -> None:
        """Build the fitted tensor of :meth:`fitted_jk_components` now (if within
        ``FITTING_MAX_BYTES``), ahead of the checks, as :meth:`prepare_packed_eri`."""
        from harness.backend import fitting

        if "fitted" not in self._cache:
            self._cache["fitted"] = (fitting.FittedJK(self.mol)
                                     if fitting.fitting_bytes(self.mol)
                                     <= fitting.FITTING_MAX_BYTES else None)

    def j(self, d: np.ndarray) -> np.ndarray:
        """J[P]_pq = Σ_rs (pq|rs) P_rs of one (nao, nao) density (Eh), pyscf's direct
        algorithm."""
        from pyscf import scf

        return np.asarray(scf.hf.get_jk(self.mol, np.ascontiguousarray(d), hermi=1,
                                        with_k=False)[0])

    def prepare_packed_eri(self) -> bool:
        """Compute the packed (8-fold symmetric) ERIs ``mol.intor("int2e", aosym="s8")``
        now and keep them with these integrals, when pyscf's mean-field objects would hold
        them in memory anyway (its own rule, with room for the copy kept here); True if
        kept. Used ahead of the checks (``harness.run.runner``, ``--jobs N > 1``) so a
        large case's stability analysis does not compute them after the plug-in ends."""
        from pyscf import lib, scf

        if "eri_s8" in self._cache:
            return True
        nbf = self.mol.nao_nr()
        room = scf.hf.SCF(self.mol).max_memory * .95
        if not self.mol.incore_anyway and 2 * nbf**4 / 1e6 + lib.current_memory()[0] >= room:
            return False
        self._cache["eri_s8"] = self.mol.intor("int2e", aosym="s8")
        return True

    def packed_eri(self) -> np.ndarray | None:
        """The packed ERIs kept by :meth:`prepare_packed_eri`, or None."""
        return self._cache.get("eri_s8")

    def kinetic(self) -> np.ndarray:
        """T_pq (Eh), (nao, nao)."""
        return self.mol.intor_symmetric("int1e_kin")

    def nuclear_attraction(self) -> np.ndarray:
        """V_pq (Eh), (nao, nao)."""
        return self.mol.intor_symmetric("int1e_nuc")

    def eri(self) -> np.ndarray:
        """(pq|rs) in chemists' notation, the full (nao, nao, nao, nao) array (Eh)."""
        nao = len(self.labels)
        return self.mol.intor("int2e").reshape((nao,) * 4)


@dataclasses.dataclass(frozen=True)
class ShellStructure:
    """The shells of a basis as plain data, pyscf's AO order: per shell its angular
    momentum ``l``, ``atom`` and number of contractions ``nctr``; ``ao_loc`` the first AO
    of each shell (length nshell + 1); ``cart``; the atoms' ``symbols``; ``nao`` and
    ``nao_other`` (the count in the other of cartesian/spherical)."""

    l: tuple[int, ...]
    atom: tuple[int, ...]
    nctr: tuple[int, ...]
    ao_loc: np.ndarray
    cart: bool
    symbols: tuple[str, ...]
    nao: int
    nao_other: int


def shell_structure(mol) -> ShellStructure:
    """:class:`ShellStructure` of a pyscf ``Mole``."""
    nbas = mol.nbas
    return ShellStructure(l=tuple(int(mol.bas_angular(b)) for b in range(nbas)),
                          atom=tuple(int(mol.bas_atom(b)) for b in range(nbas)),
                          nctr=tuple(int(mol.bas_nctr(b)) for b in range(nbas)),
                          ao_loc=np.asarray(mol.ao_loc_nr()), cart=bool(mol.cart),
                          symbols=tuple(mol.atom_symbol(a) for a in range(mol.natm)),
                          nao=int(mol.nao_nr()), nao_other=int(mol.nao_nr(cart=not mol.cart)))


def overlap(mol) -> np.ndarray:
    """S_pq of a pyscf ``Mole``, (nao, nao)."""
    return mol.intor_symmetric("int1e_ovlp")


def integrals_for(problem: Problem, basis_text: str | None = None) -> AOIntegrals:
    """Build the AO integrals of ``problem`` with pyscf (the mole the reference uses);
    with ``basis_text`` (NWChem format) in that basis instead of the named one."""
    if basis_text is not None:
        from harness.backend.mole import mole_in_basis

        mol = mole_in_basis(problem, basis_text)
    else:
        mol = problem.to_pyscf()
    s = mol.intor_symmetric("int1e_ovlp")
    h = mol.intor_symmetric("int1e_kin") + mol.intor_symmetric("int1e_nuc")
    return AOIntegrals(mol=mol, s=s, h=h, e_nuc=float(mol.energy_nuc()),
                       labels=tuple(" ".join(l.split()) for l in mol.ao_labels()))


def exact_jk_components(mol, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact J and K of each component of ``d`` (leading spin axis) for a pyscf ``Mole``,
    pyscf's direct algorithm: (ns, nao, nao) each, Eh."""
    from pyscf import scf

    d = np.ascontiguousarray(d, dtype=float)
    vj, vk = scf.hf.get_jk(mol, d, hermi=1)
    return np.asarray(vj).reshape(d.shape), np.asarray(vk).reshape(d.shape)


def full_integrals(problem, basis_text: str | None = None):
    """S, T, V (nao, nao), the full ERI tensor (pq|rs) (nao⁴, computed with 8-fold
    symmetry and unpacked), E_nuc (Eh) and the shell offsets ``ao_loc`` of ``problem``
    (coordinates in bohr): ``(s, t, v, eri, e_nuc, ao_loc)``, plain numpy/Python values;
    with ``basis_text`` (NWChem format) in that basis instead of the named one."""
    from pyscf import ao2mo

    if basis_text is not None:
        from harness.backend.mole import mole_in_basis

        mol = mole_in_basis(problem, basis_text)
    else:
        mol = problem.to_pyscf()
    nao = mol.nao_nr()
    eri = ao2mo.restore(1, mol.intor("int2e", aosym="s8"), nao)
    return (mol.intor("int1e_ovlp"), mol.intor("int1e_kin"), mol.intor("int1e_nuc"),
            np.ascontiguousarray(eri), float(mol.energy_nuc()),
            tuple(int(i) for i in mol.ao_loc_nr(cart=mol.cart)))
