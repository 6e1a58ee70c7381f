"""Metamorphic properties on the example SCF code (they hold) and on planted plug-ins
that are wrong only for some orientations or atom orders (they fail, and hypothesis
shrinks the failure to a minimal transformed molecule).

sto-3g cases only, few examples, deadline=None. pyscf runs single-threaded here: on a
busy two-core machine OpenMP threads waiting for each other cost more than the tiny
integrals. Energies in Eh, lengths in bohr.
"""

from __future__ import annotations

import random
import warnings

import numpy as np
import pytest
from hypothesis import find, given, settings

from harness.testing import metamorphic as mm
from harness.testing import strategies as hs
from harness.catalogue.cases import load_catalogue
from harness.testing.example_scf import LabSCF, solve
from harness.testing.planted import orientation
from harness.testing.planted.orientation import (abs_nuclear_repulsion,
                                         assumes_heaviest_atom_first,
                                         nuclear_repulsion_from_abs_coordinates)

CATALOGUE = load_catalogue()
#: Hartree–Fock only: a Kohn–Sham energy on an atom-centred quadrature grid is not exactly
#: invariant under rotation (the angular points do not turn with the molecule; measured
#: 7.1e-7 Eh for CH2 UKS/PBE0 STO-3G rotated by 1 rad), so rigid motion would need a
#: grid-derived tolerance there (docs/kohn-sham.md).
STO3G = [c for c in CATALOGUE.cases if c.basis == "sto-3g"
         and c.method in ("rhf", "uhf", "rohf")]
#: The closed-shell ones: the pool of the shrinking test below (its smallest three-atom
#: member is water).
CLOSED = [c for c in STO3G if c.method == "rhf"]
FIND = settings(max_examples=100, deadline=None, database=None)


@pytest.fixture(autouse=True, scope="module")
def one_thread():
    from pyscf import lib

    before = lib.num_threads()
    lib.num_threads(1)
    yield
    lib.num_threads(before)


def case(name):
    return CATALOGUE.case(name)


def nao(c) -> int:
    return c.mole().nao


# --------------------------------------------------------------------------- example code


@given(hs.variants(cases=STO3G, max_stretch=0.0))
@settings(max_examples=10, deadline=None)
def test_example_code_is_invariant_under_motion_and_reordering(variant):
    result = mm.variant_invariance(solve, variant)
    assert result.passed, result.message
    assert result.value <= mm.INVARIANT_ENERGY


@pytest.mark.parametrize("name", ["water-sto-3g-rhf", "oh-sto-3g-uhf", "methane-sto-3g-rhf"])
def test_example_code_default_motion_and_order(name):
    moved = mm.rigid_motion_invariance(solve, case(name))
    reordered = mm.atom_order_invariance(solve, case(name))
    for result in (moved, reordered):
        assert result.passed, result.message
        assert "max|ε − ε'|" in result.message  # orbital energies were compared too


def test_open_shell_state_depends_on_frame_with_the_textbook_guess():
    """The textbook Wolfsberg–Helmholz guess uses the AO diagonal of H, which changes when
    p shells rotate: rotated NH2 (ROHF) then converges to an excited state (2A1-like,
    ~0.1 Eh up) and the property reports it with both energies. The example code's
    shell-averaged guess gives the ground state in both frames."""
    from harness.testing.planted.states import ao_diagonal_guess
    from harness.catalogue.references import load_reference

    nh2 = case("nh2-sto-3g-rohf")
    ground = load_reference(nh2).energy
    result = mm.rigid_motion_invariance(ao_diagonal_guess, nh2)
    e, e_moved = result.energies
    assert abs(e - ground) < 1e-6  # the stored frame: ground state
    assert not result.passed and result.value == abs(e_moved - e)
    assert e_moved - e > 0.05
    fixed = mm.rigid_motion_invariance(solve, nh2)
    assert fixed.passed, fixed.message
    assert all(abs(x - ground) < 1e-6 for x in fixed.energies)


def test_size_consistency_holds_and_can_fail():
    water, h2 = case("water-sto-3g-rhf"), case("h2-sto-3g-rhf")
    ok = mm.size_consistency(solve, water, h2)
    assert ok.passed and ok.value < mm.SIZE_CONSISTENCY, ok.message
    ea, eb, eab = ok.energies
    assert abs(eab - ea - eb) == ok.value
    # with the light fragment first, the heaviest-first code puts O on a hydrogen's place
    bad = mm.size_consistency(assumes_heaviest_atom_first, h2, water)
    assert not bad.passed and bad.value > 1.0, bad.message
    assert bad.message.startswith("size-consistency: |E(AB) − E(A) − E(B)| = ")
    assert "(h2-sto-3g-rhf+water-sto-3g-rhf@100bohr)" in bad.message


def test_size_consistency_tolerance_covers_the_dipole_interaction():
    """Two waters 100 bohr apart interact through their dipoles, far above rounding but
    below SIZE_CONSISTENCY; the classical dipole–dipole energy bounds the deviation."""
    from pyscf import scf

    water = case("water-sto-3g-rhf")
    result = mm.size_consistency(solve, water, water)
    assert result.passed, result.message
    mf = scf.RHF(water.mole()).run(conv_tol=1e-11)
    mu = np.linalg.norm(mf.dip_moment(unit="AU", verbose=0))
    bound = 2 * mu ** 2 / mm.SEPARATION ** 3  # |μ·μ − 3(μ·n)(μ·n)| / R³ ≤ 2μ²/R³
    assert 1e-9 < result.value < 1.5 * bound < mm.SIZE_CONSISTENCY


def test_unit_consistency_holds_and_catches_a_file_in_the_wrong_unit(tmp_path):
    water = case("water-sto-3g-rhf")
    ok = mm.unit_consistency(solve, water)
    assert ok.passed and ok.value < mm.UNIT_CONSISTENCY, ok.message
    assert "max|Δr| = " in ok.message
    # bohr numbers in a file that says ångström
    lines = ["3", "units=angstrom source: bohr values under the wrong label"]
    for z, xyz in zip(water.numbers, water.coordinates):
        lines.append(f"{'OH'[z == 1]} " + " ".join(f"{x:.12f}" for x in xyz))
    path = tmp_path / "water.xyz"
    path.write_text("\n".join(lines) + "\n")
    bad = mm.unit_consistency(solve, water, xyz_path=path)
    assert not bad.passed and bad.value > 0.1, bad.message
    assert f"(water-sto-3g-rhf, {path})" in bad.message


def test_guess_independence_holds_and_lists_the_states_reached():
    water = case("water-sto-3g-rhf")
    ok = mm.guess_independence(solve, water)
    assert ok.passed and len(ok.energies) == mm.GUESS_COUNT, ok.message
    assert "1 state reached" in ok.message

    class OneStep(LabSCF):  # stops after one Fock build: each guess gives its own energy
        max_iterations = 1

    bad = mm.guess_independence(lambda p: OneStep(p).iterate(), water)
    found = mm.states(bad.energies)
    assert not bad.passed and len(found) == mm.GUESS_COUNT
    assert bad.value == pytest.approx(max(bad.energies) - min(bad.energies), abs=0)
    assert f"{mm.GUESS_COUNT} states reached" in bad.message
    for energy, count in found:
        assert f"{energy:.10f} ({count}×)" in bad.message


def test_states_groups_energies():
    assert mm.states([-1.0, -1.0 + 1e-7, -0.5, float("nan")]) == [(-1.0, 2), (-0.5, 1)]


def test_orbital_energies_are_compared():
    """A code whose energy is right but whose orbital energies move with the molecule."""
    water = case("water-sto-3g-rhf")

    def drifting(problem):
        result = solve(problem)
        result["orbital_energies"] = result["orbital_energies"] + 1e-3 * float(
            np.mean(problem.coordinates[:, 0]))
        return result

    result = mm.rigid_motion_invariance(drifting, water)
    moved = hs.transform(water, rotation=mm.DEFAULT_ROTATION,
                         translation=mm.DEFAULT_TRANSLATION)
    shift = 1e-3 * abs(np.mean(moved.coordinates[:, 0]) - np.mean(water.coordinates[:, 0]))
    assert not result.passed and result.message.startswith("rigid-motion: max|ε − ε'| = ")
    assert result.value == pytest.approx(shift, rel=1e-3)


def test_spec_strings_are_accepted():
    result = mm.atom_order_invariance("harness.testing.planted.orientation:assumes_heaviest_atom_first",
                                      case("water-sto-3g-rhf"), permutation=(1, 0, 2))
    assert not result.passed and result.name == "atom-order"


# --------------------------------------------------------------------------- planted bugs


def test_abs_bug_is_invisible_in_the_stored_frame_of_h2_and_caught_by_a_motion():
    h2 = case("h2-sto-3g-rhf")
    assert abs(abs_nuclear_repulsion(h2.numbers, h2.coordinates)
               - h2.mole().energy_nuc()) < 1e-14
    result = mm.rigid_motion_invariance(nuclear_repulsion_from_abs_coordinates, h2)
    assert not result.passed and result.value > 0.1, result.message


def test_heaviest_first_bug_passes_the_plain_checks_on_every_stored_case():
    """Why the property is needed: no stored sto-3g case lists a lighter atom first in
    a way that matters, so the planted code's energies equal the example code's."""
    for c in STO3G:
        problem = c.problem()
        assert abs(assumes_heaviest_atom_first(problem)["energy"]
                   - solve(problem)["energy"]) < 1e-9, c.name


def _frame_free(c) -> bool:
    """True when the stored geometry of ``c`` hides the abs bug (no nuclei on opposite
    sides of an axis), computed with pyscf's E_nuc."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return abs(abs_nuclear_repulsion(c.numbers, c.coordinates)
                   - c.mole().energy_nuc()) < 1e-12


@pytest.mark.slow  # 39 s measured (two cores shared with other jobs)
def test_hypothesis_shrinks_the_abs_bug_to_h2_with_one_motion():
    pool = [c for c in STO3G if _frame_free(c)]
    assert len(pool) >= 3
    cache: dict = {}
    shrunk = find(hs.variants(cases=pool, max_stretch=0.0),
                  lambda v: not mm.variant_invariance(
                      nuclear_repulsion_from_abs_coordinates, v, cache=cache).passed,
                  settings=FIND, random=random.Random(0))
    smallest = min(pool, key=lambda c: (nao(c), len(c.numbers), c.name))
    assert shrunk.base == smallest and shrunk.base.name == "h2-sto-3g-rhf"
    assert len(shrunk.kinds) == 1 and shrunk.kinds[0] in ("rot", "shift")
    expected = orientation.PROPERTIES["nuclear_repulsion_from_abs_coordinates"]
    assert expected[:2] == ("rigid-motion", shrunk.base.name)


def test_hypothesis_shrinks_the_heaviest_first_bug_to_one_permutation():
    cache: dict = {}
    shrunk = find(hs.variants(cases=CLOSED, max_stretch=0.0),
                  lambda v: not mm.variant_invariance(
                      assumes_heaviest_atom_first, v, cache=cache).passed,
                  settings=FIND, random=random.Random(0))
    # the smallest closed-shell case with three atoms: a diatomic's swap is a mirror image
    smallest = min((c for c in CLOSED if len(c.numbers) >= 3),
                   key=lambda c: (nao(c), len(c.numbers), c.name))
    assert shrunk.base == smallest and shrunk.kinds == ("perm",)
    assert shrunk.case.numbers[0] < max(shrunk.case.numbers)  # a lighter atom first
    assert orientation.PROPERTIES["assumes_heaviest_atom_first"] == (
        "atom-order", shrunk.base.name, "perm")


def test_orientation_catalogue_entry_matches_the_harness():
    from harness.run.runner import run_cases
    from harness.checks.tolerances import Tolerances

    for entry in orientation.CATALOGUE:
        outcome = run_cases([case(entry.case)], entry.spec, tolerances=Tolerances())
        failed = {c.name for c in outcome.cases[0].failures}
        assert failed == entry.fails, outcome.cases[0].failures
