"""The check kernels: pure numpy functions on arrays, each with its formula documented.

Each returns a :class:`harness.contract.results.Measurement`; ``harness.verdict.evaluate`` compares it
with its named tolerance. The kernels are imported on first use, so that the declared
table of checks (``harness.checks.table``, standard library only) can be read without
importing numpy.
"""

from __future__ import annotations

from harness._lazy import lazy_exports

_EXPORTS = {
    "aufbau": "harness.checks.frontier",
    "density_consistency": "harness.checks.density",
    "electron_count": "harness.checks.density",
    "idempotency": "harness.checks.density",
    "EnergyTerms": "harness.checks.energy",
    "energy_consistency": "harness.checks.energy",
    "energy_terms": "harness.checks.energy",
    "reference_energy": "harness.checks.energy",
    "Lowdin": "harness.checks.orthonormal",
    "lowdin": "harness.checks.orthonormal",
    "matrix_difference": "harness.checks.orthonormal",
    "orthonormality": "harness.checks.orthonormal",
    "commutator": "harness.checks.stationarity",
    "roothaan_hall": "harness.checks.stationarity",
    "rohf_conditions": "harness.checks.stationarity",
    "well_formed": "harness.checks.wellformed",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports("harness.checks", _EXPORTS, globals())
del lazy_exports
