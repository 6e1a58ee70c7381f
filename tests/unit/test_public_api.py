"""The public surface of ``harness`` is exactly what ``__all__`` says, and it is cheap."""

from __future__ import annotations

import subprocess
import sys

import harness

EXPECTED = {
    "CHECK_NAMES", "Case", "CaseError", "CaseResult", "CheckResult", "DEFAULT_CONVERGENCE",
    "HarnessError", "JudgeSettings", "Measurement", "PluginLoadError", "Problem", "Reference",
    "ReferenceDataError", "RunOutcome", "Solution", "Status", "ToleranceError", "Tolerances",
    "Unsupported", "__version__", "compute_reference", "evaluate", "extract", "judge",
    "load_catalogue",
    "load_plugin", "load_suite_file", "reference_for", "run_cases",
}


class TestPublicApi:
    def test_all_is_exactly_the_public_surface(self):
        """__all__ lists exactly the documented names."""
        assert set(harness.__all__) == EXPECTED

    def test_every_name_resolves(self):
        """Each exported name can be fetched from the package."""
        for name in harness.__all__:
            assert getattr(harness, name) is not None, name

    def test_unknown_attribute(self):
        """A misspelt name raises AttributeError naming it."""
        try:
            harness.evaluat  # noqa: B018
        except AttributeError as exc:
            assert str(exc) == "module 'harness' has no attribute 'evaluat'"
        else:
            raise AssertionError("no AttributeError")

    def test_import_is_light(self):
        """Importing the package loads neither pyscf nor rich."""
        code = ("import sys, harness; "
                "print(sorted(m for m in ('pyscf', 'rich') if m in sys.modules))")
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                             check=True).stdout.strip()
        assert out == "[]"

    def test_version_matches_pyproject(self):
        """The package version is the one in pyproject.toml."""
        import tomllib
        from pathlib import Path

        data = tomllib.loads((Path(__file__).resolve().parents[2] / "pyproject.toml").read_text())
        assert harness.__version__ == data["project"]["version"]
