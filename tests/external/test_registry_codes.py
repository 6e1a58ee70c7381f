"""Independent open-source SCF programs from the package registry, judged end to end.

Each code runs through its adapter in ``registry_codes.py`` (bohr in, Eh out, its own AO
order and normalisation) in its own child process, as ``scf-harness certify`` runs it
(``harness.run.runner.run_cases``), and is judged against the stored reference. Two kinds of test:

* verdicts the harness gets right today (a correct code passes; a real defect of the
  code is caught by exactly the check meant for it);
* ``xfail(strict=True)``: false alarms on a correct code, each naming the harness gap
  (issue 11) that must be closed. When the fix lands the test passes and the strict
  xfail turns red: delete the marker then.

Measured figures behind each expectation: docs/external-codes.md, "Tried on real codes".
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
import registry_codes as rc  # noqa: E402

pytestmark = pytest.mark.slow


ADAPTERS = Path(__file__).resolve().parent / "registry_codes.py"


def verdict(solve, name):
    """(failed check names, CaseResult) of one catalogue case solved by ``solve``, run as
    ``scf-harness certify`` runs it: the plug-in in its own child process (OpenQP keeps
    state in its library between runs in one process: a second case in the same process
    gets other orbitals), judged here by ``judge``."""
    from harness.catalogue.cases import load_catalogue
    from harness.checks.tolerances import Tolerances
    from harness.run.runner import run_cases

    case = load_catalogue().case(name)
    outcome = run_cases([case], f"{ADAPTERS}:{solve.__name__}", tolerances=Tolerances(),
                        timeout=300)
    (result,) = outcome.cases
    assert result.error is None, result.error
    return {c.name for c in result.checks if c.passed is False}, result


def message(result, check):
    return next(c.message for c in result.checks if c.name == check)


#: Checks that judge the code's state in its own metric (issue 11, item 2): a code whose
#: S differs slightly from the reference's must be measured with its own S here.
OWN_METRIC = {"orthonormality", "idempotency", "electron-count", "stationarity",
              "self-consistency", "roothaan-hall", "density-consistency"}


# --------------------------------------------------------------------------- pyquante2


@pytest.fixture(scope="module")
def pyquante2():
    return pytest.importorskip("pyquante2")


def test_pyquante2_h2_passes(pyquante2):
    failed, result = verdict(rc.solve_pyquante2, "h2-sto-3g-rhf")
    assert failed == set()
    assert result.passed


def test_pyquante2_water_energy_consistency_in_own_integrals(pyquante2):
    failed, result = verdict(rc.solve_pyquante2, "water-sto-3g-rhf")
    # today: energy-consistency, nuclear-attraction, core-hamiltonian, two-electron
    assert "nuclear-attraction" in failed  # 2.0e-7 at (O 1s, O 1s): real, small
    assert "energy-consistency" not in failed


# --------------------------------------------------------------------------- pyqint


@pytest.fixture(scope="module")
def pyqint():
    return pytest.importorskip("pyqint")


def test_pyqint_own_basis_judged_in_own_metric(pyqint):
    failed, _ = verdict(rc.solve_pyqint, "water-sto-3g-rhf")
    assert "overlap" in failed  # 5.0e-7: the basis data differ, reported once
    assert failed & OWN_METRIC == set()


def test_pyqint_harness_basis_energy_consistency(pyqint):
    failed, result = verdict(rc.solve_pyqint_harness_basis, "h2-sto-3g-rhf")
    assert "overlap" not in failed and failed & OWN_METRIC == set()  # true today
    assert "nuclear-attraction" in failed
    assert "energy-consistency" not in failed


def test_pyqint_missing_method_is_reported_in_one_line(pyqint):
    import harness

    refusal = (rc.CodeCannotRun, getattr(harness, "Unsupported", rc.CodeCannotRun))
    with pytest.raises(refusal, match="^pyqint has no ROHF$"):
        rc.solve_pyqint(_problem("nh2-sto-3g-rohf"))


def test_pyqint_unsupported_case_is_neither_passed_nor_failed(pyqint):
    """pyqint has no ROHF: through the runner the case is unsupported with that reason,
    neither passed nor failed (issue 11 item 5)."""
    import harness
    from harness.catalogue.cases import load_catalogue
    from harness.checks.tolerances import Tolerances
    from harness.run.runner import run_cases

    with pytest.raises(harness.Unsupported):
        rc.solve_pyqint(_problem("nh2-sto-3g-rohf"))
    out = run_cases([load_catalogue().case("nh2-sto-3g-rohf")],
                    f"{rc.__file__}:solve_pyqint", tolerances=Tolerances(), timeout=120.0)
    (case,) = out.cases
    assert (case.status, case.unsupported) == ("unsupported", "pyqint has no ROHF")
    assert out.passed and out.tally == (0, 0, 1)


def _problem(name):
    from harness.catalogue.cases import load_catalogue

    return load_catalogue().case(name).problem()


# --------------------------------------------------------------------------- openqp


@pytest.fixture(scope="module")
def openqp():
    return pytest.importorskip("oqp")


def test_openqp_heh_cation_passes(openqp):
    failed, result = verdict(rc.solve_openqp, "heh-cation-sto-3g-rhf")
    assert abs(result.energy - result.reference_energy) < 1e-8  # true today: 1.7e-9
    assert failed == set()  # today: {"kinetic"}


def test_openqp_h2_stale_orbital_energies_are_caught(openqp):
    """A real defect of the code: converged in one iteration, OpenQP reports the
    guess's orbital energies (-1.0721, 0.0721 Eh; its own Fock gives -0.5782, 0.6703),
    also in its log. Roothaan–Hall catches exactly that."""
    failed, result = verdict(rc.solve_openqp, "h2-sto-3g-rhf")
    assert failed == {"roothaan-hall"}
    assert message(result, "roothaan-hall").startswith(
        "roothaan-hall: max|X(FC − SCε)| = 4.2e-01 > 1.0e-05 (h2-sto-3g-rhf), orbital 1")


def test_openqp_water_judged_in_own_metric(openqp):
    """OpenQP's STO-3G is the basis-set exchange's (more digits, S 1.7e-8 off pyscf's):
    judged in that basis, every check passes."""
    failed, result = verdict(rc.solve_openqp, "water-sto-3g-rhf")
    assert failed & (OWN_METRIC | {"energy-consistency"}) == set()
    assert result.analysis["judged_in_basis"]["judged"] is True
    assert "use --basis-source bse to say so" in message(result, "basis")


def test_openqp_cc_pvdz_same_space_other_contraction(openqp):
    failed, result = verdict(rc.solve_openqp, "water-cc-pvdz-rhf")
    assert abs(result.energy - result.reference_energy) < 1e-9
    assert "basis" not in failed
    assert message(result, "basis").startswith(
        "basis: your overlap is cc-pvdz as the basis-set exchange ")
    assert "the same space of functions, differently contracted: E must agree" in \
        message(result, "basis")


@pytest.mark.xfail(strict=True, reason="issue 11 item 3: pyquante2's core guess lands on the "
                   "known excited determinant of NH2 (0.095 Eh up, caught by stability), "
                   "but the 'known state' hint is suppressed because energy-consistency "
                   "failed by 3.4e-7 on the reference's integrals (V differs by 1.5e-7)")
def test_pyquante2_nh2_known_state_is_named(pyquante2):
    failed, result = verdict(rc.solve_pyquante2, "nh2-sto-3g-rohf")
    assert {"reference-energy", "stability"} <= failed  # a real catch: wrong state
    ref = next(c for c in result.checks if c.name == "reference-energy")
    assert (ref.hint or "").startswith("your solution is the known state")


def test_openqp_6_31gd_mapping_found_despite_basis_digits(openqp):
    failed, _ = verdict(rc.solve_openqp, "ammonia-6-31gd-rhf")
    assert "basis" not in failed


def test_openqp_failed_basis_skips_matrix_checks(openqp):
    # pyscf's Li cc-pVDZ is another basis than the exchange's: E differs by 1.1e-4 Eh
    failed, result = verdict(rc.solve_openqp, "lih-cc-pvdz-rhf")
    assert "basis" in failed  # a true verdict: the bases differ
    assert failed <= {"basis", "reference-energy"}
    assert message(result, "basis").startswith(
        "basis: the basis differs: your overlap is cc-pvdz as the basis-set exchange ")


def test_openqp_harness_basis_cc_pvdz_passes(openqp):
    """Given the harness's basis text, OpenQP's spherical d functions (its own order and
    norms) are mapped and every check passes (E − E_ref = 4e-13)."""
    failed, result = verdict(rc.solve_openqp_harness_basis, "water-cc-pvdz-rhf")
    assert failed == set()
    assert result.passed


def test_openqp_harness_basis_sp_norms_detected(openqp):
    failed, result = verdict(rc.solve_openqp_harness_basis, "water-sto-3g-rhf")
    assert abs(result.energy - result.reference_energy) < 1e-10  # true today: 7e-13
    assert failed == set()
