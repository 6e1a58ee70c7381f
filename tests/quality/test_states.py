"""The wrong-state plug-ins of harness.testing.planted.states are caught, and named as known states.

For each CATALOGUE entry the failing checks of ``evaluate`` together with the three state
checks (``harness.verdict.states.state_checks``: stability, spin-squared, energy-error-bound)
must be exactly the entry's ``fails``; the hint from ``match_state`` on the reference
energy must contain the entry's ``hint`` (or be absent for the correct codes). Energies
in Eh.
"""

from __future__ import annotations

import functools

import pytest

from harness.verdict import states as stab
from harness.catalogue.cases import load_catalogue
from harness.verdict.judge import judge
from harness.backend.integrals import integrals_for
from harness.testing.planted.states import CATALOGUE
from harness.catalogue.references import reference_for
from harness.contract.results import Status
from harness.contract.solution import extract
from harness.checks.tolerances import REFERENCE_ENERGY

#: Entries whose run (plug-in plus following the instability with pyscf) takes longer
#: than a few seconds (measured 8 s for the ethynyl radical under UHF).
SLOW_CASES = {"c2h-6-31g-uhf"}
#: Single entries as slow (name, case): the shipped lab code on stretched N₂ took 81 s
#: (two cores shared with other jobs).
SLOW_ENTRIES = {("lab_code_as_shipped", "n2-stretched-6-31g-uhf")}
#: Cases whose reached state depends on the frame LAPACK picks inside a degenerate π set
#: (stretched N₂: the guess pairs HOMO−k with LUMO+k, which only break the symmetry
#: when the two degenerate sets come out in the same orientation). On some BLAS/LAPACK
#: builds the example code lands on another state; the harness reports that state
#: correctly either way, so these entries are allowed to differ (not strict).
FRAME_DEPENDENT = {"n2-stretched-6-31g-uhf"}


@functools.lru_cache(maxsize=None)
def run(index: int):
    entry = CATALOGUE[index]
    case = load_catalogue().case(entry.case)
    problem = case.problem()
    reference, _ = reference_for(case)
    sol = extract(entry.solve(problem))
    ints = integrals_for(problem)
    results = judge(problem, sol, reference, integrals=ints).checks
    if results[0].status is not Status.FAILED:
        results = results + stab.state_checks(problem, sol, reference, ints)
    hint = stab.state_hint(problem, sol, ints, reference, tolerance=REFERENCE_ENERGY)
    return {r.name: r for r in results}, hint


def _params():
    out = []
    for k, entry in enumerate(CATALOGUE):
        slow = entry.case in SLOW_CASES or (entry.name, entry.case) in SLOW_ENTRIES
        # A slow entry's two tests share one worker (xdist --dist loadgroup), so the
        # cached run is computed once, not once per worker (ao_diagonal_guess on the
        # ethynyl radical took 532 s and 358 s in parallel on two workers).
        marks = [pytest.mark.slow, pytest.mark.xdist_group(f"states-{k}")] if slow else []
        if entry.case in FRAME_DEPENDENT:
            marks.append(pytest.mark.xfail(strict=False, reason="state depends on the "
                                           "eigensolver's frame in a degenerate π set"))
        out.append(pytest.param(k, id=f"{entry.name}-{entry.case}", marks=marks))
    return out


@pytest.mark.parametrize("index", _params())
def test_fails_exactly_the_expected_checks(index):
    results, _ = run(index)
    failing = {name for name, r in results.items() if r.status is Status.FAILED}
    assert failing == set(CATALOGUE[index].fails)


@pytest.mark.parametrize("index", _params())
def test_hint_names_the_state(index):
    entry = CATALOGUE[index]
    _, hint = run(index)
    if entry.hint is None:
        assert hint is None
    else:
        assert hint is not None and entry.hint in hint


def _index(name, case):
    return next(k for k, e in enumerate(CATALOGUE) if e.name == name and e.case == case)


def test_restricted_uhf_message_and_hint():
    results, hint = run(_index("never_breaks_spin_symmetry", "h2-stretched-6-31g-uhf"))
    r = results["stability"]
    # measured: λ ≈ −0.64 Eh/rad², lowering 0.1393 Eh to the stored UHF minimum
    assert r.message.startswith("stability: lowest orbital Hessian eigenvalue −6.4e-01 < "
                                "−1.0e-05 (h2-stretched-6-31g-uhf): unstable; following "
                                "lowers E by 1.393e-01 Eh to −0.99744 Eh, ⟨S²⟩ 0.98")
    assert hint == ("your solution is the known state 1, a saddle point, 0.1393 Eh above the "
                    "ground state (⟨S²⟩ 0.00 vs 0.00)")


def test_stable_higher_minimum_passes_stability_but_not_reference():
    """The textbook-guess lab code on the ethynyl radical (ROHF) finds a real local
    minimum 0.0134 Eh up."""
    results, hint = run(_index("ao_diagonal_guess", "c2h-6-31g-rohf"))
    assert results["stability"].status is Status.PASSED
    assert 0 < results["stability"].value < 1e-2  # a shallow minimum, measured 2.8e-4
    assert hint == "your solution is the known state 1, 0.0134 Eh above the ground state " \
                   "(⟨S²⟩ 0.75 vs 0.75)"


def test_excited_state_from_core_guess_is_a_known_saddle():
    results, hint = run(_index("core_guess_maximum_overlap", "nh2-sto-3g-rohf"))
    core = {n: r for n, r in results.items()
            if n not in ("stability", "spin-squared", "energy-error-bound", "reference-energy")}
    assert all(r.status is not Status.FAILED for r in core.values())  # stationary
    assert results["stability"].status is Status.FAILED
    assert "known state 1, a saddle point" in hint


def test_rohf_answered_with_uhf_spin_message():
    results, hint = run(_index("rohf_answered_with_uhf", "nh2-sto-3g-rohf"))
    r = results["spin-squared"]
    assert r.message.startswith("spin-squared: |⟨S²⟩ − S(S+1)| = 7.2e-03 > 1.0e-08 "
                                "(nh2-sto-3g-rohf), ⟨S²⟩ = 0.7572, expected 0.7500")
    assert hint.startswith("E is 2.4e-03 Eh below the reference")
