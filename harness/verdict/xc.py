"""Kohn–Sham pieces of a verdict: the rebuilt Fock matrix and energy terms of a density,
and the own-grid tolerances.

For Hartree–Fock the rebuilt Fock is F = H + J − ½K (RHF) or Fσ = H + J − K[Pσ], and
E[P] = E_nuc + Tr(PH) + ½Tr(PJ) − ¼Tr(PK) (RHF; −½Σσ Tr(Pσ K[Pσ]) unrestricted).
For Kohn–Sham the exchange is replaced (pyscf's convention, ``rsh_and_hybrid_coeff``):

    K_eff = hyb·K + (alpha − hyb)·K_lr(ω)        (K_lr: the erf(ω r₁₂)/r₁₂ operator)
    RKS:        F  = H + J − ½K_eff[P] + V_xc[P],      E = … − ¼Tr(P K_eff) + E_xc[P]
    UKS/ROKS:   Fσ = H + J − K_eff[Pσ] + V_xc^σ[Pα, Pβ], E = … − ½Σσ Tr(Pσ K_eff[Pσ]) + E_xc

with E_xc and V_xc from pyscf/libxc on the problem's pinned grid
(``harness.backend.grid.xc_on_grid``): ONE evaluation per case, made here and passed on.

Own-grid mode (the code integrated on its own grid): the XC-dependent checks
(self-consistency, energy-consistency, reference-energy) get a tolerance
max(named HF tolerance, GRID_SAFETY × the change of the same quantity between two pyscf
grids at the code's density), stated in the message; the grid-free checks stay strict.
Units: Eh, bohr.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.backend import grid as _grid
from harness.checks import energy as _energy

#: Own-grid mode: a tolerance is this many times the measured grid sensitivity (the change
#: of the quantity between pyscf grid levels SENSITIVITY_LEVELS at the code's density).
#: The level-3 → level-5 change estimates the integration error of a medium grid; a code's
#: own reasonable grid (coarser, other radial/angular scheme, other partition) differs
#: from ours by a few such errors, so 10 passes ordinary production grids while a grid
#: that is an order of magnitude worse than a medium one still fails.
GRID_SAFETY = 10.0


@dataclasses.dataclass(frozen=True, eq=False)
class XCPieces:
    """The XC side of one density: E_xc (Eh), V_xc (ns, nao, nao) laid out like the
    density, the exact-exchange coefficients, the electrons the grid integrates."""

    energy: float
    potential: np.ndarray
    coefficients: _grid.HybridCoefficients
    electrons: float


def effective_exchange(ints, d: np.ndarray, vk: np.ndarray,
                       coefficients: _grid.HybridCoefficients) -> np.ndarray:
    """K_eff = hyb·K + (alpha − hyb)·K_lr(ω) of each component of d (leading spin axis);
    ``vk`` is K of each component. Pure functionals: zeros."""
    out = coefficients.hyb * np.asarray(vk)
    if coefficients.range_separated and coefficients.alpha != coefficients.hyb:
        out = out + (coefficients.alpha - coefficients.hyb) * _grid.k_long_range(
            ints.mol, d, coefficients.omega)
    return out


def xc_pieces(problem, ints, d: np.ndarray) -> XCPieces:
    """E_xc, V_xc on ``problem.grid`` (one pyscf evaluation) and the hybrid coefficients.
    RKS: d = (P,), spin-unpolarised; UKS/ROKS: d = (Pα, Pβ), spin-polarised."""
    coeff = _grid.hybrid_coefficients(problem.functional, spin=problem.multiplicity - 1)
    e, v, n = _grid.xc_on_grid(ints.mol, problem.functional, d, problem.grid.coords,
                               problem.grid.weights)
    return XCPieces(energy=e, potential=v, coefficients=coeff, electrons=n)


def fock_and_energy_terms(problem, d: np.ndarray, ints, vj: np.ndarray, vk: np.ndarray,
                          xc: XCPieces | None = None):
    """(rebuilt Fock (ns, nao, nao), EnergyTerms, XCPieces or None) of density ``d``.

    HF methods: F and E[P] of Hartree–Fock. KS methods: as in the module docstring, with
    ``xc`` evaluated here when not given."""
    if not problem.is_kohn_sham:
        return (_energy.fock_from_terms(ints.h, vj, vk, len(d)),
                _energy.energy_terms(d, ints.h, vj, vk, ints.e_nuc), None)
    if xc is None:
        xc = xc_pieces(problem, ints, d)
    keff = effective_exchange(ints, d, vk, xc.coefficients)
    fock = _energy.fock_from_terms(ints.h, vj, keff, len(d)) + xc.potential
    terms = dataclasses.replace(_energy.energy_terms(d, ints.h, vj, keff, ints.e_nuc),
                                xc=xc.energy)
    return fock, terms, xc


@dataclasses.dataclass(frozen=True)
class GridSensitivity:
    """Own-grid mode: |ΔE_xc| (Eh) and the V_xc difference (ns, nao, nao) between pyscf
    grid levels ``levels`` at the code's density."""

    levels: tuple[int, int]
    energy: float
    potential: np.ndarray

    def words(self, what: str) -> str:
        return (f"tolerance from the grid sensitivity of this case: {GRID_SAFETY:g} × "
                f"{what} between pyscf grid levels {self.levels[0]} and {self.levels[1]} "
                f"at the code's density")


def grid_sensitivity(problem, ints, d: np.ndarray, pinned: XCPieces | None = None
                     ) -> GridSensitivity:
    """:class:`GridSensitivity` at SENSITIVITY_LEVELS (the pinned level's evaluation is
    reused when it is one of them)."""
    lo, hi = _grid.SENSITIVITY_LEVELS
    if pinned is not None and lo == _grid.GRID_LEVEL:
        e_lo, v_lo = pinned.energy, pinned.potential
    else:
        e_lo, v_lo, _ = _grid.xc_at_level(ints.mol, problem.functional, d, lo)
    e_hi, v_hi, _ = _grid.xc_at_level(ints.mol, problem.functional, d, hi)
    return GridSensitivity(levels=(lo, hi), energy=abs(e_hi - e_lo), potential=v_hi - v_lo)


def ks_contract_problems(problem, sol) -> list[str]:
    """Why a solution's Kohn–Sham keys do not fit the problem (empty if they do): a
    functional other than the problem's, XC keys on a Hartree–Fock problem."""
    out = []
    if sol.functional is not None and isinstance(sol.functional, str):
        if not problem.is_kohn_sham:
            out.append(f"functional: the code reports {sol.functional!r}, but the case is "
                       f"Hartree–Fock ({problem.method})")
        elif sol.functional != problem.functional:
            out.append(f"functional: the code used {sol.functional!r}, the case asks for "
                       f"{problem.functional!r} (a different energy functional: nothing "
                       f"else can be compared)")
    if not problem.is_kohn_sham:
        for key in ("xc_energy", "xc_potential", "grid"):
            if getattr(sol, key) is not None:
                out.append(f"{key}: given for a Hartree–Fock case ({problem.method})")
    elif isinstance(sol.xc_potential, np.ndarray):
        ns = 1 if problem.shape_method == "rhf" else 2
        want = (problem.nao, problem.nao) if ns == 1 else (2, problem.nao, problem.nao)
        if sol.xc_potential.shape != want:
            out.append(f"xc_potential: shape {sol.xc_potential.shape}, expected {want}")
    return out
