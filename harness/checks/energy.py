"""Energy checks: the Hartree–Fock energy functional, consistency, reference.

Energies in hartree (Eh). J and K are the Coulomb and exchange matrices of the
densities given (computed from pyscf integrals by ``harness.backend.integrals``).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.contract.results import Measurement, fixed


@dataclasses.dataclass(frozen=True)
class EnergyTerms:
    """The SCF energy split into its terms (Eh): Hartree–Fock, or Kohn–Sham with
    ``exchange`` the exact-exchange part (scaled by the functional's fraction) and ``xc``
    the exchange–correlation energy E_xc (0 for Hartree–Fock)."""

    nuclear: float
    one_electron: float
    coulomb: float
    exchange: float
    xc: float = 0.0

    @property
    def total(self) -> float:
        return self.nuclear + self.one_electron + self.coulomb + self.exchange + self.xc


def energy_terms(d: np.ndarray, h: np.ndarray, vj: np.ndarray, vk: np.ndarray,
                 e_nuc: float) -> EnergyTerms:
    """E[P] = E_nuc + Tr(P H) + ½ Tr(P J) + E_K.

    RHF (d of shape (1, nao, nao) holding the total P; vk = K(P)): E_K = −¼ Tr(P K).
    UHF/ROHF (d = (Pα, Pβ); vk = (K(Pα), K(Pβ))): E_K = −½ Σσ Tr(Pσ K(Pσ)).
    vj is J of the total density, (nao, nao).
    """
    p = d.sum(axis=0)
    e1 = float(np.einsum("pq,qp->", p, h))
    ej = 0.5 * float(np.einsum("pq,qp->", p, vj))
    if len(d) == 1:
        ek = -0.25 * float(np.einsum("pq,qp->", d[0], vk[0]))
    else:
        ek = -0.5 * float(np.einsum("spq,sqp->", d, vk))
    return EnergyTerms(nuclear=float(e_nuc), one_electron=e1, coulomb=ej, exchange=ek)


def energy_terms_from_difference(d: np.ndarray, d_ref: np.ndarray, h: np.ndarray,
                                 j_ref: np.ndarray, k_ref: np.ndarray, j_diff: np.ndarray,
                                 k_diff: np.ndarray, e_nuc: float) -> EnergyTerms:
    """E[P] from J/K of a reference density and of the difference ΔP = P − P_ref.

    Per spin component (leading axis; RHF one component, the total P): j_ref = J[Pσ_ref],
    k_ref = K[Pσ_ref], j_diff ≈ J[ΔPσ], k_diff ≈ K[ΔPσ]. With J of the totals
    J_r = Σσ j_ref, J_Δ = Σσ j_diff and the symmetry Tr(A J[B]) = Tr(B J[A]) (same for K):

        E_J = ½ Tr(P J_r) + ½ Tr(ΔP J_r) + ½ Tr(ΔP J_Δ)
        E_K = −¼ [Tr(P K_r) + Tr(ΔP K_r) + Tr(ΔP K_Δ)]            (RHF)
        E_K = −½ Σσ [Tr(Pσ K_r,σ) + Tr(ΔPσ K_r,σ) + Tr(ΔPσ K_Δ,σ)]  (UHF)

    equal to :func:`energy_terms` with J = J_r + J_Δ, K = K_r + K_Δ when j_diff, k_diff are
    exact; an error δ in them enters only through ½ Tr(ΔP δJ) (and the exchange partner),
    second order in ΔP. Eh.
    """
    p = d.sum(axis=0)
    delta = d - d_ref
    dp = delta.sum(axis=0)
    jr, jd = j_ref.sum(axis=0), j_diff.sum(axis=0)
    e1 = float(np.einsum("pq,qp->", p, h))
    ej = 0.5 * float(np.einsum("pq,qp->", p, jr) + np.einsum("pq,qp->", dp, jr)
                     + np.einsum("pq,qp->", dp, jd))
    ex = float(np.einsum("spq,sqp->", d, k_ref) + np.einsum("spq,sqp->", delta, k_ref)
               + np.einsum("spq,sqp->", delta, k_diff))
    ek = -0.25 * ex if len(d) == 1 else -0.5 * ex
    return EnergyTerms(nuclear=float(e_nuc), one_electron=e1, coulomb=ej, exchange=ek)


def fock_from_terms(h: np.ndarray, vj: np.ndarray, vk: np.ndarray, nspin: int) -> np.ndarray:
    """F = H + J − ½K (RHF, one component) or Fσ = H + J − K(Pσ) (two components)."""
    if nspin == 1:
        return (h + vj - 0.5 * vk[0])[None]
    return np.stack([h + vj - vk[0], h + vj - vk[1]])


def energy_consistency(e_reported: float, terms: EnergyTerms) -> Measurement:
    """|E_reported − E[P_reported]|: the reported energy is the functional of the density."""
    diff = e_reported - terms.total
    return Measurement(abs(diff), "|E − E[P]|",
                       f"E = {fixed(e_reported)}, E[P] = {fixed(terms.total)} Eh")


def reference_energy(e_reported: float, e_ref: float) -> Measurement:
    """|E − E_ref| against the stored pyscf reference; the sign is stated in words."""
    diff = e_reported - e_ref
    side = "above" if diff > 0 else "below"
    return Measurement(abs(diff), "|E − E_ref|",
                       f"E = {fixed(e_reported)} Eh is {abs(diff):.3e} Eh {side} "
                       f"E_ref = {fixed(e_ref)} Eh")
