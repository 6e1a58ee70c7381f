"""scf-harness: validate Hartree–Fock SCF codes against invariants and pyscf references.

Atomic units throughout: coordinates in bohr, energies in hartree (Eh).

The public surface is small; attributes are imported on first use so that
``import harness`` stays cheap (no pyscf, no rich until needed).
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

_EXPORTS = {
    "Problem": "harness.problem",
    "DEFAULT_CONVERGENCE": "harness.problem",
    "extract": "harness.solution",
    "Status": "harness.results",
    "Measurement": "harness.results",
    "CheckResult": "harness.results",
    "CaseResult": "harness.results",
    "Tolerances": "harness.tolerances",
    "CHECK_NAMES": "harness.tolerances",
    "evaluate": "harness.evaluate",
    "Case": "harness.cases",
    "load_catalogue": "harness.cases",
    "load_suite_file": "harness.cases",
    "Reference": "harness.references",
    "reference_for": "harness.references",
    "compute_reference": "harness.references",
    "load_plugin": "harness.plugins",
    "run_cases": "harness.runner",
    "RunOutcome": "harness.runner",
    "HarnessError": "harness.errors",
    "CaseError": "harness.errors",
    "PluginLoadError": "harness.errors",
    "ReferenceDataError": "harness.errors",
    "ToleranceError": "harness.errors",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'harness' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
