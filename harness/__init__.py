"""scf-harness: validate Hartree–Fock SCF codes against invariants and pyscf references.

Atomic units throughout: coordinates in bohr, energies in hartree (Eh).

The public surface is small; attributes are imported on first use so that
``import harness`` stays cheap (no pyscf, no rich until needed).
"""

from __future__ import annotations

from harness._lazy import lazy_exports

__version__ = "0.1.0"

_EXPORTS = {
    "Problem": "harness.contract.problem",
    "DEFAULT_CONVERGENCE": "harness.contract.problem",
    "extract": "harness.contract.solution",
    "Solution": "harness.contract.solution",
    "Status": "harness.contract.results",
    "Measurement": "harness.contract.results",
    "CheckResult": "harness.contract.results",
    "CaseResult": "harness.contract.results",
    "Tolerances": "harness.checks.tolerances",
    "CHECK_NAMES": "harness.checks.tolerances",
    "evaluate": "harness.verdict.evaluate",
    "judge": "harness.verdict.judge",
    "JudgeSettings": "harness.verdict.judge",
    "Case": "harness.catalogue.cases",
    "load_catalogue": "harness.catalogue.cases",
    "load_suite_file": "harness.catalogue.cases",
    "Reference": "harness.catalogue.references",
    "reference_for": "harness.catalogue.references",
    "compute_reference": "harness.catalogue.references",
    "load_plugin": "harness.run.plugins",
    "run_cases": "harness.run.runner",
    "RunOutcome": "harness.run.outcome",
    "HarnessError": "harness.contract.errors",
    "CaseError": "harness.contract.errors",
    "PluginLoadError": "harness.contract.errors",
    "ReferenceDataError": "harness.contract.errors",
    "ToleranceError": "harness.contract.errors",
    "Unsupported": "harness.contract.errors",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


__getattr__, __dir__ = lazy_exports("harness", _EXPORTS, globals())
del lazy_exports
