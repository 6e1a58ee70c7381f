"""Planted bugs are caught by the checks meant to catch them; correct variants pass.

Each broken code in ``broken_codes`` differs from the bundled example SCF in one way. For
each, the set of failing checks is asserted exactly (so a check that fires for the wrong
reason, or stops firing, is noticed), and the first line of the primary check's message
is asserted verbatim up to its location part. Energies in Eh.
"""

from __future__ import annotations

import functools

import pytest

import broken_codes as bc
from harness.catalogue.cases import load_catalogue
from harness.verdict.judge import judge
from harness.catalogue.references import reference_for
from harness.contract.results import Status
from harness.contract.solution import extract
from harness.testing.planted.core import CATALOGUE as CORE

RHF, UHF, ROHF = "water-sto-3g-rhf", "oh-sto-3g-uhf", "nh2-sto-3g-rohf"


@functools.lru_cache(maxsize=None)
def verdict(code: str, case_name: str):
    case = load_catalogue().case(case_name)
    problem = case.problem()
    reference, _ = reference_for(case)
    return {r.name: r for r in judge(problem, extract(getattr(bc, code)(problem)),
            reference).checks}


def failing(code: str, case_name: str) -> set[str]:
    return {name for name, r in verdict(code, case_name).items() if r.status is Status.FAILED}


CAUGHT = [(p.name, p.case, set(p.fails)) for p in CORE if not p.correct]
CORRECT = [(p.name, p.case) for p in CORE if p.correct]


class TestPlantedBugs:
    @pytest.mark.parametrize("code, case_name, expected", CAUGHT,
                             ids=[f"{c}-{n}" for c, n, _ in CAUGHT])
    def test_caught_by_exactly_the_expected_checks(self, code, case_name, expected):
        """The planted bug fails exactly the checks that can see it, and no other."""
        assert failing(code, case_name) == expected

    def test_extra_electron_message(self):
        """The well-formed failure names the key and the counts, and skips the rest."""
        v = verdict("one_electron_too_many", RHF)
        assert v["well-formed"].message == (
            "well-formed: 'occupations' sum to 11 electrons, expected 10 (water-sto-3g-rhf)")
        assert all(r.status is Status.SKIPPED for name, r in v.items()
                   if name not in ("well-formed", "basis"))

    def test_missing_nuclear_repulsion_message(self):
        """The energy-consistency failure is off by E_nuc = 8.0 Eh for water."""
        message = verdict("missing_nuclear_repulsion", RHF)["energy-consistency"].message
        assert message.startswith(
            "energy-consistency: |E − E[P]| = 8.0e+00 > 1.0e-08 (water-sto-3g-rhf), E = ")

    def test_ev_orbital_energies_message(self):
        """Orbital energies in eV leave a large Roothaan–Hall residual."""
        message = verdict("energies_in_ev", RHF)["roothaan-hall"].message
        assert message.startswith("roothaan-hall: max|X(FC − SCε)| = ")
        assert "> 1.0e-05 (water-sto-3g-rhf), orbital " in message

    def test_looser_stop_message(self):
        """A code stopped at 100× the requested convergence fails stationarity by ~90×."""
        r = verdict("stopped_hundred_times_looser", RHF)["stationarity"]
        assert 20 * 1e-6 < r.value < 100 * 1e-6
        assert r.message.startswith("stationarity: max|X(FPS − SPF)X| = ")
        assert r.message.endswith(")") and "Löwdin element" in r.message

    def test_reported_convergence_false(self):
        """A code that says it did not converge fails converged-flag with that message."""
        message = verdict("eigensolve_ignores_overlap", RHF)["converged-flag"].message
        assert message.startswith("converged-flag: the code reports converged=False "
                                  "(water-sto-3g-rhf) after ")

    def test_excited_determinant_aufbau(self):
        """The swapped occupation shows as an occupied orbital above an empty one."""
        r = verdict("excited_determinant", RHF)["aufbau"]
        assert r.value > 0.05
        assert "occupied orbital" in r.message and "above empty orbital" in r.message


class TestCorrectVariants:
    @pytest.mark.parametrize("code, case_name", CORRECT, ids=[f"{c}-{n}" for c, n in CORRECT])
    def test_passes(self, code, case_name):
        """A correct code in a different but legitimate form passes every applicable check."""
        assert failing(code, case_name) == set()

    def test_required_keys_only_not_applicable(self):
        """Checks without their inputs are reported as not applicable, never as passed."""
        v = verdict("required_keys_only", RHF)
        na = {name for name, r in v.items() if r.status is Status.NOT_APPLICABLE}
        assert na == {"converged-flag", "overlap", "density-consistency", "stationarity",
                      "roothaan-hall", "aufbau", "basis", "kinetic", "nuclear-attraction",
                      "core-hamiltonian", "overlap-definite", "kinetic-definite",
                      "two-electron", "two-electron-symmetry", "two-electron-schwarz",
                      "two-electron-definite", "history", "spin-squared"}
        assert all(v[name].passed is None for name in na)
