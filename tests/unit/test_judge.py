"""Tests of ``harness.verdict.judge.judge``: one solution, its reference and the settings
become the CaseResult every caller (runner, check-result, certificates, the pytest
plug-in, the self-test) reports. H2/STO-3G (bohr, Eh) solved by the bundled example code.
"""

from __future__ import annotations

import inspect

import pytest

import harness
from harness.catalogue.cases import load_catalogue
from harness.catalogue.references import load_reference
from harness.checks import orthonormal
from harness.checks.tolerances import CHECK_NAMES, Tolerances
from harness.contract.results import Status
from harness.contract.solution import extract
from harness.run import runner
from harness.testing import example_scf
from harness.verdict.judge import JudgeSettings, judge

CASE = "h2-sto-3g-rhf"


@pytest.fixture(scope="module")
def h2():
    """(case, problem, extracted example-code solution, stored reference) of H2/STO-3G."""
    case = load_catalogue().case(CASE)
    problem = case.problem()
    return case, problem, extract(example_scf.solve(problem)), load_reference(case)


class TestCorrectSolution:
    def test_example_code_passes(self, h2):
        """The example code's converged H2 solution passes, with its energies and source."""
        _, problem, solution, reference = h2
        result = judge(problem, solution, reference, JudgeSettings(reference_source="stored",
                                                                   plugin_seconds=0.5))
        assert result.passed and result.error is None
        assert [c.name for c in result.checks] == [n for n in CHECK_NAMES
                                                   if n in {c.name for c in result.checks}]
        assert result.check("reference-energy").status is Status.PASSED
        assert result.check("stationarity").status is Status.PASSED
        assert (result.name, result.method, result.basis) == (CASE, "rhf", "sto-3g")
        assert result.energy == solution.energy
        assert result.reference_energy == pytest.approx(reference.energy, abs=1e-12)
        assert result.reference_source == "stored" and result.plugin_seconds == 0.5
        assert result.check_seconds >= 0

    def test_exported_from_the_package(self):
        """``harness.judge`` and ``harness.JudgeSettings`` are this module's."""
        assert harness.judge is judge and harness.JudgeSettings is JudgeSettings


class TestMissingReference:
    def test_reason_fails_reference_energy_with_it(self, h2):
        """No reference with a reason: reference-energy fails with exactly that reason."""
        _, problem, solution, _ = h2
        result = judge(problem, solution, None, JudgeSettings(
            reference_error="ReferenceDataError: no stored reference for h2-sto-3g-rhf"))
        check = result.check("reference-energy")
        assert check.status is Status.FAILED and not result.passed
        assert check.message == ("reference-energy: no reference (h2-sto-3g-rhf): "
                                 "ReferenceDataError: no stored reference for h2-sto-3g-rhf")
        assert result.reference_energy is None
        assert [c.name for c in result.failures] == ["reference-energy"]

    def test_no_reason_is_not_applicable(self, h2):
        """No reference and no reason: reference-energy is not applicable, the case passes."""
        _, problem, solution, _ = h2
        result = judge(problem, solution, None, JudgeSettings())
        assert result.check("reference-energy").status is Status.NOT_APPLICABLE
        assert result.passed

    def test_reason_is_ignored_when_there_is_a_reference(self, h2):
        """A reference given with a stale reason is compared; the reason is not used."""
        _, problem, solution, reference = h2
        result = judge(problem, solution, reference,
                       JudgeSettings(reference_error="ValueError: stale"))
        assert result.check("reference-energy").status is Status.PASSED


def _broken_kernel(c, s):
    raise ValueError("kernel broke\nsecond line of the message")


class TestCheckException:
    def test_becomes_one_line_internal_error(self, h2, monkeypatch):
        """A check that raises gives the case one line naming the check code and the error."""
        _, problem, solution, reference = h2
        monkeypatch.setattr(orthonormal, "orthonormality", _broken_kernel)
        result = judge(problem, solution, reference, JudgeSettings(plugin_seconds=1.0))
        line = inspect.getsourcelines(_broken_kernel)[1] + 1
        assert result.error == (f"internal error in check _broken_kernel ({__file__}:{line}): "
                                "ValueError: kernel broke")
        assert result.checks == () and not result.passed
        assert result.energy == solution.energy and result.plugin_seconds == 1.0
        assert result.reference_energy == pytest.approx(reference.energy, abs=1e-12)


class TestSameAsTheRunner:
    def test_runner_path_gives_the_same_case_result(self, h2):
        """The example code run by the runner and judge on its extracted solution agree."""
        case, _, _, _ = h2
        out = runner.run_cases([case], "harness.testing.example_scf:solve",
                               tolerances=Tolerances(), timeout=120)
        (ran,) = out.cases
        assert ran.passed
        again = judge(out.problems[CASE], out.solutions[CASE], out.references[CASE],
                      JudgeSettings(tolerances=Tolerances(), reference_source="stored",
                                    plugin_seconds=ran.plugin_seconds))
        assert [(c.name, c.status, c.message, c.hint) for c in again.checks] == \
            [(c.name, c.status, c.message, c.hint) for c in ran.checks]
        assert (again.name, again.method, again.basis, again.error, again.energy,
                again.reference_energy, again.reference_source, again.plugin_seconds) == \
            (ran.name, ran.method, ran.basis, ran.error, ran.energy,
             ran.reference_energy, ran.reference_source, ran.plugin_seconds)
