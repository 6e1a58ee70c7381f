"""Named tolerances, one per check, each with the reason for its size.

Two kinds:

* fixed tolerances guard quantities that a correct code gets right to rounding error
  whatever its convergence threshold (orthonormality, electron count, ...);
* convergence-derived tolerances guard quantities that vanish only at self-consistency;
  they are ``CONVERGENCE_FACTOR × problem.convergence``.

Every value can be overridden per check (``--tol NAME=VALUE`` on the command line,
``Tolerances(...).override({...})`` in Python). All energies in hartree (Eh).
"""

from __future__ import annotations

import dataclasses
import math
from typing import Mapping

from harness.errors import ToleranceError

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

#: max|S_code − S_ref|: analytic overlap integrals agree to ~1e-14 between programs;
#: 1e-8 admits integral codes with looser primitive screening.
OVERLAP = 1e-8

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

CHECK_NAMES = (
    "well-formed",
    "converged-flag",
    "overlap",
    "orthonormality",
    "idempotency",
    "electron-count",
    "density-consistency",
    "stationarity",
    "self-consistency",
    "roothaan-hall",
    "energy-consistency",
    "reference-energy",
    "aufbau",
)

#: Checks whose tolerance is CONVERGENCE_FACTOR × convergence.
DERIVED = ("density-consistency", "stationarity", "self-consistency", "roothaan-hall")

FIXED = {
    "overlap": OVERLAP,
    "orthonormality": ORTHONORMALITY,
    "idempotency": IDEMPOTENCY,
    "electron-count": ELECTRON_COUNT,
    "energy-consistency": ENERGY_CONSISTENCY,
    "reference-energy": REFERENCE_ENERGY,
    "aufbau": AUFBAU,
}


def parse_override(text: str) -> tuple[str, float]:
    """Parse ``NAME=VALUE`` (as given to ``--tol``) into a (check, tolerance) pair."""
    name, sep, value = text.partition("=")
    name = name.strip()
    if not sep:
        raise ToleranceError(f"expected NAME=VALUE, got {text!r}", field="--tol")
    return name, _positive(name, value.strip())


def _positive(name: str, value) -> float:
    if name not in FIXED and name not in DERIVED:
        known = ", ".join(n for n in CHECK_NAMES if n in FIXED or n in DERIVED)
        raise ToleranceError(f"unknown check {name!r} (known: {known})", field="--tol")
    try:
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
        checked = {name: _positive(name, value) for name, value in dict(self.overrides).items()}
        object.__setattr__(self, "overrides", checked)

    def for_check(self, name: str, convergence: float) -> float:
        """The tolerance used for check ``name`` on a problem with this convergence."""
        if name in self.overrides:
            return self.overrides[name]
        if name in DERIVED:
            return self.factor * convergence
        return FIXED[name]

    def override(self, values: Mapping[str, float]) -> "Tolerances":
        merged = dict(self.overrides)
        merged.update(values)
        return Tolerances(overrides=merged, factor=self.factor)

    def table(self, convergence: float) -> dict[str, float]:
        return {name: self.for_check(name, convergence) for name in CHECK_NAMES
                if name in FIXED or name in DERIVED}
