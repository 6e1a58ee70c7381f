"""The check kernels: pure numpy functions on arrays, each with its formula documented.

Each returns a :class:`harness.contract.results.Measurement`; ``harness.verdict.evaluate`` compares it
with its named tolerance.
"""

from harness.checks.frontier import aufbau
from harness.checks.density import density_consistency, electron_count, idempotency
from harness.checks.energy import EnergyTerms, energy_consistency, energy_terms, reference_energy
from harness.checks.orthonormal import Lowdin, lowdin, matrix_difference, orthonormality
from harness.checks.stationarity import commutator, roothaan_hall, rohf_conditions
from harness.checks.wellformed import well_formed

__all__ = [
    "EnergyTerms", "Lowdin", "aufbau", "commutator", "density_consistency", "electron_count",
    "energy_consistency", "energy_terms", "idempotency", "lowdin", "matrix_difference",
    "orthonormality", "reference_energy", "rohf_conditions", "roothaan_hall", "well_formed",
]
