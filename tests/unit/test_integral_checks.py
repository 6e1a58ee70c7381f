"""The integral check kernels and ``integral_checks``: exact constructions pass, perturbed
ones fail by the amount planted, and the worst element is located by its AO labels.

pyscf supplies the reference integrals (water/STO-3G from conftest, cartesian 6-31G* and
cc-pVDZ water built here); every measure is the harness's own numpy. Integrals in Eh.
"""

from __future__ import annotations

import numpy as np
import pytest

from harness.contract.solution import extract
from harness.checks import integrals as ci
from harness.backend.integrals import integrals_for
from harness.contract.problem import Problem
from harness.contract.results import Status
from harness.checks.tolerances import CHECK_NAMES, FIXED, INTEGRAL_CHECK_NAMES, Tolerances

# Water geometry (bohr): Crawford group "Programming Projects", Project #3, water/STO-3G
# (the same geometry as tests/unit/conftest.py; not imported from there, since several
# test folders have a conftest module).
WATER_NUMBERS = (8, 1, 1)
WATER_COORDS = ((0.0, -0.143225816552, 0.0),
                (1.638036840407, 1.136548822547, 0.0),
                (-1.638036840407, 1.136548822547, 0.0))

CASE = "water-sto-3g-rhf"


def water(basis: str, cartesian: bool = False):
    return integrals_for(Problem.create(name=f"water-{basis}", numbers=WATER_NUMBERS,
                                        coordinates=WATER_COORDS, basis=basis,
                                        cartesian=cartesian, method="rhf"))


@pytest.fixture(scope="module")
def eri(water_rhf):
    n = water_rhf.ints.s.shape[0]
    return water_rhf.ints.mol.intor("int2e").reshape((n,) * 4)


def rotation(n: int, seed: int = 3) -> np.ndarray:
    q, _ = np.linalg.qr(np.random.default_rng(seed).normal(size=(n, n)))
    return q


class TestCheckNames:
    def test_full_order(self):
        """basis first, then the existing checks, the integral checks, history last."""
        assert CHECK_NAMES[:2] == ("basis", "well-formed") and CHECK_NAMES[-1] == "history"
        assert CHECK_NAMES.index("kinetic") > CHECK_NAMES.index("aufbau")
        assert CHECK_NAMES[-len(INTEGRAL_CHECK_NAMES) - 1:-1] == INTEGRAL_CHECK_NAMES
        assert len(set(CHECK_NAMES)) == len(CHECK_NAMES)

    def test_every_integral_check_has_a_fixed_tolerance(self):
        assert all(FIXED[name] > 0 for name in INTEGRAL_CHECK_NAMES)
        assert Tolerances({"two-electron": 1e-6}).for_check("two-electron", 1e-6) == 1e-6


class TestDefiniteness:
    def test_known_spectrum(self):
        """−λ_min of Q diag(λ) Qᵀ is the planted −λ_min, located on the AO it lives on."""
        lam = np.array([-0.3, 0.5, 1.0, 2.0, 0.7])
        q = np.zeros((5, 5))
        q[2, 0] = 1.0  # the lowest eigenvector is AO 2; the others mix AOs 0, 1, 3, 4
        q[np.ix_([0, 1, 3, 4], [1, 2, 3, 4])] = rotation(4)
        a = (q * lam) @ q.T
        m = ci.definiteness(a, "S", labels=tuple(f"X {i}s" for i in range(5)))
        assert m.value == pytest.approx(0.3, abs=1e-12)
        assert m.where == "lowest eigenvector largest on AO (2) = (X 2s)"

    def test_pyscf_overlap_and_kinetic_are_definite(self, water_rhf):
        s = water_rhf.ints.s
        t = water_rhf.ints.mol.intor_symmetric("int1e_kin")
        assert ci.definiteness(s, "S").value < -0.1  # λ_min(S) ≈ 0.43 for STO-3G water
        assert ci.definiteness(t, "T").value < -0.1

    def test_cartesian_d_overlap_without_unit_diagonal(self):
        """pyscf's cartesian d functions are normalised radially only: S_μμ ≠ 1, and the
        definiteness measure does not assume a unit diagonal."""
        ints = water("6-31g*", cartesian=True)
        diag = np.diag(ints.s)
        assert diag.max() > 2.0  # the dxx-type functions (3 for radially normalised d)
        m = ci.definiteness(ints.s, "S")
        assert m.value < 0 and m.value == pytest.approx(-np.linalg.eigvalsh(ints.s)[0])

    def test_indefinite_overlap_fails(self, water_rhf):
        s = water_rhf.ints.s
        bad = 2.0 * s - np.diag(np.diag(s))
        r = ci.integral_checks(extract({"overlap": bad}), water_rhf.ints, Tolerances(), CASE)
        assert r["overlap-definite"].status is Status.FAILED
        assert r["overlap-definite"].value > 0.1
        assert r["overlap-definite"].message.startswith(
            "overlap-definite: −λ_min(S) = 1.3e-01 > 1.0e-10 (water-sto-3g-rhf), lowest "
            "eigenvector largest on AO (")


class TestEriDifference:
    def test_identical_is_zero(self, eri, water_rhf):
        m = ci.eri_difference(eri, eri.copy(), water_rhf.ints.labels)
        assert m.value == 0.0 and m.where == ""

    def test_one_perturbed_element_located(self, eri, water_rhf):
        g = eri.copy()
        g[0, 1, 5, 6] += 3e-6
        m = ci.eri_difference(g, eri, water_rhf.ints.labels)
        assert m.value == pytest.approx(3e-6, rel=1e-6)
        assert m.where == "AO quartet (0, 1, 5, 6) = (0 O 1s, 0 O 2s, 1 H 1s, 2 H 1s)"


class TestEriSymmetry:
    def test_pyscf_tensor_symmetric_to_rounding(self, eri):
        assert ci.eri_symmetry(eri).value < 1e-13

    def test_single_element_breaks_the_first_permutation(self, eri, water_rhf):
        g = eri.copy()
        g[0, 1, 2, 3] += 1e-5
        m = ci.eri_symmetry(g, water_rhf.ints.labels)
        assert m.value == pytest.approx(1e-5, rel=1e-6)
        assert m.where == ("(ij|kl) ≠ (ji|kl) at AO quartet (0, 1, 2, 3) = "
                           "(0 O 1s, 0 O 2s, 0 O 2px, 0 O 2py)")

    def test_bra_ket_asymmetry_named(self, eri, water_rhf):
        """ε(A⊗B − B⊗A) keeps (ji|kl), (ij|lk), (ji|lk) and breaks only bra–ket exchange,
        by 2ε max|A⊗B − B⊗A|."""
        s, h = water_rhf.ints.s, water_rhf.ints.h
        extra = np.einsum("ij,kl->ijkl", s, h) - np.einsum("ij,kl->ijkl", h, s)
        m = ci.eri_symmetry(eri + 1e-4 * extra)
        assert m.value == pytest.approx(2e-4 * np.abs(extra).max(), rel=1e-9)
        assert m.where.startswith("(ij|kl) ≠ (kl|ij) at AO quartet")


class TestSchwarz:
    def test_pyscf_tensor_meets_it(self, eri):
        assert ci.schwarz(eri).value <= 1e-14

    def test_rank_one_tensor_is_tight_and_violation_measured(self):
        """(ij|kl) = a_ij a_kl meets Schwarz with equality; doubling (00|11) exceeds the
        bound by (4 − 1) a_00² a_11²."""
        a = np.array([[1.0, 0.3, 0.2], [0.3, 0.8, 0.1], [0.2, 0.1, 0.6]])
        g = np.einsum("ij,kl->ijkl", a, a)
        assert abs(ci.schwarz(g).value) < 1e-15
        g[0, 0, 1, 1] *= 2.0
        g[1, 1, 0, 0] *= 2.0
        m = ci.schwarz(g, labels=("A 1s", "B 1s", "C 1s"))
        assert m.value == pytest.approx(3.0 * a[0, 0] ** 2 * a[1, 1] ** 2, rel=1e-12)
        assert m.where == "AO quartet (0, 0, 1, 1) = (A 1s, A 1s, B 1s, B 1s)"


class TestEriDefinite:
    def test_pyscf_tensors_psd(self, eri):
        assert ci.eri_definite(eri).value < -1e-7  # λ_min ≈ 1.4e-6 for STO-3G water
        g = water("cc-pvdz").mol.intor("int2e")
        # products of cc-pVDZ functions are nearly dependent: λ_min ≈ 0, within the slack
        assert abs(ci.eri_definite(g).value) < 1e-12

    def test_planted_negative_eigenvalue(self):
        """A supermatrix built with eigenvalues (…, −0.2) on symmetric pairs gives 0.2."""
        n = 3
        i, j = np.tril_indices(n)
        npair = len(i)
        lam = np.linspace(0.5, 2.0, npair)
        lam[4] = -0.2
        q = rotation(npair, seed=7)
        m_s = (q * lam) @ q.T
        c = np.where(i == j, 1.0, np.sqrt(2.0))
        pair = m_s / c[:, None] / c[None, :]
        g = np.zeros((n,) * 4)
        for p in range(npair):
            for r in range(npair):
                for a, b in ((i[p], j[p]), (j[p], i[p])):
                    for x, y in ((i[r], j[r]), (j[r], i[r])):
                        g[a, b, x, y] = pair[p, r]
        assert ci.eri_symmetry(g).value < 1e-15
        m = ci.eri_definite(g, labels=("A 1s", "B 1s", "C 1s"))
        assert m.value == pytest.approx(0.2, abs=1e-12)
        assert m.where.startswith("lowest eigenvector largest on AO pair (")


def solution_with_integrals(conv) -> dict:
    ints = conv.ints
    sol = {key: value for key, value in conv.solution().items()}
    sol["kinetic"] = ints.mol.intor_symmetric("int1e_kin")
    sol["nuclear_attraction"] = ints.mol.intor_symmetric("int1e_nuc")
    sol["two_electron"] = ints.mol.intor("int2e")
    return sol


class TestIntegralChecks:
    def test_all_pass_with_pyscf_integrals(self, water_rhf):
        r = ci.integral_checks(extract(solution_with_integrals(water_rhf)), water_rhf.ints,
                None, CASE)
        assert set(r) == set(INTEGRAL_CHECK_NAMES)
        assert {n for n, c in r.items() if c.status is not Status.PASSED} == set()
        assert r["kinetic"].message == (
            "kinetic: your T differs by up to 0.0e+00; at your density that moves E by "
            "0.0e+00 Eh ≤ 1e-07 (water-sto-3g-rhf)")

    def test_absent_keys_not_applicable(self, water_rhf):
        sol = {k: v for k, v in water_rhf.solution().items() if k != "overlap"}
        r = ci.integral_checks(extract(sol), water_rhf.ints, Tolerances(), CASE)
        assert r["core-hamiltonian"].status is Status.PASSED
        na = {n for n, c in r.items() if c.status is Status.NOT_APPLICABLE}
        assert na == set(INTEGRAL_CHECK_NAMES) - {"core-hamiltonian"}
        assert r["two-electron"].message == (
            "two-electron: not applicable (water-sto-3g-rhf): no 'two_electron' key")
        assert r["overlap-definite"].message == (
            "overlap-definite: not applicable (water-sto-3g-rhf): no 'overlap' key")

    def test_size_limit(self, water_rhf, monkeypatch):
        monkeypatch.setattr(ci, "ERI_MAX_NAO", 6)
        r = ci.integral_checks(extract(solution_with_integrals(water_rhf)), water_rhf.ints,
                None, CASE)
        assert r["two-electron-schwarz"].status is Status.NOT_APPLICABLE
        assert "nao = 7 > 6" in r["two-electron-schwarz"].message

    def test_kinetic_without_half(self, water_rhf):
        """T doubled (−∇² without ½): kinetic and core-hamiltonian fail by max T_μν, the
        other checks still pass (T stays positive definite)."""
        sol = solution_with_integrals(water_rhf)
        t = sol["kinetic"]
        sol["kinetic"] = 2.0 * t
        sol["core_hamiltonian"] = 2.0 * t + sol["nuclear_attraction"]
        r = ci.integral_checks(extract(sol), water_rhf.ints, Tolerances(), CASE)
        assert {n for n, c in r.items() if c.status is Status.FAILED} == {"kinetic",
                                                                          "core-hamiltonian"}
        # the energy effect of δT = T at the code's density is Tr(P T), the kinetic energy
        p = water_rhf.mf.make_rdm1()
        assert r["kinetic"].value == pytest.approx(abs(np.einsum("pq,qp->", p, t)), rel=1e-9)
        assert r["kinetic"].message.startswith(
            "kinetic: your T differs by up to 2.9e+01; at your density that moves E by 7.4e+01 "
            "Eh > 1e-07 (water-sto-3g-rhf), AO element (0, 0) = (0 O 1s, 0 O 1s)")

    def test_physicists_notation_caught_by_comparison(self, water_rhf):
        sol = solution_with_integrals(water_rhf)
        sol["two_electron"] = sol["two_electron"].transpose(0, 2, 1, 3)
        r = ci.integral_checks(extract(sol), water_rhf.ints, Tolerances(), CASE)
        assert r["two-electron"].status is Status.FAILED and r["two-electron"].value > 0.5
        assert r["two-electron-symmetry"].status is Status.FAILED

    def test_tolerance_override_applies(self, water_rhf):
        sol = solution_with_integrals(water_rhf)
        sol["nuclear_attraction"] = sol["nuclear_attraction"] + 1e-7
        strict = ci.integral_checks(extract(sol), water_rhf.ints, Tolerances(), CASE)
        loose = ci.integral_checks(extract(sol), water_rhf.ints,
                                   Tolerances({"nuclear-attraction": 1e-6}), CASE)
        assert strict["nuclear-attraction"].status is Status.FAILED
        assert loose["nuclear-attraction"].status is Status.PASSED
