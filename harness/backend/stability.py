"""pyscf's orbital-Hessian stability analysis of a solution, for ``harness.verdict.states``.

pyscf analysing the code's solution (a reference analysis), not checking itself: a
pyscf mean-field object holding the code's orbitals (:func:`scf_object`), the lowest
eigenpairs of pyscf's orbital Hessian (:func:`internal_mode`, :func:`external_mode`) and
the orbitals moved along a mode (:func:`rotated_orbitals`). The conventions (λ in
Eh/rad², the rotation parameters) are described in ``harness.verdict.states``.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from harness.contract.solution import Solution

import dataclasses
import math

import numpy as np

#: λ below −STABILITY_EIGENVALUE (Eh/rad²) makes a solution a candidate saddle point. pyscf
#: uses 1e-5 for the same decision; eigenvalues of a converged minimum are ≥ ~1e-2 except
#: exact zero modes (rotations among degenerate open-shell orbitals, e.g. OH πx ↔ πy),
#: which the Davidson solver returns as |λ| ≲ 1e-8.
STABILITY_EIGENVALUE = 1e-5
#: Convergence of the Davidson eigenvalue (Eh/rad²). pyscf's default 1e-4 leaves λ
#: uncertain by about that much; 1e-5 is the size of the decision threshold, and a Ritz
#: value only ever lies above the true lowest eigenvalue, so an unconverged λ can hide a
#: marginal instability (|λ| ~ 1e-5, lowering ≪ 1e-6 Eh) but never invent one.
DAVIDSON_TOLERANCE = 1e-5
#: Diagonal-Hessian denominators (Eh/rad²) smaller in magnitude than this are raised to it
#: in the Davidson preconditioner and the start vector (pyscf's own guard): it only keeps
#: 1/(H_ii − e) finite; the converged eigenvalue does not depend on it.
PRECONDITIONER_FLOOR = 1e-8
#: The external (RHF→UHF) start vector takes 1/H_ii only on diagonal elements above this
#: (Eh/rad², as pyscf's ``rhf_external``): smaller or negative ones would dominate the start
#: vector with huge or wrong-signed weights; the smallest element gets weight 1 anyway.
EXTERNAL_START_DIAGONAL = 1e-5
#: Lowest roots sought. One: the start vector below reaches every direction, and each
#: further root costs one more Fock-like build per iteration (benzene/cc-pVDZ: 3 roots
#: at 1e-6 take 2.6× as long as 1 root at 1e-5, for the same λ to 1e-6).
DAVIDSON_ROOTS = 1
#: Weight and seed of the random admixture to pyscf's start vector: without it a
#: symmetric solution's start vector has (near-)zero components along symmetry-breaking
#: rotations, which a Davidson search then never explores.
START_NOISE = 1e-2
START_SEED = 20261201


# --------------------------------------------------------------------------- pyscf object


def scf_object(problem, sol: Solution, ints):
    """A pyscf mean-field object (symmetry off) holding the code's orbitals, pyscf AO order.

    ``mo_coeff``/``mo_occ`` are ``sol.coefficients``/``sol.occupations`` (RHF and
    ROHF (nao, nmo) and (nmo,) 0/1/2; UHF (2, nao, nmo), (2, nmo)); ``mo_energy`` the code's
    orbital energies (Eh) or, when it gave none, the diagonal of Cᵀ F C with F rebuilt by
    pyscf from the code's orbitals. pyscf's SCF is not run.
    """
    from pyscf import scf

    cls = {"rhf": scf.hf.RHF, "uhf": scf.uhf.UHF, "rohf": scf.rohf.ROHF}[problem.method]
    mf = cls(ints.mol)
    mf.verbose = 0
    eri = ints.packed_eri() if hasattr(ints, "packed_eri") else None
    if eri is not None and (ints.mol.incore_anyway or mf._is_mem_enough()):
        mf._eri = eri  # computed ahead (the same integrals pyscf would compute here)
    c = np.asarray(sol.coefficients, dtype=float)
    occ = np.asarray(sol.occupations, dtype=float)
    mf.mo_coeff, mf.mo_occ = c, occ
    if sol.orbital_energies is not None:
        mf.mo_energy = np.asarray(sol.orbital_energies, dtype=float)
    else:
        f = mf.get_fock(dm=mf.make_rdm1(c, occ))
        if problem.method == "uhf":
            mf.mo_energy = np.stack([np.einsum("pi,pq,qi->i", c[s], f[s], c[s])
                                     for s in (0, 1)])
        else:
            mf.mo_energy = np.einsum("pi,pq,qi->i", c, f, c)
    return mf


# --------------------------------------------------------------------------- Hessian


@dataclasses.dataclass(frozen=True, eq=False)
class Mode:
    """The softest orbital rotation found: curvature ``eigenvalue`` (Eh/rad², see module
    docstring), unit ``vector`` in pyscf's parameters, ``kind`` of analysis, and the
    largest element of the orbital gradient ∂E/∂κ (Eh/rad) at the point analysed."""

    eigenvalue: float
    vector: np.ndarray
    kind: str
    gradient: float


def _davidson(hop, hdiag, x0):
    from pyscf import lib

    rng = np.random.default_rng(START_SEED)
    x0 = x0 / np.linalg.norm(x0)
    x0 = x0 + START_NOISE * rng.standard_normal(x0.size) / math.sqrt(x0.size)

    def precond(dx, e, _x0):
        d = hdiag - e
        d[np.abs(d) < PRECONDITIONER_FLOOR] = PRECONDITIONER_FLOOR
        return dx / d

    nroots = min(DAVIDSON_ROOTS, hdiag.size)
    e, v = lib.davidson(hop, x0, precond, tol=DAVIDSON_TOLERANCE, nroots=nroots,
                        verbose=0, max_cycle=100)
    if nroots > 1:
        e, v = e[0], v[0]
    v = np.asarray(v, dtype=float)
    return float(e), v / np.linalg.norm(v)


def internal_mode(mf) -> Mode:
    """The lowest internal orbital-Hessian eigenpair of ``mf`` at its current orbitals.

    pyscf's Hessian-vector products (``gen_g_hop_rhf/uhf/rohf``, symmetry off), the
    matrix 2·hop as in ``pyscf.scf.stability``; start vector as pyscf's (1/diagonal where
    the gradient is non-zero, 1 on the smallest diagonal element).
    """
    from pyscf.soscf import newton_ah

    gen = {"RHF": newton_ah.gen_g_hop_rhf, "UHF": newton_ah.gen_g_hop_uhf,
           "ROHF": newton_ah.gen_g_hop_rohf}[_kind_of(mf)]
    g, hop, hdiag = gen(mf, mf.mo_coeff, mf.mo_occ, with_symmetry=False)
    hdiag = 2.0 * np.asarray(hdiag, dtype=float)
    if hdiag.size == 0:
        return Mode(math.inf, np.zeros(0), "internal", 0.0)
    x0 = np.zeros_like(hdiag)
    x0[g != 0] = 1.0 / np.where(hdiag[g != 0] == 0, PRECONDITIONER_FLOOR, hdiag[g != 0])
    x0[np.argmin(hdiag)] = 1.0
    e, v = _davidson(lambda x: 2.0 * hop(x).real, hdiag, x0)
    return Mode(e, v, "internal", float(2.0 * np.abs(g).max()))


def external_mode(mf) -> Mode:
    """The lowest RHF→UHF (triplet) orbital-Hessian eigenpair of an RHF ``mf``.

    pyscf's RHF→UHF Hessian-vector product (as in ``pyscf.scf.stability.rhf_external``);
    the eigenvalue μ is returned as λ = 2μ, the curvature along (κ, −κ)/√2 in the UHF
    rotation parameters (see the module docstring).
    """
    from pyscf.scf import stability as pyscf_stability

    _, _, hop, hdiag = pyscf_stability._gen_hop_rhf_external(mf, with_symmetry=False)
    hdiag = np.asarray(hdiag, dtype=float)
    x0 = np.zeros_like(hdiag)
    big = hdiag > EXTERNAL_START_DIAGONAL
    x0[big] = 1.0 / hdiag[big]
    x0[np.argmin(hdiag)] = 1.0
    e, v = _davidson(hop, hdiag, x0)
    return Mode(2.0 * e, v, "external RHF→UHF", 0.0)


def _kind_of(mf) -> str:
    from pyscf import scf

    if isinstance(mf, scf.rohf.ROHF):
        return "ROHF"
    if isinstance(mf, scf.uhf.UHF):
        return "UHF"
    return "RHF"


def rotated_orbitals(mf, mode: Mode):
    """The orbitals moved one unit step (1 rad in total) along ``mode``, as pyscf follows
    an instability: C exp(K − Kᵀ). Internal: same layout as ``mf.mo_coeff``. External
    (RHF→UHF): a UHF pair (2, nao, nmo) with alpha rotated by +κ and beta by −κ."""
    from pyscf.scf import stability as pyscf_stability

    rotate = pyscf_stability._rotate_mo
    c, occ = mf.mo_coeff, mf.mo_occ
    if mode.kind != "internal":
        return np.stack([rotate(c, occ, mode.vector), rotate(c, occ, -mode.vector)])
    if _kind_of(mf) == "UHF":
        n = int(np.count_nonzero(occ[0] > 0) * np.count_nonzero(occ[0] == 0))
        return np.stack([rotate(c[0], occ[0], mode.vector[:n]),
                         rotate(c[1], occ[1], mode.vector[n:])])
    return rotate(c, occ, mode.vector)


def _occupations_for(mf, mode: Mode) -> np.ndarray:
    occ = np.asarray(mf.mo_occ, dtype=float)
    if mode.kind != "internal":  # RHF → UHF: one electron of each pair per spin
        return np.stack([(occ > 0).astype(float), (occ > 0).astype(float)])
    return occ



def density_energy(mf) -> float:
    """E[P] (Eh) of the density of ``mf``'s current orbitals, evaluated by pyscf."""
    return float(mf.energy_tot(mf.make_rdm1()))
