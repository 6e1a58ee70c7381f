"""The diagnosis names the planted bug of every entry of ``harness.testing.planted.hints``.

For each entry: ``evaluate`` fails exactly the expected checks; ``diagnose`` attaches
the expected hint to the expected check, hints only failing checks, and leaves every
check in ``no_hint_on`` without a hint (near misses: other bugs and correct codes).
Energies in Eh, lengths in bohr.
"""

from __future__ import annotations

import functools
import json
import re

import numpy as np
import pytest

from harness.catalogue.cases import load_catalogue
from harness.verdict.diagnosis import density_for_checks, diagnose
from harness.verdict.judge import judge
from harness.backend.integrals import integrals_for
from harness.testing.planted import hints as planted
from harness.testing.planted.hints import ALSO_HINTS, CATALOGUE
from harness.contract.problem import Problem
from harness.catalogue.references import reference_for
from harness.contract.results import Status
from harness.contract.solution import extract

#: The named Fock-fit and energy bugs; an entry's hint may name at most one of them.
NAMED = ("exchange scaled by 2", "no exchange", "Coulomb from one spin only",
         "exchange built from the total density instead of each spin's density",
         "density not rebuilt from the final orbitals", "integral screening too loose",
         "core Hamiltonian missing kinetic energy",
         "missing nuclear attraction", "nuclear repulsion missing",
         "nuclear repulsion counted twice", "coordinates read as ångström",
         "two-electron energy double counted", "exchange energy doubled",
         "exchange energy missing", "kinetic energy missing",
         "nuclear-attraction energy missing")


def run(solve, problem, reference=None):
    sol = extract(solve(problem))
    ints = integrals_for(problem)
    results = {r.name: r for r in judge(problem, sol, reference, integrals=ints).checks}
    diag = diagnose(problem, sol, ints, density_for_checks(problem.method, sol), results,
                    reference=reference)
    return results, diag


@functools.lru_cache(maxsize=None)
def catalogue():
    return load_catalogue()


@functools.lru_cache(maxsize=None)
def verdict(index: int):
    entry = CATALOGUE[index]
    case = catalogue().case(entry.case)
    reference, _ = reference_for(case)
    return run(entry.solve, case.problem(), reference)


IDS = [f"{p.name}-{p.case}" for p in CATALOGUE]
INDICES = range(len(CATALOGUE))


@pytest.mark.parametrize("index", INDICES, ids=IDS)
def test_fails_exactly(index):
    results, _ = verdict(index)
    failing = {n for n, r in results.items() if r.status is Status.FAILED}
    assert failing == set(CATALOGUE[index].fails)


@pytest.mark.parametrize("index", INDICES, ids=IDS)
def test_hint_where_due_and_nowhere_else(index):
    entry = CATALOGUE[index]
    results, diag = verdict(index)
    assert set(diag.hints) <= {n for n, r in results.items() if r.passed is False}
    if entry.hint is not None:
        assert entry.hint in diag.hints.get(entry.hint_check, ""), diag.hints
        named = [w for w in NAMED if diag.hints[entry.hint_check].startswith(w + ":")
                 or diag.hints[entry.hint_check].startswith(w + " (")]
        assert len(named) <= 1
    for check in entry.no_hint_on:
        assert check not in diag.hints, (check, diag.hints.get(check))
    for check, words in ALSO_HINTS.get((entry.name, entry.case), {}).items():
        assert words in diag.hints.get(check, ""), (check, diag.hints)


def test_every_hint_function_has_an_entry():
    """Every plug-in of the module is in the catalogue; every named bug is hinted somewhere."""
    functions = {name for name in dir(planted) if callable(getattr(planted, name))
                 and getattr(getattr(planted, name), "__module__", "") == planted.__name__
                 and not name.startswith("_")}
    assert functions == {p.name for p in CATALOGUE}
    hinted = " ".join([p.hint for p in CATALOGUE if p.hint]
                      + [w for v in ALSO_HINTS.values() for w in v.values()])
    for words in NAMED:
        assert words in hinted, words


def test_near_misses_present():
    """At least one entry with no required hint and listed no-hint checks per kind."""
    near = [p for p in CATALOGUE if p.hint is None]
    assert {"stationarity", "self-consistency", "energy-consistency", "electron-count",
            "roothaan-hall"} <= set().union(*(p.no_hint_on for p in near))
    assert any(p.correct for p in near)


def index_of(name, case):
    return next(i for i, p in enumerate(CATALOGUE) if (p.name, p.case) == (name, case))


def test_reference_hint_only_when_density_is_right():
    """E − E_ref is explained only when E[P] itself agrees with E_ref: missing E_nuc yes;
    doubled exchange (whose density is also wrong) no."""
    results, diag = verdict(index_of("nuclear_repulsion_left_out", planted.RHF))
    gap = abs(diag.analysis["energy"]["E[P] - E_ref"])
    assert gap < 1e-6
    assert diag.hints["reference-energy"].endswith(f"E[P] agrees with E_ref to {gap:.1e} Eh")
    results, diag = verdict(index_of("exchange_doubled", planted.RHF))
    assert results["reference-energy"].passed is False
    assert "reference-energy" not in diag.hints
    assert abs(diag.analysis["energy"]["E[P] - E_ref"]) > 1e-3


def test_angstrom_hint_numbers():
    """The implied E_nuc is the nuclear repulsion at coordinates × 1/0.529177… (bohr)."""
    _, diag = verdict(index_of("coordinates_read_as_angstrom", planted.RHF))
    e = diag.analysis["energy"]
    assert e["E_nuc_if_coordinates_read_as_angstrom"] == pytest.approx(
        e["E_nuc"] * 0.529177210903, rel=1e-12)
    implied = e["E"] - (e["E[P]"] - e["E_nuc"])
    assert implied == pytest.approx(e["E_nuc_if_coordinates_read_as_angstrom"], abs=1e-9)


def test_fock_fit_coefficients_in_analysis():
    """The RHF fit of the doubled-exchange code: (T, V, J, K) = (1, 1, 1, −1) to 1e-9."""
    _, diag = verdict(index_of("exchange_doubled", planted.RHF))
    fit = diag.analysis["fock_fit"]["Fock"]
    assert fit["terms"] == ["T", "V", "J", "K"]
    np.testing.assert_allclose(fit["coefficients"], [1, 1, 1, -1], atol=1e-9)
    assert fit["expected"] == [1.0, 1.0, 1.0, -0.5]
    assert fit["residual"] < 1e-10
    json.dumps(diag.analysis, allow_nan=False)


@pytest.fixture(scope="module")
def closed_shell_uhf():
    water = catalogue().case(planted.RHF)
    return Problem.create(name="water-sto-3g-uhf-closed-shell", numbers=water.numbers,
                          coordinates=water.coordinates, basis="sto-3g", method="uhf")


def test_collinear_uhf_doubled_exchange(closed_shell_uhf):
    """Pα = Pβ (closed-shell water run as UHF): the spins are merged, and the hint says a
    doubled exchange and one of the total density cannot be told apart."""
    results, diag = run(planted.exchange_doubled, closed_shell_uhf)
    assert diag.analysis["fock_fit"]["merged_spins"] is True
    assert diag.hints["self-consistency"].startswith(
        "exchange scaled by 2 or built from the total density (Pα ≈ Pβ: not separable): "
        "Fα ≈ 1.00 T + 1.00 V + 1.00 J(P) − 2.00 K(Pσ) (expected −1.00 K(Pσ))")


def test_collinear_uhf_correct(closed_shell_uhf):
    results, diag = run(planted.correct_code, closed_shell_uhf)
    assert not any(r.passed is False for r in results.values())
    assert diag.hints == {}


@pytest.mark.slow
def test_benzene_doubled_exchange_hint():
    """At 114 AO (benzene/cc-pVDZ) the fit still names the bug: pyscf's converged density
    with a reported F = H + J − K (RHF)."""
    from pyscf import scf

    case = catalogue().case("benzene-cc-pvdz-rhf")
    problem = case.problem()
    reference, _ = reference_for(case)
    mf = scf.RHF(problem.to_pyscf())
    mf.conv_tol = 1e-10
    mf.kernel()
    dm = mf.make_rdm1()
    vj, vk = mf.get_jk(dm=dm)
    sol = extract({"energy": mf.e_tot, "coefficients": mf.mo_coeff, "occupations": mf.mo_occ,
                   "density": dm, "fock": mf.get_hcore() + vj - vk})
    ints = integrals_for(problem)
    results = {r.name: r for r in judge(problem, sol, reference, integrals=ints).checks}
    diag = diagnose(problem, sol, ints, density_for_checks("rhf", sol), results,
                    reference=reference)
    assert diag.hints["stationarity"].startswith(
        "exchange scaled by 2: Fock ≈ 1.00 T + 1.00 V + 1.00 J − 1.00 K (expected −0.50 K)")


@pytest.mark.parametrize("name, case", [("exchange_doubled", planted.RHF),
                                        ("exchange_from_total_density", planted.UHF),
                                        ("exchange_doubled", planted.ROHF)])
def test_reusing_evaluates_jk_gives_the_same_diagnosis(name, case):
    """diagnose(..., jk=ints.jk(d)) (J of the total density, K per spin, as evaluate builds
    them) gives the same hints and numbers as diagnose's own J/K build."""
    entry = CATALOGUE[index_of(name, case)]
    c = catalogue().case(case)
    problem = c.problem()
    reference, _ = reference_for(c)
    sol = extract(entry.solve(problem))
    ints = integrals_for(problem)
    results = {r.name: r for r in judge(problem, sol, reference, integrals=ints).checks}
    d = density_for_checks(problem.method, sol)
    own = diagnose(problem, sol, ints, d, results, reference=reference)
    reused = diagnose(problem, sol, ints, d, results, reference=reference, jk=ints.jk(d))
    def words(hints):  # the residuals (~1e-14) differ in the last digit
        return {k: re.sub(r"residual \S+", "residual", v) for k, v in hints.items()}

    assert own.hints and words(reused.hints) == words(own.hints)
    for label, fit in own.analysis["fock_fit"].items():
        if isinstance(fit, dict):
            np.testing.assert_allclose(reused.analysis["fock_fit"][label]["coefficients"],
                                       fit["coefficients"], atol=1e-10)
    assert reused.analysis["energy"]["E[P]"] == pytest.approx(own.analysis["energy"]["E[P]"],
                                                              abs=1e-10)


@pytest.mark.parametrize("module, name, check, words", [
    ("core", "damping_left_in_final_density", "density-consistency", "density not rebuilt"),
    ("integrals", "overlap_not_positive_definite", "basis", "read as ångström"),
    ("integrals", "overlap_not_positive_definite", "overlap", "read as ångström"),
])
def test_new_hints_withheld_on_near_misses(module, name, check, words):
    """A mixed (non-idempotent) density is not called stale; an overlap that is wrong in
    another way is not called that of the ångström-read molecule (the comparison is made:
    its gap is in the analysis, far above the match)."""
    import importlib

    from harness.verdict.diagnosis import GEOMETRY_OVERLAP_MATCH

    solve = getattr(importlib.import_module(f"harness.testing.planted.{module}"), name)
    case = catalogue().case(planted.RHF)
    reference, _ = reference_for(case)
    results, diag = run(solve, case.problem(), reference)
    assert results[check].passed is False
    assert words not in diag.hints.get(check, "")
    if check in ("basis", "overlap"):
        assert diag.analysis["geometry"]["max|S - S(R x 1/0.529177)|"] > 100 * GEOMETRY_OVERLAP_MATCH
