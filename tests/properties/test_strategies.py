"""The hypothesis strategies of harness.testing.strategies: what they draw and how they shrink.

Geometry in bohr, angles in rad. Distances, rotations and densities are recomputed
here with numpy/scipy independently of the strategy code.
"""

from __future__ import annotations

import itertools
import math
import random

import numpy as np
import pytest
import scipy.spatial.transform
from hypothesis import HealthCheck, find, given, settings
from hypothesis import strategies as st
from hypothesis.errors import InvalidArgument

import harness
from harness.testing import strategies as hs
from harness.catalogue.cases import load_catalogue
from harness.contract.problem import Problem

SETTINGS = settings(max_examples=25, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow])
FIND = settings(max_examples=200, deadline=None, database=None)
CATALOGUE = load_catalogue()
STO3G = [c for c in CATALOGUE.cases if c.basis == "sto-3g"]


def distances(r) -> np.ndarray:
    r = np.asarray(r)
    i, j = np.triu_indices(len(r), 1)
    return np.linalg.norm(r[i] - r[j], axis=1)


def nao(case) -> int:
    return case.mole().nao


# --------------------------------------------------------------------------- arguments


@pytest.mark.parametrize("kwargs, words", [
    ({"min_atoms": 0}, "min_atoms=0 must be an integer ≥ 1"),
    ({"min_atoms": 3, "max_atoms": 2}, "max_atoms=2 must be ≥ min_atoms=3"),
    ({"max_atoms": 1.5}, "max_atoms=1.5 must be an integer ≥ 1"),
    ({"max_stretch": 0.5}, "max_stretch=0.5 must be a number in [0, 0.25]"),
    ({"max_stretch": -0.01}, "max_stretch=-0.01 must be a number in [0, 0.25]"),
    ({"rotate": "yes"}, "rotate='yes' must be True or False"),
    ({"bases": "sto-3g"}, "bases='sto-3g' must be a list of basis names"),
    ({"cases": []}, "cases must be a non-empty list of harness.catalogue.cases.Case"),
    ({"min_atoms": 50}, "no case has between 50 and any number of atoms"),
])
def test_molecules_validates_its_arguments(kwargs, words):
    with pytest.raises(InvalidArgument) as info:
        hs.molecules(**kwargs)
    assert words in str(info.value)


def test_other_strategies_validate_their_arguments():
    water = CATALOGUE.case("water-sto-3g-rhf")
    with pytest.raises(InvalidArgument, match="numbers=\\[\\] must be atomic numbers"):
        hs.charge_multiplicity([])
    with pytest.raises(InvalidArgument, match="max_charge=-1 must be an integer ≥ 0"):
        hs.charge_multiplicity([8, 1, 1], max_charge=-1)
    with pytest.raises(InvalidArgument, match="max_angle=2 must be a number of radians"):
        hs.guesses(water.problem(), max_angle=2)
    with pytest.raises(InvalidArgument, match="problem must be a harness.contract.problem.Problem"):
        hs.guesses(water)


# --------------------------------------------------------------------------- geometry


@given(st.tuples(*[st.floats(-math.pi, math.pi, allow_nan=False)] * 3))
@SETTINGS
def test_rotation_matrix_is_scipy_rotation(vector):
    expected = scipy.spatial.transform.Rotation.from_rotvec(vector).as_matrix()
    r = hs.rotation_matrix(vector)
    assert np.abs(r - expected).max() < 1e-12
    assert np.abs(r @ r.T - np.eye(3)).max() < 1e-12 and np.linalg.det(r) > 0


def test_catalogue_cases_filters():
    closed = hs.catalogue_cases(basis="STO-3G", method="rhf")
    assert closed and all(c.basis == "sto-3g" and c.method == "rhf" for c in closed)
    assert set(closed) == {c for c in STO3G if c.method == "rhf"}
    assert set(hs.catalogue_cases(suite="smoke")) == set(CATALOGUE.suite("smoke"))


def test_lehmer_codes_give_every_permutation_once():
    n = 4
    codes = itertools.product(*(range(n - i) for i in range(n - 1)))
    perms = [hs.permutation_from_code(code, n) for code in codes]
    assert len(set(perms)) == math.factorial(n)
    assert hs.permutation_from_code((0, 0, 0), n) == (0, 1, 2, 3)


@given(hs.variants(cases=STO3G, max_stretch=0.0))
@SETTINGS
def test_rigid_motions_and_reordering_keep_the_molecule(variant):
    base, case = variant.base, variant.case
    assert sorted(case.numbers) == sorted(base.numbers)
    assert np.abs(np.sort(distances(case.coordinates))
                  - np.sort(distances(base.coordinates))).max() < 1e-9
    assert case.name == base.name + "".join(f"~{k}" for k in variant.kinds)
    assert variant.same_molecule and "stretch" not in variant.kinds
    moved = np.asarray(base.coordinates)[list(variant.permutation)]
    centre = moved.mean(axis=0)
    rotation = scipy.spatial.transform.Rotation.from_rotvec(variant.rotation).as_matrix()
    expected = (moved - centre) @ rotation.T + centre + np.asarray(variant.translation)
    assert np.abs(expected - case.coordinates).max() < 1e-12


@given(hs.variants(cases=STO3G, max_stretch=0.1, rotate=False, translate=False,
                   permute=False))
@SETTINGS
def test_stretch_is_bounded_and_sensible(variant):
    before, after = distances(variant.base.coordinates), distances(variant.case.coordinates)
    if before.size:
        assert np.max(np.abs(after / before - 1.0)) <= 0.1 + 1e-12
    assert hs.closest_contact(variant.case.numbers, variant.case.coordinates) \
        >= hs.CLOSEST_CONTACT
    assert set(variant.kinds) <= {"stretch"}


def test_closest_contact_rejects_atoms_on_top_of_each_other():
    # H2 at 0.2 bohr: 0.2 / (2 × 0.586) = 0.17 of the covalent distance (pyscf radii)
    from pyscf.data import radii

    ratio = hs.closest_contact([1, 1], [[0, 0, 0], [0, 0, 0.2]])
    assert abs(ratio - 0.2 / (2 * radii.COVALENT[1])) < 1e-12
    assert ratio < hs.CLOSEST_CONTACT


@given(hs.molecules(min_atoms=3, max_atoms=4, cases=STO3G))
@SETTINGS
def test_atom_counts_are_respected(case):
    assert 3 <= len(case.numbers) <= 4


@given(hs.variants(cases=STO3G, bases=["6-31g"]))
@settings(max_examples=10, deadline=None)
def test_the_rebuild_note_rebuilds_the_drawn_case(variant):
    rebuilt = eval(variant.code(), {"harness": harness, "load_catalogue": load_catalogue})
    assert rebuilt.name == variant.case.name and rebuilt.basis == variant.case.basis
    assert np.array_equal(rebuilt.coordinates, variant.case.coordinates)
    assert rebuilt.numbers == variant.case.numbers


# --------------------------------------------------------------------------- shrinking


def test_shrinks_to_the_smallest_untransformed_case():
    smallest = min(CATALOGUE.cases, key=lambda c: (nao(c), len(c.numbers), c.name))
    case = find(hs.molecules(), lambda c: True, settings=FIND, random=random.Random(0))
    assert case == smallest


@pytest.mark.slow  # 11 s measured (two cores shared with other jobs)
def test_shrinks_each_transformation_away_unless_needed():
    rotated = find(hs.variants(cases=STO3G), lambda v: "rot" in v.kinds, settings=FIND,
                   random=random.Random(0))
    assert rotated.kinds == ("rot",) and rotated.base.name == "h2-sto-3g-rhf"
    three = find(hs.variants(cases=STO3G), lambda v: len(v.case.numbers) >= 3,
                 settings=FIND, random=random.Random(0))
    smallest = min((c for c in STO3G if len(c.numbers) >= 3),
                   key=lambda c: (nao(c), len(c.numbers), c.name))
    assert three.case == smallest and three.kinds == ()


def test_shrinks_to_the_smallest_basis():
    h2 = CATALOGUE.case("h2-sto-3g-rhf")
    other = find(hs.variants(cases=[h2], bases=["cc-pvdz", "6-31g"]),
                 lambda v: v.case.basis != "sto-3g", settings=FIND, random=random.Random(0))
    smaller = min(("cc-pvdz", "6-31g"),
                  key=lambda b: hs.transform(h2, basis=b).mole().nao)
    assert other.case.basis == smaller
    assert other.kinds == ("basis",) and other.case.name == f"h2-sto-3g-rhf~basis-{smaller}"


# --------------------------------------------------------------------------- charge, spin


def nao_of(case) -> int:
    return case.mole().nao


def test_charge_multiplicity_respects_the_basis():
    """H2 in STO-3G (2 functions): at most 4 electrons, and a triplet needs 2 of them
    unpaired in 2 orbitals, so H2⁻ is a doublet only and H2²⁻ a singlet."""
    allowed = {(0, 1), (0, 3), (1, 2), (-1, 2), (-2, 1)}
    seen = set()

    @given(hs.charge_multiplicity([1, 1], nao=2))
    @settings(max_examples=100, database=None)
    def collect(pair):
        seen.add(pair)

    collect()
    assert seen <= allowed and len(seen) >= 3
    with pytest.raises(InvalidArgument):
        hs.charge_multiplicity([1], nao=0)


@given(st.data())
@SETTINGS
def test_charge_multiplicity_pairs_are_possible(data):
    case = data.draw(st.sampled_from(STO3G))
    charge, multiplicity = data.draw(hs.charge_multiplicity(case.numbers, nao=nao_of(case)))
    n = sum(case.numbers) - charge
    assert abs(charge) <= hs.MAX_CHARGE and 1 <= multiplicity <= hs.MAX_MULTIPLICITY
    assert n >= 1 and (n - multiplicity + 1) % 2 == 0 and multiplicity - 1 <= n
    Problem.create(name="drawn", numbers=case.numbers, coordinates=case.coordinates,
                   charge=charge, multiplicity=multiplicity, basis="sto-3g", method="uhf")


def test_charge_multiplicity_shrinks_to_the_neutral_lowest_spin():
    assert find(hs.charge_multiplicity([8, 1, 1]), lambda p: True) == (0, 1)
    assert find(hs.charge_multiplicity([8, 1]), lambda p: True) == (0, 2)
    assert find(hs.charge_multiplicity([8, 1]), lambda p: p[0] != 0) == (1, 1)
    assert find(hs.charge_multiplicity([1]), lambda p: p[1] > 1) == (0, 2)


def test_charge_multiplicity_covers_every_possible_pair():
    """H2 (2 protons), charges −2..+1: every pair allowed by the count is drawable."""
    expected = {(c, m) for c in range(-2, 2) for m in (1, 2, 3, 4)
                if (2 - c - m + 1) % 2 == 0 and m - 1 <= 2 - c}
    seen = set()

    @given(hs.charge_multiplicity([1, 1]))
    @settings(max_examples=300, deadline=None, database=None)
    def collect(pair):
        seen.add(pair)

    collect()
    assert seen == expected


# --------------------------------------------------------------------------- guesses


@pytest.mark.parametrize("name", ["water-sto-3g-rhf", "oh-sto-3g-uhf", "nh2-sto-3g-rohf"])
def test_guesses_are_valid_densities_within_the_angle(name):
    problem = CATALOGUE.case(name).problem()
    mol = problem.to_pyscf()
    s = mol.intor("int1e_ovlp")
    sigma, u = np.linalg.eigh(s)
    s_half = (u * np.sqrt(sigma)) @ u.T
    _, c0 = hs.core_guess(problem)
    max_angle = 0.3

    @given(hs.guesses(problem, max_angle=max_angle))
    @settings(max_examples=15, deadline=None, database=None)
    def check(guessed):
        d = np.asarray(guessed.initial_density)
        if problem.method == "rhf":
            pairs = [(d / 2, problem.n_electrons // 2, c0[:, :problem.n_electrons // 2])]
        else:
            pairs = [(d[0], problem.n_alpha, c0[:, :problem.n_alpha]),
                     (d[1], problem.n_beta, c0[:, :problem.n_beta])]
        for p, n, c_occ in pairs:
            assert np.abs(p @ s @ p - p).max() < 1e-10  # idempotent in the S metric
            assert abs(np.trace(p @ s) - n) < 1e-10
            # principal angles between the guessed and the core occupied spaces, in the
            # orthonormal basis: Q = S½ P S½ projects on the guessed space
            q = s_half @ p @ s_half
            w, v = np.linalg.eigh(q)
            assert np.sum(w > 0.5) == n
            cosines = np.linalg.svd((s_half @ c_occ).T @ v[:, w > 0.5], compute_uv=False)
            assert np.all(cosines >= math.cos(max_angle) - 1e-10)
        assert guessed.name == problem.name and guessed.basis == problem.basis

    check()


def test_guesses_shrink_to_the_core_guess():
    problem = CATALOGUE.case("water-sto-3g-rhf").problem()
    _, c = hs.core_guess(problem)
    occ = c[:, :problem.n_electrons // 2]
    guessed = find(hs.guesses(problem), lambda p: True, settings=FIND)
    assert np.abs(guessed.initial_density - 2 * occ @ occ.T).max() < 1e-12


# --------------------------------------------------------------------------- profiles


def test_profiles_are_registered():
    for name, examples in hs.PROFILES.items():
        profile = settings.get_profile(name)
        assert profile.max_examples == examples
        assert profile.deadline is None and profile.print_blob
    assert hs.PROFILES["dev"] < hs.PROFILES["ci"]
    assert settings.get_profile("ci").derandomize  # hypothesis's own ci settings kept
