"""Planted accelerators (harness.testing.planted.accelerators.ACCELERATORS) are reported as such.

Each entry is benched on its case against pyscf's DIIS with one perturbed guess; the
outcome must show exactly what the entry says: converged or not, ground state or not,
which properties fail, whether the verdict calls it worse. Energies in Eh.
"""

from __future__ import annotations

import pytest

from harness.bench.runs import run_bench
from harness.testing.planted.accelerators import ACCELERATORS


@pytest.mark.parametrize("entry", ACCELERATORS, ids=lambda e: e.name)
def test_planted_accelerator_is_reported(catalogue, entry):
    outcome = run_bench(entry.factory, cases=[catalogue.case(entry.case)], guesses=1,
                        baselines=("pyscf-cdiis",))
    mine = [r for r in outcome.records if r.method == outcome.accelerator]
    assert len(mine) == 2
    if entry.converges:
        assert all(r.converged for r in mine), [r.reason for r in mine]
    else:
        assert not any(r.converged for r in mine)
        assert all(r.status == "not converged" and r.fock_builds == 100 for r in mine)
    if entry.ground_state:
        assert all(r.state == "ground state" for r in mine)
    else:
        assert not any(r.state == "ground state" for r in mine)
    failing = {p.name for p in outcome.properties if p.passed is False}
    if entry.failing_properties:
        assert set(entry.failing_properties) <= failing
    else:
        assert failing == set()
    assert bool(outcome.worse) == entry.worse
    assert outcome.exit_status == (1 if entry.worse or entry.failing_properties else 0)
    baseline = [r for r in outcome.records if r.method == "pyscf-cdiis"]
    assert all(r.converged and r.state == "ground state" for r in baseline)


def test_excited_state_is_named_with_its_energy(catalogue):
    """The maximum-overlap accelerator's state is reported with ΔE from the reference."""
    entry = next(e for e in ACCELERATORS if e.name == "maximum-overlap-diis")
    outcome = run_bench(entry.factory, cases=[catalogue.case(entry.case)], guesses=0,
                        baselines=(), properties=False)
    (run,) = outcome.records
    assert run.delta_e > 0.1
    assert run.state.endswith(f"ΔE = {run.delta_e:+.6f} Eh")
    assert run.state.startswith(("other state", "known state"))


def test_planted_open_shell_divergence_is_open_shell_only(catalogue):
    """The overshooting accelerator never converges on OH (UHF) but passes on water."""
    entry = next(e for e in ACCELERATORS if e.name == "overshooting-diis")
    outcome = run_bench(entry.factory, cases=[catalogue.case("oh-sto-3g-uhf"),
                                              catalogue.case("water-sto-3g-rhf")],
                        guesses=0, baselines=(), properties=False)
    by_case = {r.case: r for r in outcome.records}
    assert not by_case["oh-sto-3g-uhf"].converged
    assert by_case["oh-sto-3g-uhf"].history[-1][2] > 1e-4
    assert by_case["water-sto-3g-rhf"].converged
