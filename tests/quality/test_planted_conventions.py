"""Plug-ins in other AO conventions are read correctly; a different basis is not accepted.

For each entry of ``harness.testing.planted.conventions.CATALOGUE`` the convention is detected
from the overlap the plug-in reports, must be described with the entry's words, and,
undone, must give back every array of the example code's own (pyscf-order) result to
1e-10; the harness checks then pass. The 5D-for-6D entry must be a basis mismatch.
(Named test_planted_conventions.py: tests/unit/test_conventions.py has the short name,
and pytest's default import mode needs unique basenames.) Energies in Eh.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest

from harness.catalogue.cases import load_catalogue
from harness.verdict.conventions import AO_KEYS, BasisMismatch, Convention, detect_convention
from harness.verdict.judge import judge
from harness.testing.example_scf import solve
from harness.testing.planted import catalogue
from harness.testing.planted.conventions import CATALOGUE
from harness.catalogue.references import reference_for
from harness.contract.results import Status
from harness.contract.solution import Solution, extract

#: Cases whose example SCF takes more than a few seconds (cc-pVTZ water, 58 functions).
SLOW_CASES = {"water-cc-pvtz-rhf"}

ENTRIES = [pytest.param(p, id=f"{p.name}-{p.case}",
                        marks=[pytest.mark.slow] if p.case in SLOW_CASES else [])
           for p in CATALOGUE]
CORRECT = [e for e in ENTRIES if e.values[0].correct]


@functools.lru_cache(maxsize=None)
def problem_of(case_name):
    return load_catalogue().case(case_name).problem()


@functools.lru_cache(maxsize=None)
def own_result(case_name):
    """The example code's result in pyscf's convention."""
    return extract(solve(problem_of(case_name))).as_dict()


@functools.lru_cache(maxsize=None)
def planted_result(entry):
    return extract(entry.solve(problem_of(entry.case))).as_dict()


def detected(entry):
    problem = problem_of(entry.case)
    return detect_convention(planted_result(entry)["overlap"], problem.to_pyscf())


def test_registered_in_the_planted_catalogue():
    names = {(p.name, p.case) for p in catalogue()}
    assert {(p.name, p.case) for p in CATALOGUE} <= names
    assert all(p.convention for p in CATALOGUE)


@pytest.mark.parametrize("entry", ENTRIES)
def test_detected_with_the_expected_words(entry):
    found = detected(entry)
    if entry.correct:
        assert isinstance(found, Convention), found
        assert entry.convention in found.describe()
    else:
        assert isinstance(found, BasisMismatch)
        assert entry.fails == frozenset({"basis"})
        assert entry.convention in found.reason


@pytest.mark.parametrize("entry", CORRECT)
def test_undone_gives_the_example_result(entry):
    """Every AO-indexed array, brought back, equals the example code's own to 1e-10;
    each was really in another convention (it differs by > 1e-3 before)."""
    raw, own = planted_result(entry), own_result(entry.case)
    found = detected(entry)
    ao_keys = [k for k in AO_KEYS if k in raw]
    assert set(ao_keys) >= {"coefficients", "density", "fock", "overlap"}
    assert max(np.max(np.abs(raw[k] - own[k])) for k in ao_keys) > 1e-3
    for key in ao_keys:
        assert np.max(np.abs(found.to_reference(key, raw[key]) - own[key])) <= 1e-10, key
    for key in ("energy", "orbital_energies", "occupations"):
        np.testing.assert_array_equal(found.to_reference(key, raw[key]), own[key])


@pytest.mark.parametrize("entry", CORRECT)
def test_checks_pass_once_the_convention_is_undone(entry):
    """evaluate detects the convention itself: the correct plug-in fails no check and the
    basis check names the convention; with the convention switched off (converted back
    to a wrong order by hand), the overlap check fails (so detection is what makes it
    pass)."""
    case = load_catalogue().case(entry.case)
    problem = problem_of(entry.case)
    reference, _ = reference_for(case)
    raw = planted_result(entry)
    results = {r.name: r for r in judge(problem, Solution.from_dict(raw), reference).checks}
    assert [r.message for r in results.values() if r.status is Status.FAILED] == []
    assert results["basis"].status is Status.PASSED
    assert entry.convention in results["basis"].message
    hidden = {k: v for k, v in raw.items() if k != "overlap"}
    hidden["overlap"] = detected(entry).to_reference("overlap", raw["overlap"])
    unconverted = {r.name: r.status for r in judge(problem, Solution.from_dict(hidden),
            reference).checks}
    assert unconverted["basis"] is not Status.FAILED
    assert {"orthonormality", "self-consistency"} <= {
        n for n, st in unconverted.items() if st is Status.FAILED}
