"""AO-convention detection and transformation (harness.verdict.conventions).

Code-convention arrays are built here with dense matrices M (χ_code = χ_ref M) and
numpy products, independently of the module's compact transforms; pyscf supplies the
overlaps, integrals and (as input) converged orbitals. Overlaps are dimensionless,
coordinates in bohr, matrices in Eh.
"""

from __future__ import annotations

import copy
import re
from pathlib import Path

import numpy as np
import pytest
from pyscf import gto
from pyscf.tools import molden

from harness.verdict.conventions import (CONVENTION_MATCH, NAMED, BasisMismatch, Convention,
                                 detect_convention, named_convention, spectrum_distance)
from harness.contract.errors import HarnessError
from harness.testing.planted.conventions import shell_matrix, shells
from harness.contract.problem import build_mole
from harness.contract.solution import Malformed, Solution

#: Water (bohr): Crawford group "Programming Projects", Project #3, water/STO-3G input.
WATER = ((8, 1, 1), ((0.0, -0.143225816552, 0.0), (1.638036840407, 1.136548822547, 0.0),
                     (-1.638036840407, 1.136548822547, 0.0)))
#: Ammonia distorted to no symmetry at all (our own geometry, bohr): every signed
#: permutation that reproduces S is then the true one.
SKEWED_NH3 = ((7, 1, 1, 1), ((0.0, 0.0, 0.0), (0.1, 1.80, -0.62), (-1.62, -0.85, -0.80),
                             (1.45, -1.05, -0.55)))
#: CO along z (bohr; r = 2.1322 bohr, our own choice): x and y are interchangeable.
CO = ((6, 8), ((0.0, 0.0, 0.0), (0.0, 0.0, 2.1322)))


def mole(geometry, basis, cartesian=False, multiplicity=1):
    numbers, coords = geometry
    return build_mole(numbers, coords, charge=0, multiplicity=multiplicity, basis=basis,
                      cartesian=cartesian)


def overlap(mol):
    return mol.intor_symmetric("int1e_ovlp")


def random_convention(mol, rng, flip_fraction=0.3):
    """A random per-shell permutation, shell exchanges within (atom, l), signs on fewer
    than half of the functions and scales in [0.5, 2]: (M, source, factor)."""
    table = shells(mol)
    nao = mol.nao_nr()
    groups = {}
    for k, (atom, l, _, _) in enumerate(table):
        groups.setdefault((atom, l), []).append(k)
    placed = list(range(len(table)))
    for members in groups.values():
        for slot, ref in zip(members, rng.permutation(members)):
            placed[slot] = int(ref)
    source = np.zeros(nao, dtype=int)
    for slot, ref in enumerate(placed):
        _, _, code_start, n = table[slot]
        source[code_start:code_start + n] = table[ref][2] + rng.permutation(n)
    signs = np.where(rng.random(nao) < flip_fraction, -1.0, 1.0)
    factor = signs * rng.uniform(0.5, 2.0, nao)
    m = np.zeros((nao, nao))
    m[source, np.arange(nao)] = factor
    return m, source, factor


def covariant(m, a):
    return np.matmul(np.matmul(m.T, a), m)


# --------------------------------------------------------------------------- detection

class TestRecovery:
    @pytest.mark.parametrize("basis, cartesian, seed", [
        ("cc-pvdz", False, 1), ("cc-pvdz", False, 2), ("6-31g*", True, 3),
        ("cc-pvtz", False, 4)])
    def test_random_convention_recovered_exactly(self, basis, cartesian, seed):
        """On a molecule without symmetry the signed, scaled permutation is unique."""
        mol = mole(SKEWED_NH3, basis, cartesian)
        rng = np.random.default_rng(seed)
        m, source, factor = random_convention(mol, rng)
        s_code = covariant(m, overlap(mol))
        assert np.max(np.abs(s_code - overlap(mol))) > 0.1  # really another convention
        found = detect_convention(s_code, mol)
        assert isinstance(found, Convention), found
        assert found.source == tuple(source)
        np.testing.assert_allclose(found.factor, factor, rtol=1e-12)
        np.testing.assert_allclose(found.m, m, rtol=1e-12, atol=0)

    def test_identity(self):
        mol = mole(WATER, "cc-pvdz")
        found = detect_convention(overlap(mol), mol)
        assert found.is_identity
        assert found.describe() == "pyscf AO order, signs and normalisation"

    def test_noise_below_tolerance_is_identity(self):
        mol = mole(WATER, "cc-pvdz")
        rng = np.random.default_rng(7)
        noise = rng.uniform(-1, 1, (mol.nao, mol.nao)) * 0.5 * CONVENTION_MATCH
        assert detect_convention(overlap(mol) + (noise + noise.T) / 2, mol).is_identity

    def test_convention_with_noise_is_found(self):
        """Other programs' integrals differ at ~1e-12: the mapping is still found."""
        mol = mole(SKEWED_NH3, "cc-pvdz")
        m, source, _ = random_convention(mol, np.random.default_rng(5))
        rng = np.random.default_rng(8)
        noise = rng.uniform(-1e-11, 1e-11, (mol.nao, mol.nao))
        found = detect_convention(covariant(m, overlap(mol)) + noise + noise.T, mol)
        assert isinstance(found, Convention) and found.source == tuple(source)

    def test_linear_molecule_reads_the_plain_convention(self):
        """x and y are interchangeable in CO; of the readings the code's own is kept."""
        mol = mole(CO, "6-31g*", cartesian=True)
        m = shell_matrix(mol, order=lambda l: (1, 2, 0) if l == 1 else None)
        found = detect_convention(covariant(m, overlap(mol)), mol)
        assert found.describe() == "p shells ordered (y, z, x)"
        np.testing.assert_array_equal(found.m, m)

    def test_mapping_reproduces_overlap_even_for_an_atom(self):
        """An atom alone can be rotated: whatever is read reproduces S to the tolerance."""
        mol = gto.M(atom="Ne 0 0 0", basis="cc-pvtz", verbose=0)
        m = shell_matrix(mol, order=lambda l: (2, 0, 1) if l == 1 else None)
        s_code = covariant(m, overlap(mol))
        found = detect_convention(s_code, mol)
        assert np.max(np.abs(covariant(found.m, overlap(mol)) - s_code)) <= CONVENTION_MATCH


class TestMismatch:
    def test_cartesian_vs_spherical_count(self):
        spherical = mole(CO, "6-31g*", cartesian=False)
        cartesian = mole(CO, "6-31g*", cartesian=True)
        found = detect_convention(overlap(spherical), cartesian)
        assert isinstance(found, BasisMismatch)
        assert found.reason == ("basis differs: the code has 28 functions, the reference 30 "
                                "(cartesian vs spherical d?)")
        assert found.evidence == {"nao_code": 28.0, "nao_reference": 30.0}

    def test_count_without_cartesian_explanation(self):
        found = detect_convention(np.eye(5), mole(WATER, "sto-3g"))
        assert found.reason == "basis differs: the code has 5 functions, the reference 7"

    def _no_mapping(self, found, s_code, mol):
        assert isinstance(found, BasisMismatch)
        distance = spectrum_distance(s_code, overlap(mol))
        assert found.reason == (
            "basis differs: no per-shell reordering, sign or scaling maps the code's "
            f"overlap onto the reference (overlap-spectrum distance {distance:.1e})")
        assert found.evidence["spectrum_distance"] == distance
        return distance

    def test_other_contraction_same_count(self):
        """cc-pVDZ and 6-31G** (spherical) both give water 24 functions."""
        ref, code = mole(WATER, "cc-pvdz"), mole(WATER, "6-31g**")
        assert code.nao_nr() == ref.nao_nr() == 24
        distance = self._no_mapping(detect_convention(overlap(code), ref), overlap(code), ref)
        assert distance > 1e-3

    def test_perturbed_exponent(self):
        """One O p exponent 1 % larger, the functions then reordered: still no mapping."""
        numbers, coords = WATER
        o = copy.deepcopy(gto.basis.load("cc-pvdz", "O"))  # [l, [exponent, c...], ...]
        p_shell = next(sh for sh in o if sh[0] == 1)
        p_shell[1][0] *= 1.01
        atoms = [(z, xyz) for z, xyz in zip(numbers, coords)]
        code = gto.M(atom=atoms, unit="Bohr", basis={"O": o, "H": "cc-pvdz"}, verbose=0)
        ref = mole(WATER, "cc-pvdz")
        m = shell_matrix(code, order=lambda l: (2, 0, 1) if l == 1 else None)
        s_code = covariant(m, overlap(code))
        distance = self._no_mapping(detect_convention(s_code, ref), s_code, ref)
        assert 1e-6 < distance < 1e-1

    def test_same_space_mixed_otherwise(self):
        """A rotation of two p functions keeps the spectrum: the reason says so."""
        mol = mole(SKEWED_NH3, "cc-pvdz")
        r = np.eye(mol.nao)
        c, s = np.cos(0.3), np.sin(0.3)
        r[3:5, 3:5] = [[c, -s], [s, c]]
        found = detect_convention(covariant(r, overlap(mol)), mol)
        assert isinstance(found, BasisMismatch)
        assert found.reason.startswith("basis differs: no per-shell reordering")
        assert found.reason.endswith(": the same space of functions, mixed otherwise than "
                                     "by order, sign or scale)")
        assert found.evidence["spectrum_distance"] < 1e-12

    def test_malformed_overlap_is_an_error(self):
        mol = mole(WATER, "sto-3g")
        with pytest.raises(HarnessError, match=r"^overlap: shape \(7, 6\) is not a square"):
            detect_convention(np.zeros((7, 6)), mol)
        bad = overlap(mol).copy()
        bad[0, 1] = np.nan
        with pytest.raises(HarnessError, match="^overlap: contains NaN or inf$"):
            detect_convention(bad, mol)


# --------------------------------------------------------------------------- describing

class TestDescribe:
    def test_combined(self):
        mol = mole(WATER, "cc-pvdz")
        o_s = [k for k, (a, l, _, _) in enumerate(shells(mol)) if a == 0 and l == 0]
        order = {1: (2, 0, 1), 2: (2, 3, 1, 4, 0)}
        m = shell_matrix(mol, order=order.get, swap=(o_s[1], o_s[2]))
        found = detect_convention(covariant(m, overlap(mol)), mol)
        assert found.describe() == (
            "p shells ordered (z, x, y); spherical d shells in m = 0, +1, \u22121, +2, "
            "\u22122 order; 2 shells of atom 0 (O) reordered")

    def test_signs_and_rescaling(self):
        mol = mole(SKEWED_NH3, "6-31g")
        nao = mol.nao
        m = np.eye(nao)
        m[1, 1] = -1.0       # N 2s
        m[4, 4] = -1.0       # N 2py
        m[9, 9] = 0.5        # H 1s
        m[10, 10] = 2.0      # H 2s
        found = detect_convention(covariant(m, overlap(mol)), mol)
        assert found.describe() == (
            "signs flipped on 2 functions (s: 1 of 9; p y: 1 of 2); "
            "2 of 9 s functions rescaled (factors 0.5 to 2)")

    def test_partial_reordering(self):
        mol = mole(SKEWED_NH3, "6-31g")
        m = np.eye(mol.nao)
        m[:, [3, 4]] = m[:, [4, 3]]  # only the first N p shell as (y, x, z)
        found = detect_convention(covariant(m, overlap(mol)), mol)
        assert found.describe() == "functions reordered within 1 of 2 p shells"

    def test_named(self):
        water = mole(WATER, "cc-pvtz")
        ammonia = mole(SKEWED_NH3, "6-31g*", cartesian=True)
        assert named_convention("molden", water).describe() == (
            "spherical d shells in m = 0, +1, \u22121, +2, \u22122 order; spherical f shells "
            "in m = 0, +1, \u22121, +2, \u22122, +3, \u22123 order")
        assert named_convention("molden", ammonia).describe() == (
            "cartesian d shells ordered (xx, yy, zz, xy, xz, yz); cartesian d functions "
            "normalised to unit self-overlap")
        assert named_convention("p-yzx", water).describe() == "p shells ordered (y, z, x)"
        assert named_convention("p-zxy", ammonia).describe() == "p shells ordered (z, x, y)"
        assert named_convention("unit-cartesian", ammonia).describe() == (
            "cartesian d functions normalised to unit self-overlap")
        assert named_convention("unit-cartesian", water).is_identity
        assert named_convention("pyscf", ammonia).is_identity

    def test_unknown_name(self):
        with pytest.raises(HarnessError) as err:
            named_convention("gaussian", mole(WATER, "sto-3g"))
        assert str(err.value) == ("convention: unknown AO convention 'gaussian' (known: "
                                  "pyscf, molden, p-yzx, p-zxy, unit-cartesian)")
        assert NAMED == ("pyscf", "molden", "p-yzx", "p-zxy", "unit-cartesian")


# --------------------------------------------------------------------------- transforms

class TestToReference:
    def test_rhf_arrays_and_eri(self, water_rhf):
        """C, P, F, H and (μν|λσ) in a random convention are brought back exactly."""
        mol = water_rhf.problem.to_pyscf()
        nao = mol.nao
        m = np.eye(nao)
        m[:, [2, 3, 4]] = m[:, [4, 2, 3]]  # O p as (z, x, y)
        m[:, 1] *= -0.7                    # O 2s negated and scaled
        m[:, 3] *= 1.3                     # O px scaled
        sol = water_rhf.solution()
        inv = np.linalg.inv(m)
        eri = mol.intor("int2e")
        code = {"coefficients": inv @ sol["coefficients"],
                "density": inv @ sol["density"] @ inv.T,
                "fock": covariant(m, sol["fock"]),
                "overlap": covariant(m, sol["overlap"]),
                "core_hamiltonian": covariant(m, sol["core_hamiltonian"]),
                "two_electron": np.einsum("pqrs,pi,qj,rk,sl->ijkl", eri, m, m, m, m)}
        found = detect_convention(code["overlap"], mol)
        np.testing.assert_allclose(found.m, m, rtol=1e-12, atol=0)
        for key, value in code.items():
            want = eri if key == "two_electron" else sol[key]
            assert np.max(np.abs(found.to_reference(key, value) - want)) < 1e-12, key
            assert np.max(np.abs(found.from_reference(key, want) - value)) < 1e-12, key
            assert np.max(np.abs(value - want)) > 1e-2, key  # really transformed
        for key in ("energy", "orbital_energies", "occupations"):
            assert found.to_reference(key, sol[key]) is sol[key]

    def test_unrestricted_stacks(self, oh_uhf):
        mol = oh_uhf.problem.to_pyscf()
        m = shell_matrix(mol, order=lambda l: (2, 0, 1) if l == 1 else None)
        m[:, 0] *= 2.0
        sol = oh_uhf.solution()
        inv = np.linalg.inv(m)
        code_c = np.matmul(inv, sol["coefficients"])
        code_p = np.matmul(np.matmul(inv, sol["density"]), inv.T)
        code_f = covariant(m, sol["fock"])
        found = detect_convention(covariant(m, sol["overlap"]), mol)
        assert found.describe() == ("p shells ordered (z, x, y); 1 of 3 s functions rescaled "
                                    "(factors 2 to 2)")
        assert code_c.shape == (2, mol.nao, mol.nao)
        assert np.max(np.abs(found.to_reference("coefficients", code_c)
                             - sol["coefficients"])) < 1e-12
        assert np.max(np.abs(found.to_reference("density", code_p) - sol["density"])) < 1e-12
        assert np.max(np.abs(found.to_reference("fock", code_f) - sol["fock"])) < 1e-12

    def test_errors_and_pass_through(self):
        mol = mole(WATER, "sto-3g")
        conv = named_convention("p-zxy", mol)
        with pytest.raises(HarnessError, match=r"^coefficients: shape \(6, 3\) does not have "
                                               r"7 basis functions on its AO axes$"):
            conv.to_reference("coefficients", np.zeros((6, 3)))
        with pytest.raises(HarnessError, match="unknown solution key 'mo'"):
            conv.to_reference("mo", np.zeros((7, 7)))
        marker = Malformed("is a str")
        extracted = Solution(energy=-75.0, density=marker, fock=np.zeros((6, 6)),  # synthetic
                             overlap=overlap(mol))
        out = conv.solution_to_reference(extracted)
        assert out.density is marker and out.fock is extracted.fock
        assert out.energy == -75.0
        np.testing.assert_array_equal(out.overlap, conv.to_reference("overlap", overlap(mol)))


# ------------------------------------------------------------------------------- molden

def _molden_coefficients(path, nao):
    """The MO coefficients written in a Molden file's [MO] section, (nao, nmo)."""
    text = Path(path).read_text().split("[MO]", 1)[1]
    columns, current = [], None
    for line in text.splitlines():
        if line.strip().startswith("Sym="):
            current = np.zeros(nao)
            columns.append(current)
        elif re.fullmatch(r"\s*\d+\s+\S+\s*", line):
            index, value = line.split()
            current[int(index) - 1] = float(value)
    return np.array(columns).T


class TestMolden:
    @pytest.mark.parametrize("geometry, basis, cartesian", [
        (WATER, "cc-pvtz", False), (SKEWED_NH3, "6-31g*", True), (WATER, "cc-pvtz", True),
        (((10,), ((0.0, 0.0, 0.0),)), "cc-pvqz", True)])
    def test_agrees_with_pyscf_molden_writer(self, geometry, basis, cartesian, tmp_path):
        """pyscf.tools.molden writes C in Molden's order and normalisation: our "molden"
        convention gives the same coefficients, and undoes them."""
        mol = mole(geometry, basis, cartesian)
        conv = named_convention("molden", mol)
        assert list(conv.source) == list(molden.order_ao_index(mol))
        c = np.random.default_rng(3).uniform(-1, 1, (mol.nao, 4))
        path = tmp_path / "mo.molden"
        molden.from_mo(mol, str(path), c)
        written = _molden_coefficients(path, mol.nao)
        np.testing.assert_allclose(conv.from_reference("coefficients", c), written,
                                   rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(conv.to_reference("coefficients", written), c,
                                   rtol=1e-12, atol=1e-14)
        s_code = conv.from_reference("overlap", overlap(mol))
        if cartesian:
            np.testing.assert_allclose(np.diag(s_code), 1.0, atol=1e-14)
        found = detect_convention(s_code, mol)
        assert isinstance(found, Convention)
        assert np.max(np.abs(covariant(found.m, overlap(mol)) - s_code)) <= CONVENTION_MATCH
