"""Planted integral and history bugs are caught by exactly the checks meant to catch them.

Each entry of ``harness.testing.planted.integrals.CATALOGUE`` runs on its case; the verdict is
the union of ``evaluate`` and the integral and history checks (as evaluate will run them
once they are wired in), and its failing set must equal the entry's ``fails``. Eh.
"""

from __future__ import annotations

import functools

import pytest

from harness.testing import planted
from harness.catalogue.cases import load_catalogue
from harness.checks.history import history_from_results
from harness.checks.integrals import integral_checks
from harness.verdict.judge import judge
from harness.backend.integrals import integrals_for
from harness.testing.planted.integrals import CATALOGUE
from harness.catalogue.references import reference_for
from harness.contract.results import Status
from harness.contract.solution import extract
from harness.checks.tolerances import INTEGRAL_CHECK_NAMES, Tolerances

ENTRIES = {(p.name, p.case): p for p in CATALOGUE}


@functools.lru_cache(maxsize=None)
def verdict(name: str, case_name: str) -> dict:
    entry = ENTRIES[name, case_name]
    case = load_catalogue().case(case_name)
    problem = case.problem()
    reference, _ = reference_for(case)
    sol = extract(entry.solve(problem))
    ints = integrals_for(problem)
    results = {r.name: r for r in judge(problem, sol, reference, integrals=ints).checks}
    results.update(integral_checks(sol, ints, Tolerances(), problem.name))
    results["history"] = history_from_results(sol, results, convergence=problem.convergence,
                                              case=problem.name)
    return results


def failing(name: str, case_name: str) -> set[str]:
    return {n for n, r in verdict(name, case_name).items() if r.status is Status.FAILED}


CAUGHT = [(p.name, p.case, set(p.fails)) for p in CATALOGUE if not p.correct]
CORRECT = [(p.name, p.case) for p in CATALOGUE if p.correct]


@pytest.mark.parametrize("name, case_name, expected", CAUGHT,
                         ids=[f"{n}-{c}" for n, c, _ in CAUGHT])
def test_caught_by_exactly_the_expected_checks(name, case_name, expected):
    assert failing(name, case_name) == expected


@pytest.mark.parametrize("name, case_name", CORRECT, ids=[f"{n}-{c}" for n, c in CORRECT])
def test_correct_variant_passes_every_integral_check(name, case_name):
    """Every integral is reported, so every integral check and history actually ran."""
    v = verdict(name, case_name)
    assert failing(name, case_name) == set()
    for check in INTEGRAL_CHECK_NAMES + ("history",):
        assert v[check].status is Status.PASSED, v[check].message


def test_in_the_selftest_catalogue():
    names = {(p.name, p.case) for p in planted.catalogue()}
    assert set(ENTRIES) <= names


def test_missing_half_fails_by_t():
    """T doubled: the worst element is T(O 1s, O 1s) ≈ 29 Eh, away by T itself."""
    r = verdict("kinetic_missing_half", "water-sto-3g-rhf")["kinetic"]
    assert 25 < r.value < 35
    assert r.message.endswith("AO element (0, 0) = (0 O 1s, 0 O 1s)")


def test_wrong_sign_v_is_off_by_twice_v():
    r = verdict("nuclear_attraction_wrong_sign", "oh-sto-3g-uhf")["nuclear-attraction"]
    assert r.value > 100  # 2|V(O 1s, O 1s)| ≈ 123 Eh
    assert r.message.startswith("nuclear-attraction: your V differs by up to 1.2e+02; at "
                                "your density that moves E by 3.7e+02 Eh > 1e-07 "
                                "(oh-sto-3g-uhf), AO element (0, 0)")


def test_indefinite_overlap_value():
    r = verdict("overlap_not_positive_definite", "water-sto-3g-rhf")["overlap-definite"]
    assert r.value > 0.05
    assert r.message.startswith("overlap-definite: −λ_min(S) = ")


def test_physicists_notation_message():
    v = verdict("eri_physicists_notation", "water-sto-3g-rhf")
    assert v["two-electron"].value > 0.5  # Eh of energy effect
    assert v["two-electron"].message.startswith(
        "two-electron: your (ij|kl) differs by up to 1.1e+00; at your density that moves E "
        "by ")
    assert " Eh > 1e-07 (water-sto-3g-rhf), AO quartet (" in v["two-electron"].message
    assert "(ij|kl) ≠ (ji|kl)" in v["two-electron-symmetry"].message


def test_bra_ket_asymmetry_named():
    r = verdict("eri_bra_ket_asymmetric", "water-sto-3g-rhf")["two-electron-symmetry"]
    assert "(ij|kl) ≠ (kl|ij)" in r.message
    assert 1e-5 < r.value < 1e-2


def test_degeneracy_factor_violates_schwarz():
    r = verdict("eri_degeneracy_left_in", "water-sto-3g-rhf")["two-electron-schwarz"]
    assert r.value > 1.0
    assert r.message.startswith("two-electron-schwarz: max((ij|kl)² − (ij|ij)(kl|kl)) = ")


@pytest.mark.parametrize("name, kind", [
    ("two_iterations_with_history", "false convergence"),
    ("damping_sign_flipped", "oscillation"),
    ("stalled_by_heavy_damping", "stalled error"),
])
def test_history_failure_kind(name, kind):
    message = verdict(name, "water-sto-3g-rhf")["history"].message
    assert message.startswith(f"history: {kind}: ")
