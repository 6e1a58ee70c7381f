"""Named tolerances, one per check, each with the reason for its size.

Two kinds:

* fixed tolerances guard quantities that a correct code gets right to rounding error
  whatever its convergence threshold (orthonormality, electron count, ...);
* convergence-derived tolerances guard quantities that vanish only at self-consistency;
  they are ``CONVERGENCE_FACTOR × problem.convergence``.

The table of checks (``harness.checks.table``) names each check's tolerance; every
check with a tolerance can be overridden (``--tol NAME=VALUE`` on the command line,
``Tolerances(...).override({...})`` in Python). All energies in hartree (Eh).
"""

from __future__ import annotations

import dataclasses
import math
from typing import Mapping

from harness.checks import table as _table
from harness.contract.errors import ToleranceError

#: Derived tolerances are this multiple of the requested convergence. Codes measure
#: the orbital gradient in different orthonormal bases and norms (largest element in
#: the MO basis, in the Löwdin basis, the 2-norm of the gradient vector); for the
#: bases shipped these differ by less than a factor of ~5, so a code that stopped
#: exactly at the requested threshold by any such measure passes, and one that
#: stopped 100x looser fails.
CONVERGENCE_FACTOR = 10.0

#: max|CᵀSC − 1|. Generalised eigensolvers reach ~1e-14·cond(S); cond(S) stays below
#: ~1e5 for the shipped bases, so 1e-8 leaves two orders of margin, while a real
#: normalisation error (eigensolve ignoring S, orbitals normalised to 1 in the AO
#: metric) is of order 1e-2 or more.
ORTHONORMALITY = 1e-8

#: |δE| in Eh, the first-order energy effect of the code's integrals against pyscf's at
#: the code's own density: δE = Tr(P δH) + ½Tr(P δG[P]) − Tr(W δS), δ = code − reference,
#: W the energy-weighted density (Hellmann–Feynman; Helgaker, Jørgensen & Olsen,
#: Molecular Electronic-Structure Theory, Wiley 2000, the first-order energy and the
#: energy-weighted density — from memory). Each integral class (S, T, V, H, (ij|kl)) is
#: judged by its own share. 1e-7 Eh is a tenth of the reference-energy tolerance
#: (REFERENCE_ENERGY): integrals this good cannot by themselves move the energy out of
#: the agreement asked of it, even when several classes err together, while the element
#: size alone says nothing about the cost (an error of 1e-7 on a core element moves E by
#: ~1e-7, the same error on a diffuse element by far less). A missing ½ in T, a wrong
#: sign of V or physicists' ERI order move E by ≥ 1 Eh.
INTEGRAL_ENERGY_EFFECT = 1e-7

#: max|A_code − A_ref| above which an integral check fails whatever the energy effect:
#: an error whose first-order effect cancels at this density (an ERI error antisymmetric
#: under bra–ket exchange, errors in virtual-only blocks) is still a wrong integral. Not
#: overridden by --tol. 1e-4 lies above every difference a correct program shows
#: (basis data rounded to 6 digits: 2–5e-7 in S; the basis-set exchange's STO-3G against
#: pyscf's: 4e-6 in T, issue 11; Boys functions accurate to ~1e-7) and below the
#: planted bugs (≥ 1e-3).
INTEGRAL_ELEMENT_BOUND = 1e-4

#: The overlap check: the energy effect −Tr(W δS) of the code's S (INTEGRAL_ENERGY_EFFECT).
OVERLAP = INTEGRAL_ENERGY_EFFECT

#: max|P S P − P| per spin: exact for a density built from orthonormal orbitals, so the
#: bound is set by orthonormality; 1e-8 also admits a density-DIIS code whose final
#: density is idempotent to second order in a converged gradient.
IDEMPOTENCY = 1e-8

#: |Tr(P S) − N| per spin, in electrons: exact up to rounding for any correct density.
ELECTRON_COUNT = 1e-8

#: |E_reported − E[P_reported]| in Eh: both sides are evaluated on the same density, so
#: only integral accuracy enters; 1e-8 admits codes with integral screening near 1e-10.
ENERGY_CONSISTENCY = 1e-8

#: |E − E_ref| in Eh: the default agreement required with the stored pyscf reference
#: (a microhartree, the precision quoted for published SCF energies).
REFERENCE_ENERGY = 1e-6

#: ε_HOMO − ε_LUMO in Eh, per spin: exactly degenerate frontier orbitals are split only
#: by convergence noise, so a small inversion is allowed.
AUFBAU = 1e-6

#: kinetic, nuclear attraction, core Hamiltonian against pyscf's: the energy effects
#: Tr(P δT), Tr(P δV), Tr(P δH) at the code's density, each within
#: INTEGRAL_ENERGY_EFFECT (the reason is there).
KINETIC = INTEGRAL_ENERGY_EFFECT
NUCLEAR_ATTRACTION = INTEGRAL_ENERGY_EFFECT
CORE_HAMILTONIAN = INTEGRAL_ENERGY_EFFECT

#: −λ_min of the code's overlap matrix (the check passes when λ_min ≥ −this). S is the
#: Gram matrix of the basis functions, so no eigenvalue can be negative beyond rounding
#: (~1e-16 · ‖S‖ · nao ≈ 1e-13 for the shipped bases); the bound is on the negative side,
#: not a small positive one, because nearly linearly dependent bases (diffuse functions)
#: have eigenvalues legitimately approaching 0⁺ — the harness projects those below
#: 1e-8 out of its Löwdin basis. A wrong overlap element typically gives λ_min ≈ −0.1.
OVERLAP_DEFINITE = 1e-10

#: −λ_min of the code's kinetic matrix: T_μν = ½⟨∇χ_μ|∇χ_ν⟩ is a Gram matrix of the
#: gradients, positive definite for the same reason as S (a combination with vanishing
#: gradient would be a constant, which is not normalisable); same rounding argument.
KINETIC_DEFINITE = 1e-10

#: (ij|kl) against pyscf's int2e: the energy effect ½Tr(P δG[P]) at the code's density
#: within INTEGRAL_ENERGY_EFFECT. Physicists' ⟨ij|kl⟩ order instead of chemists' (ij|kl)
#: moves E by ~1 Eh.
TWO_ELECTRON = INTEGRAL_ENERGY_EFFECT

#: max|g − g_perm| over the 7 non-trivial permutations of the 8-fold symmetry
#: (ij|kl) = (ji|kl) = (ij|lk) = (kl|ij) = …, in Eh. A code that unpacks a symmetry-
#: packed array meets it exactly; one that computes every permutation separately meets
#: it to integral accuracy (~1e-13, measured 5e-15 for pyscf's s1 tensors); 1e-10 is
#: rounding level with margin for screening noise.
TWO_ELECTRON_SYMMETRY = 1e-10

#: max((ij|kl)² − (ij|ij)(kl|kl)) in Eh²: the Cauchy–Schwarz inequality of the Coulomb
#: inner product, exact for correct integrals (measured ≤ 3e-16 for pyscf's tensors up
#: to cc-pVTZ water); the slack admits screened integrals, whose error δ ≈ 1e-10 moves
#: (ij|kl)² by ~2|(ij|kl)|δ ≈ 1e-9 for |(ij|kl)| ≈ 5 Eh.
TWO_ELECTRON_SCHWARZ = 1e-8

#: −λ_min of the supermatrix M[(ij),(kl)] = (ij|kl) restricted to symmetric pairs (the
#: check passes when λ_min ≥ −this), in Eh. The Coulomb operator is positive, so M is
#: positive semidefinite; products of basis functions are often linearly dependent
#: (cartesian d: x²+y²+z² is s-like), so λ_min ≈ 0 is legitimate (measured −3e-14 for
#: cc-pVTZ water): the bound is on the negative side. 1e-8 leaves room for screening
#: (an element error of 1e-10 moves eigenvalues by far less than n_pairs × 1e-10).
TWO_ELECTRON_DEFINITE = 1e-8

#: The checks of which state the code found (harness.verdict.states). Their defaults and the
#: reasons for them are next to their definitions there (STABILITY_EIGENVALUE in
#: Eh/rad², SPIN_SQUARED_UHF, ENERGY_ERROR_BOUND in Eh); an override given here replaces
#: that default (for spin-squared it applies to UHF, ROHF keeps its rounding bound).
STATE_CHECK_NAMES = tuple(c.name for c in _table.CHECKS if isinstance(c.tolerance, _table.Fixed)
                          and c.tolerance.constant.startswith("harness.verdict.states:"))

#: The integral checks (harness.checks.integrals), in table order.
INTEGRAL_CHECK_NAMES = (
    "kinetic",
    "nuclear-attraction",
    "core-hamiltonian",
    "overlap-definite",
    "kinetic-definite",
    "two-electron",
    "two-electron-symmetry",
    "two-electron-schwarz",
    "two-electron-definite",
)

#: Every check, in the order evaluate returns them and the table shows them: the names of
#: the declared table ``harness.checks.table.CHECKS``, where each check's tolerance (a
#: constant of this module or of the module that uses it, or a convergence-derived rule)
#: is named.
CHECK_NAMES = _table.NAMES

#: The checks whose tolerance can be overridden (all but converged-flag, a flag).
TOLERANCE_NAMES = _table.TOLERANCE_NAMES

#: Checks whose tolerance is CONVERGENCE_FACTOR × convergence.
DERIVED = tuple(c.name for c in _table.CHECKS if isinstance(c.tolerance, _table.Derived))

#: The fixed tolerances defined in this module, by check (the state, basis, well-formed
#: and history checks name constants of their own modules; see ``harness.checks.table``).
FIXED = {c.name: globals()[c.tolerance.name] for c in _table.CHECKS
         if isinstance(c.tolerance, _table.Fixed)
         and c.tolerance.constant.startswith(__name__ + ":")}


def parse_override(text: str) -> tuple[str, float]:
    """Parse ``NAME=VALUE`` (as given to ``--tol``) into a (check, tolerance) pair."""
    name, sep, value = text.partition("=")
    name = name.strip()
    if not sep:
        raise ToleranceError(f"expected NAME=VALUE, got {text!r}", field="--tol")
    return name, _positive(name, value.strip())


def _positive(name: str, value) -> float:
    if name in CHECK_NAMES and name not in TOLERANCE_NAMES:
        raise ToleranceError(f"check {name!r} has no tolerance ({_table.spec(name).reason})",
                             field="--tol")
    if name not in TOLERANCE_NAMES:
        raise ToleranceError(f"unknown check {name!r} (known: {', '.join(TOLERANCE_NAMES)})",
                             field="--tol")
    try:
        if isinstance(value, bool):  # True would silently become 1.0
            raise TypeError
        x = float(value)
    except (TypeError, ValueError):
        raise ToleranceError(f"tolerance for {name} must be a number, got {value!r}",
                             field="--tol") from None
    if not (x > 0 and math.isfinite(x)):
        raise ToleranceError(f"tolerance for {name} must be positive and finite, got {value!r}",
                             field="--tol")
    return x


@dataclasses.dataclass(frozen=True)
class Tolerances:
    """Per-check tolerances; derived ones follow the problem's convergence.

    ``overrides`` maps check names to absolute tolerances that replace the defaults.
    """

    overrides: Mapping[str, float] = dataclasses.field(default_factory=dict)
    factor: float = CONVERGENCE_FACTOR

    def __post_init__(self):
        if not isinstance(self.overrides, Mapping):
            raise ToleranceError(f"overrides must map check names to tolerances, got "
                                 f"{type(self.overrides).__name__}", field="overrides")
        checked = {name: _positive(name, value) for name, value in dict(self.overrides).items()}
        object.__setattr__(self, "overrides", checked)

    def for_check(self, name: str, convergence: float) -> float:
        """The tolerance used for check ``name`` on a problem with this convergence."""
        if name in self.overrides:
            return self.overrides[name]
        tolerance = _table.spec(name).tolerance
        if tolerance is None:
            raise KeyError(f"check {name!r} has no tolerance")
        return tolerance.value(convergence, self.factor)

    def override(self, values: Mapping[str, float]) -> "Tolerances":
        merged = dict(self.overrides)
        merged.update(values)
        return Tolerances(overrides=merged, factor=self.factor)

    def table(self, convergence: float) -> dict[str, float]:
        """The core and integral tolerances at this convergence (the JSON report's
        "tolerances"), plus every other check whose tolerance is overridden."""
        return {name: self.for_check(name, convergence) for name in CHECK_NAMES
                if name in FIXED or name in DERIVED or name in self.overrides}
