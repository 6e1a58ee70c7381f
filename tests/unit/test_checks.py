"""Unit tests of the check kernels in ``harness.checks``: one class per public kernel.

Every kernel is shown to give ~0 (or an exact known value) on an exact construction and
exactly the expected deviation, at the expected place, on a perturbed one. Matrices are
built with numpy; the Fock/ROHF cases use pyscf integrals and pyscf's converged solutions
of tiny molecules as input. Atomic units throughout (bohr, Eh).
"""

from __future__ import annotations

import numpy as np
import pytest

from harness.checks import (EnergyTerms, aufbau, commutator, density_consistency,
                            electron_count, energy_consistency, energy_terms, idempotency,
                            lowdin, matrix_difference, orthonormality, reference_energy,
                            rohf_conditions, roothaan_hall, well_formed)
from harness.checks.energy import fock_from_terms
from harness.checks.orthonormal import LINEAR_DEPENDENCE
from harness.checks.wellformed import OCCUPATION_ROUNDING, SYMMETRY
from harness.contract.solution import extract

#: Rounding-level bound for exact constructions with well-conditioned random matrices.
EXACT = 1e-11


# --------------------------------------------------------------------------- helpers


def random_overlap(n: int, rng, low: float = 0.05, high: float = 3.0) -> np.ndarray:
    """A random SPD 'overlap' U diag(w) Uᵀ with eigenvalues in [low, high]."""
    u, _ = np.linalg.qr(rng.normal(size=(n, n)))
    w = rng.uniform(low, high, size=n)
    return (u * w) @ u.T


def inv_sqrt(s: np.ndarray) -> np.ndarray:
    """S^(-1/2) by our own eigendecomposition (independent of ``lowdin``)."""
    w, u = np.linalg.eigh(s)
    return (u / np.sqrt(w)) @ u.T


def sqrt_m(s: np.ndarray) -> np.ndarray:
    w, u = np.linalg.eigh(s)
    return (u * np.sqrt(w)) @ u.T


def random_orbitals(s: np.ndarray, rng, nmo: int | None = None) -> np.ndarray:
    """S-orthonormal orbitals C = S^(-1/2) Q, Q orthogonal (QR of a Gaussian matrix)."""
    n = len(s)
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    return (inv_sqrt(s) @ q)[:, : (nmo or n)]


def rotate(c: np.ndarray, i: int, a: int, theta: float) -> np.ndarray:
    """Rotate orbital columns i and a of c by angle theta (radians)."""
    c = c.copy()
    ci, ca = c[:, i].copy(), c[:, a].copy()
    c[:, i] = np.cos(theta) * ci + np.sin(theta) * ca
    c[:, a] = -np.sin(theta) * ci + np.cos(theta) * ca
    return c


def random_rotation(n: int, rng) -> np.ndarray:
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    return q


def block_rotate(c: np.ndarray, blocks, rng) -> np.ndarray:
    """Apply an independent random orthogonal rotation inside each column block."""
    c = c.copy()
    for lo, hi in blocks:
        c[:, lo:hi] = c[:, lo:hi] @ random_rotation(hi - lo, rng)
    return c


def rhf_density(c: np.ndarray, nocc: int) -> np.ndarray:
    """Total RHF density 2 C_occ C_occᵀ with a leading spin axis (1, nao, nao)."""
    return (2.0 * c[:, :nocc] @ c[:, :nocc].T)[None]


def rohf_densities(c: np.ndarray, occ: np.ndarray) -> np.ndarray:
    """(Pα, Pβ) from one set of orbitals: alpha occ ≥ 1, beta occ = 2."""
    pa = c[:, occ > 0.5] @ c[:, occ > 0.5].T
    pb = c[:, occ > 1.5] @ c[:, occ > 1.5].T
    return np.stack([pa, pb])


def rohf_focks(conv) -> np.ndarray:
    f = conv.mf.get_fock()
    return np.stack([f.focka, f.fockb])


@pytest.fixture
def rng():
    return np.random.default_rng(20240607)


# --------------------------------------------------------------------------- lowdin


class TestLowdin:
    def test_inverse_square_root_of_a_random_overlap(self, rng):
        """X S X = 1, root² = S, X root = 1 and nothing is dropped for an SPD overlap."""
        s = random_overlap(8, rng)
        low = lowdin(s)
        assert low.n_dropped == 0
        assert np.max(np.abs(low.x @ s @ low.x - np.eye(8))) < EXACT
        assert np.max(np.abs(low.root @ low.root - s)) < EXACT
        assert np.max(np.abs(low.x @ low.root - np.eye(8))) < EXACT
        assert np.max(np.abs(low.projector - np.eye(8))) < EXACT
        assert np.max(np.abs(low.x - low.x.T)) < EXACT  # symmetric (Löwdin), not Cholesky

    def test_exact_dependence_is_projected_out(self, rng):
        """A rank-deficient S drops one direction; Xᵀ S X is the projector orthogonal to it."""
        b = rng.normal(size=(6, 5))
        s = b @ b.T  # rank 5: null vector v with s v = 0
        w, u = np.linalg.eigh(s)
        v = u[:, 0]
        low = lowdin(s)
        assert low.n_dropped == 1
        expected_projector = np.eye(6) - np.outer(v, v)
        assert np.max(np.abs(low.projector - expected_projector)) < 1e-10
        assert np.max(np.abs(low.x.T @ s @ low.x - low.projector)) < 1e-10
        assert np.max(np.abs(low.x @ v)) < 1e-10

    def test_threshold_is_inclusive_and_named(self, rng):
        """Eigenvalues at or above LINEAR_DEPENDENCE are kept; one just below is dropped."""
        u = random_rotation(3, rng)
        keep = lowdin((u * [LINEAR_DEPENDENCE * 1.01, 1.0, 2.0]) @ u.T)
        drop = lowdin((u * [LINEAR_DEPENDENCE * 0.99, 1.0, 2.0]) @ u.T)
        assert (keep.n_dropped, drop.n_dropped) == (0, 1)
        assert lowdin((u * [0.05, 1.0, 2.0]) @ u.T, threshold=0.1).n_dropped == 1


# --------------------------------------------------------------------------- orthonormality


class TestOrthonormality:
    def test_orthonormal_orbitals_give_zero(self, rng):
        """Orbitals C = S^(-1/2) Q are orthonormal in the S metric to rounding."""
        s = random_overlap(7, rng)
        m = orthonormality(random_orbitals(s, rng)[None], s)
        assert m.value < EXACT
        assert m.quantity == "max|CᵀSC − 1|"

    def test_scaled_orbital_gives_two_delta_plus_delta_squared(self, rng):
        """Scaling MO 3 by (1+δ) gives 2δ+δ² at MO pair (3, 3)."""
        s = random_overlap(7, rng)
        c = random_orbitals(s, rng)
        delta = 1e-4
        c[:, 3] *= 1 + delta
        m = orthonormality(c[None], s)
        assert m.value == pytest.approx(2 * delta + delta ** 2, rel=1e-8)
        assert m.where == "MO pair (3, 3)"

    def test_mixed_orbitals_locate_the_pair(self, rng):
        """Adding δ·c₁ to c₄ gives off-diagonal deviation δ at MO pair (1, 4)."""
        s = random_overlap(6, rng)
        c = random_orbitals(s, rng)
        delta = 3e-5
        c[:, 4] += delta * c[:, 1]
        m = orthonormality(c[None], s)
        assert m.value == pytest.approx(delta, rel=1e-8)
        assert m.where in ("MO pair (1, 4)", "MO pair (4, 1)")

    def test_worst_spin_component_is_named(self, rng):
        """With two spin components the beta error is found and the spin named."""
        s = random_overlap(5, rng)
        ca, cb = random_orbitals(s, rng), random_orbitals(s, rng)
        cb[:, 0] *= 1.01
        m = orthonormality(np.stack([ca, cb]), s)
        assert m.value == pytest.approx(0.0201, rel=1e-9)
        assert m.where == "beta, MO pair (0, 0)"

    def test_fewer_orbitals_than_basis_functions(self, rng):
        """nmo < nao: Cᵀ S C is nmo × nmo, the error still located."""
        s = random_overlap(6, rng)
        c = random_orbitals(s, rng, nmo=4)
        assert orthonormality(c[None], s).value < EXACT
        c[:, 2] *= 0.5
        m = orthonormality(c[None], s)
        assert m.value == pytest.approx(0.75, rel=1e-10)
        assert m.where == "MO pair (2, 2)"

    def test_orbitals_normalised_in_the_ao_metric_fail(self, water_rhf):
        """Orbitals from an eigensolve ignoring S (Cᵀ C = 1) are far from orthonormal."""
        s = water_rhf.ints.s
        _, c = np.linalg.eigh(water_rhf.ints.h)
        assert orthonormality(c[None], s).value > 1e-2


# --------------------------------------------------------------------------- matrix_difference


class TestMatrixDifference:
    def test_equal_matrices(self, rng):
        """Identical matrices differ by zero and no location is given."""
        a = random_overlap(5, rng)
        m = matrix_difference(a, a.copy(), "max|S − S_ref|")
        assert (m.value, m.quantity) == (0.0, "max|S − S_ref|")

    def test_one_changed_element_is_located_with_labels(self, water_rhf):
        """δ added at (1, 2) of the water overlap is found there, with pyscf's AO labels."""
        s = water_rhf.ints.s
        t = s.copy()
        t[1, 2] += 2.5e-7
        m = matrix_difference(t, s, "max|S − S_ref|", water_rhf.ints.labels)
        assert m.value == pytest.approx(2.5e-7, rel=1e-8)
        assert m.where == "AO element (1, 2) = (0 O 2s, 0 O 2px)"

    def test_labels_too_short_are_left_out(self):
        """An index beyond the label list gives the bare index."""
        a, b = np.zeros((3, 3)), np.zeros((3, 3))
        a[2, 0] = -1.5
        m = matrix_difference(a, b, "q", labels=("x", "y"))
        assert (m.value, m.where) == (1.5, "AO element (2, 0)")

    def test_nan_counts_as_worst(self):
        """A NaN anywhere makes the value NaN and is located."""
        a = np.zeros((3, 3))
        a[0, 1] = 5.0
        a[1, 2] = np.nan
        m = matrix_difference(a, np.zeros((3, 3)), "q")
        assert np.isnan(m.value)
        assert m.where == "AO element (1, 2)"

    def test_round_off_ties_name_the_first_place(self):
        """Symmetry-equivalent elements equal up to round-off (synthetic values): the first is
        named whichever is larger in the last bit; the value is the largest itself."""
        for later in (0.3 * (1 + 4e-16), 0.3 * (1 - 4e-16)):
            a = np.zeros((3, 3))
            a[0, 1], a[0, 2] = 0.3, later
            m = matrix_difference(a, np.zeros((3, 3)), "q")
            assert (m.value, m.where) == (max(0.3, later), "AO element (0, 1)")

    def test_a_clearly_larger_later_element_is_named(self):
        """Beyond LOCATION_TIE the later, larger element is named (synthetic values)."""
        a = np.zeros((3, 3))
        a[0, 1], a[0, 2] = 0.3, 0.3 * (1 + 1e-6)
        m = matrix_difference(a, np.zeros((3, 3)), "q")
        assert m.where == "AO element (0, 2)"


# --------------------------------------------------------------------------- idempotency


class TestIdempotency:
    def test_rhf_total_density_is_idempotent_after_halving(self, rng):
        """P = 2 C_occ C_occᵀ satisfies (P/2) S (P/2) = P/2."""
        s = random_overlap(8, rng)
        d = rhf_density(random_orbitals(s, rng), 3)
        m = idempotency(d, s, scale=2.0)
        assert m.value < EXACT
        assert m.quantity == "max|(P/2)S(P/2) − P/2|"

    def test_rhf_density_without_halving_is_not_idempotent(self, rng):
        """Forgetting the factor 2: P S P = 2P for P = 2 C Cᵀ, so the value is max|P|."""
        s = random_overlap(6, rng)
        d = rhf_density(random_orbitals(s, rng), 2)
        m = idempotency(d, s, scale=1.0)
        assert m.value == pytest.approx(np.max(np.abs(d)), rel=1e-10)
        assert m.quantity == "max|PσSPσ − Pσ|"

    def test_fractional_occupation_gives_f_squared_minus_f(self, rng):
        """Occupation f in one orbital gives |f² − f|·max|c_k c_kᵀ| at its largest element."""
        s = random_overlap(6, rng)
        c = random_orbitals(s, rng)
        f = 0.7
        occ = np.array([1.0, 1.0, f, 0.0, 0.0, 0.0])
        pa = (c * occ) @ c.T
        pb = c[:, :2] @ c[:, :2].T
        m = idempotency(np.stack([pa, pb]), s)
        outer = np.abs(np.outer(c[:, 2], c[:, 2]))
        assert m.value == pytest.approx(abs(f * f - f) * outer.max(), rel=1e-9)
        i, j = np.unravel_index(np.argmax(outer), outer.shape)
        assert m.where == f"alpha, AO element ({i}, {j})"

    def test_scaled_density(self, rng):
        """(1+δ)·D gives (δ+δ²)·max|D| in the perturbed (beta) component, labels attached."""
        s = random_overlap(4, rng)
        c = random_orbitals(s, rng)
        pa = c[:, :2] @ c[:, :2].T
        pb = c[:, :1] @ c[:, :1].T
        delta = 1e-3
        m = idempotency(np.stack([pa, (1 + delta) * pb]), s, labels=("a", "b", "c", "d"))
        assert m.value == pytest.approx((delta + delta ** 2) * np.max(np.abs(pb)), rel=1e-8)
        i, j = np.unravel_index(np.argmax(np.abs(pb)), pb.shape)
        assert m.where == f"beta, AO element ({i}, {j}) = ({'abcd'[i]}, {'abcd'[j]})"


# --------------------------------------------------------------------------- electron_count


class TestElectronCount:
    def test_exact_count(self, rng):
        """Tr(P S) of a 5-orbital RHF density is 10 electrons to rounding."""
        s = random_overlap(9, rng)
        d = rhf_density(random_orbitals(s, rng), 5)
        m = electron_count(d, s, (10,))
        assert m.value < EXACT
        assert m.quantity == "|Tr(PS) − N|"
        assert m.where == "Tr(PS) = 10, expected 10"

    def test_scaled_density_misses_n_delta(self, rng):
        """(1+δ)P counts N(1+δ) electrons: deviation N·δ."""
        s = random_overlap(9, rng)
        d = rhf_density(random_orbitals(s, rng), 5) * (1 + 1e-6)
        assert electron_count(d, s, (10,)).value == pytest.approx(1e-5, rel=1e-6)

    def test_wrong_spin_count_names_the_spin(self, rng):
        """A beta density with one electron too many is located by spin and count."""
        s = random_overlap(6, rng)
        c = random_orbitals(s, rng)
        d = np.stack([c[:, :3] @ c[:, :3].T, c[:, :3] @ c[:, :3].T])
        m = electron_count(d, s, (3, 2))
        assert m.value == pytest.approx(1.0, rel=1e-12)
        assert m.where == "beta, Tr(PS) = 3, expected 2"

    def test_nan_density(self, rng):
        """A NaN in the density makes the deviation NaN (so the check fails)."""
        s = random_overlap(3, rng)
        d = np.zeros((2, 3, 3))
        d[1, 0, 0] = np.nan
        m = electron_count(d, s, (0, 0))
        assert np.isnan(m.value)
        assert m.where.startswith("beta, ")


# --------------------------------------------------------------------------- density_consistency


class TestDensityConsistency:
    def test_same_density(self, rng):
        """The density the orbitals give is consistent with itself."""
        s = random_overlap(5, rng)
        d = rhf_density(random_orbitals(s, rng), 2)
        m = density_consistency(d.copy(), d)
        assert (m.value, m.quantity, m.where) == (0.0, "max|P − CnCᵀ|", "")

    def test_one_element_off_by_delta(self, rng):
        """δ added to element (2, 4) of the reported beta density is δ at that element."""
        s = random_overlap(5, rng)
        c = random_orbitals(s, rng)
        built = np.stack([c[:, :2] @ c[:, :2].T, c[:, :1] @ c[:, :1].T])
        reported = built.copy()
        reported[1, 2, 4] += 4e-6
        m = density_consistency(reported, built, labels=("p", "q", "r", "s", "t"))
        assert m.value == pytest.approx(4e-6, rel=1e-9)
        assert m.where == "beta, AO element (2, 4) = (r, t)"


# --------------------------------------------------------------------------- commutator


class TestCommutator:
    def test_model_fock_commutes_with_aufbau_density(self, rng):
        """F = S C diag(ε) Cᵀ S commutes (in the S metric) with 2 C_occ C_occᵀ."""
        s = random_overlap(7, rng)
        c = random_orbitals(s, rng)
        e = np.sort(rng.normal(size=7))
        f = (s @ (c * e) @ c.T @ s)[None]
        m = commutator(f, rhf_density(c, 3), s, lowdin(s))
        assert m.value < EXACT
        assert m.quantity == "max|X(FPS − SPF)X|"

    def test_occupied_virtual_rotation_gives_the_exact_commutator(self, rng):
        """Occupied i rotated into virtual a by θ: |sin2θ (ε_a − ε_i)|·max|qᵢqₐᵀ − qₐqᵢᵀ|."""
        s = random_overlap(7, rng)
        c = random_orbitals(s, rng)
        e = np.sort(rng.normal(size=7))
        f = (s @ (c * e) @ c.T @ s)[None]
        i, a, theta = 1, 5, 0.013
        d = rhf_density(rotate(c, i, a, theta), 3)
        q = sqrt_m(s) @ c  # the orbitals in the Löwdin basis (orthogonal)
        g = np.outer(q[:, i], q[:, a]) - np.outer(q[:, a], q[:, i])
        m = commutator(f, d, s, lowdin(s))
        assert m.value == pytest.approx(abs(np.sin(2 * theta) * (e[a] - e[i])) * np.abs(g).max(),
                                        rel=1e-8)
        p, r = np.unravel_index(np.argmax(np.abs(g)), g.shape)
        assert m.where in (f"Löwdin element ({p}, {r})", f"Löwdin element ({r}, {p})")

    def test_unrestricted_worst_spin(self, rng):
        """With (Fα, Fβ) and (Pα, Pβ) only the perturbed beta component is reported."""
        s = random_overlap(6, rng)
        ca, cb = random_orbitals(s, rng), random_orbitals(s, rng)
        ea, eb = np.sort(rng.normal(size=6)), np.sort(rng.normal(size=6))
        f = np.stack([s @ (ca * ea) @ ca.T @ s, s @ (cb * eb) @ cb.T @ s])
        cb_rot = rotate(cb, 0, 4, 0.02)
        d = np.stack([ca[:, :2] @ ca[:, :2].T, cb_rot[:, :2] @ cb_rot[:, :2].T])
        q = sqrt_m(s) @ cb
        g = np.outer(q[:, 0], q[:, 4]) - np.outer(q[:, 4], q[:, 0])
        m = commutator(f, d, s, lowdin(s))
        assert m.value == pytest.approx(0.5 * abs(np.sin(0.04) * (eb[4] - eb[0]))
                                        * np.abs(g).max(), rel=1e-8)
        assert m.where.startswith("beta, Löwdin element (")

    def test_pyscf_water_solution_is_stationary(self, water_rhf):
        """pyscf's converged water F and P commute to ~1e-8, located with AO labels."""
        ints, mf = water_rhf.ints, water_rhf.mf
        m = commutator(mf.get_fock()[None], mf.make_rdm1()[None], ints.s, lowdin(ints.s),
                       ints.labels)
        assert m.value < 1e-8
        # Core-guess density against the converged Fock: far from stationary.
        _, c0 = np.linalg.eigh(inv_sqrt(ints.s) @ ints.h @ inv_sqrt(ints.s))
        c0 = inv_sqrt(ints.s) @ c0
        m0 = commutator(mf.get_fock()[None], rhf_density(c0, 5), ints.s, lowdin(ints.s),
                        ints.labels)
        assert m0.value > 1e-2
        assert " = (" in m0.where and m0.where.startswith("Löwdin element (")


# --------------------------------------------------------------------------- rohf_conditions


class TestRohfConditions:
    def test_pyscf_rohf_solution_passes(self, oh_rohf):
        """pyscf's converged OH ROHF (Fα, Fβ) and (Pα, Pβ) meet the three block conditions."""
        ints, mf = oh_rohf.ints, oh_rohf.mf
        m = rohf_conditions(rohf_focks(oh_rohf), mf.make_rdm1(), lowdin(ints.s), ints.labels)
        assert m.value < 1e-8
        assert m.quantity == "max ROHF gradient block"

    def test_plain_commutator_does_not_vanish_for_rohf(self, oh_rohf):
        """The UHF-style commutator [Fσ, Pσ] of a true ROHF solution is not small: a
        separate ROHF condition is needed."""
        ints, mf = oh_rohf.ints, oh_rohf.mf
        m = commutator(rohf_focks(oh_rohf), mf.make_rdm1(), ints.s, lowdin(ints.s))
        assert m.value > 1e-3

    def test_invariant_under_rotations_within_each_space(self, ch2_rohf, rng):
        """Rotating orbitals within closed (3), open (2) and virtual (2) spaces keeps it ~0."""
        ints, mf = ch2_rohf.ints, ch2_rohf.mf
        occ = mf.mo_occ
        assert occ.tolist() == [2, 2, 2, 1, 1, 0, 0]
        c = block_rotate(mf.mo_coeff, [(0, 3), (3, 5), (5, 7)], rng)
        assert np.max(np.abs(c - mf.mo_coeff)) > 0.1  # the rotation is not trivial
        low = lowdin(ints.s)
        before = rohf_conditions(rohf_focks(ch2_rohf), rohf_densities(mf.mo_coeff, occ), low)
        after = rohf_conditions(rohf_focks(ch2_rohf), rohf_densities(c, occ), low)
        assert before.value < 1e-8
        assert after.value < 1e-8
        assert after.value == pytest.approx(before.value, abs=1e-10)

    def test_invariant_under_a_change_of_canonicalisation(self, ch2_rohf):
        """Orbitals canonicalised with another effective Fock (diagonal blocks Fβ for closed,
        Fα for open and virtual, instead of pyscf's ½(Fα+Fβ)) have other orbital energies
        but the same densities, so the value stays ~0."""
        ints, mf = ch2_rohf.ints, ch2_rohf.mf
        fa, fb = rohf_focks(ch2_rohf)
        c, occ = mf.mo_coeff, mf.mo_occ
        spaces = ((occ == 2, fb), (occ == 1, fa), (occ == 0, fa))
        new, e_new = c.copy(), np.zeros(len(occ))
        for mask, block in spaces:
            e_new[mask], u = np.linalg.eigh(c[:, mask].T @ block @ c[:, mask])
            new[:, mask] = c[:, mask] @ u
        # A genuine change of convention: the orbital energies move by more than 10 mEh.
        assert np.max(np.abs(e_new - mf.mo_energy)) > 1e-2
        assert orthonormality(new[None], ints.s).value < 1e-10
        m = rohf_conditions(rohf_focks(ch2_rohf), rohf_densities(new, occ), lowdin(ints.s))
        assert m.value < 1e-8

    def test_closed_to_open_rotation_fails_in_proportion(self, oh_rohf):
        """Rotating the closed σ orbital 2 into the open π orbital 4 by θ gives a value
        ∝ θ, found in the closed–open block of Fβ."""
        ints, mf = oh_rohf.ints, oh_rohf.mf
        low = lowdin(ints.s)
        f = rohf_focks(oh_rohf)

        def measure(t):
            return rohf_conditions(f, rohf_densities(rotate(mf.mo_coeff, 2, 4, t), mf.mo_occ),
                                   low, ints.labels)

        thetas = np.array([1e-4, 1e-3, 2e-3, 4e-3])
        values = np.array([measure(t).value for t in thetas])
        slopes = values / thetas
        assert slopes[0] > 0.1  # a real first-order effect (Eh per radian)
        assert np.max(np.abs(slopes / slopes[0] - 1)) < 1e-2
        assert measure(4e-3).where.startswith("closed–open block of Fβ, Löwdin element (")


# --------------------------------------------------------------------------- roothaan_hall


class TestRoothaanHall:
    def test_model_eigenvectors_have_zero_residual(self, rng):
        """For F = S C ε Cᵀ S the pair (C, ε) solves F C = S C ε exactly."""
        s = random_overlap(6, rng)
        c = random_orbitals(s, rng)
        e = np.sort(rng.normal(size=6))
        f = s @ (c * e) @ c.T @ s
        m = roothaan_hall(f[None], c[None], e[None], lowdin(s))
        assert m.value < EXACT
        assert m.quantity == "max|X(FC − SCε)|"

    def test_wrong_orbital_energy_gives_delta_times_orbital(self, rng):
        """ε_k off by δ gives δ·max|q_k| (q = S^½ C), located at orbital k."""
        s = random_overlap(6, rng)
        c = random_orbitals(s, rng)
        e = np.sort(rng.normal(size=6))
        f = s @ (c * e) @ c.T @ s
        wrong = e.copy()
        wrong[2] += 1e-5
        m = roothaan_hall(f[None], c[None], wrong[None], lowdin(s))
        q = sqrt_m(s) @ c
        assert m.value == pytest.approx(1e-5 * np.abs(q[:, 2]).max(), rel=1e-6)
        assert m.where == f"orbital 2 (ε = {wrong[2]:.6f} Eh)"

    def test_water_pyscf_and_nmo_less_than_nao(self, water_rhf):
        """pyscf's water orbitals solve Roothaan–Hall; dropping the last virtual still does."""
        ints, mf = water_rhf.ints, water_rhf.mf
        f, c, e = mf.get_fock()[None], mf.mo_coeff[None], mf.mo_energy[None]
        assert roothaan_hall(f, c, e, lowdin(ints.s)).value < 1e-8
        assert roothaan_hall(f, c[:, :, :-1], e[:, :-1], lowdin(ints.s)).value < 1e-8

    def test_unrestricted_beta_error_named(self, oh_uhf):
        """A beta orbital energy off by 1e-3 Eh is reported for beta and that orbital."""
        ints, mf = oh_uhf.ints, oh_uhf.mf
        e = np.array(mf.mo_energy)
        e[1, 4] -= 1e-3
        m = roothaan_hall(mf.get_fock(), mf.mo_coeff, e, lowdin(ints.s))
        q = sqrt_m(ints.s) @ mf.mo_coeff[1]
        assert m.value == pytest.approx(1e-3 * np.abs(q[:, 4]).max(), rel=1e-4)
        assert m.where == f"beta, orbital 4 (ε = {e[1, 4]:.6f} Eh)"


# --------------------------------------------------------------------------- energy_terms


class TestEnergyTerms:
    def test_one_orbital_model_by_hand(self):
        """One AO, h = −1, (00|00) = 0.75, E_nuc = 0.5: E = 2h + (00|00) + E_nuc = −0.75."""
        g = 0.75
        rhf = energy_terms(np.array([[[2.0]]]), np.array([[-1.0]]), np.array([[2 * g]]),
                           np.array([[[2 * g]]]), 0.5)
        assert (rhf.one_electron, rhf.coulomb, rhf.exchange, rhf.nuclear) == (-2.0, 1.5, -0.75, 0.5)
        assert rhf.total == -0.75
        uhf = energy_terms(np.array([[[1.0]], [[1.0]]]), np.array([[-1.0]]),
                           np.array([[2 * g]]), np.array([[[g]], [[g]]]), 0.5)
        assert uhf == rhf

    def test_water_terms_match_pyscf(self, water_rhf):
        """The terms of the converged water density add to pyscf's energy; E_J + E_K matches
        pyscf's two-electron energy; the total matches the published −74.942079928192 Eh."""
        ints, mf = water_rhf.ints, water_rhf.mf
        d = mf.make_rdm1()[None]
        vj, vk = ints.jk(d)
        t = energy_terms(d, ints.h, vj, vk, ints.e_nuc)
        e_elec, e_two = mf.energy_elec(mf.make_rdm1())
        assert t.total == pytest.approx(mf.e_tot, abs=1e-10)
        assert t.coulomb + t.exchange == pytest.approx(e_two, abs=1e-10)
        assert t.one_electron == pytest.approx(e_elec - e_two, abs=1e-10)
        # Source: Crawford group Programming Projects #3, water/STO-3G output
        # (tests/published/SOURCES.md item 1); E_nuc 8.002367061810450.
        assert t.total == pytest.approx(-74.942079928192, abs=1e-9)
        assert t.nuclear == pytest.approx(8.002367061810450, abs=1e-10)

    def test_rhf_density_split_into_spins_gives_the_same_energy(self, water_rhf):
        """Pα = Pβ = P/2 in the UHF formula gives the RHF energy (−¼ vs −½ Σ exchange)."""
        ints, mf = water_rhf.ints, water_rhf.mf
        p = mf.make_rdm1()
        t1 = energy_terms(p[None], ints.h, *ints.jk(p[None]), ints.e_nuc)
        d2 = np.stack([p / 2, p / 2])
        t2 = energy_terms(d2, ints.h, *ints.jk(d2), ints.e_nuc)
        assert t2.exchange == pytest.approx(t1.exchange, abs=1e-10)
        assert t2.total == pytest.approx(t1.total, abs=1e-10)

    def test_oh_uhf_matches_pyscf(self, oh_uhf):
        """The UHF terms of the converged OH densities add to pyscf's UHF energy."""
        ints, mf = oh_uhf.ints, oh_uhf.mf
        d = mf.make_rdm1()
        t = energy_terms(d, ints.h, *ints.jk(d), ints.e_nuc)
        assert t.total == pytest.approx(mf.e_tot, abs=1e-10)


# --------------------------------------------------------------------------- fock_from_terms


class TestFockFromTerms:
    def test_model_by_hand(self):
        """F = H + J − ½K (RHF) and Fσ = H + J − Kσ (UHF) on 1×1 matrices."""
        h, vj = np.array([[-1.0]]), np.array([[1.5]])
        assert fock_from_terms(h, vj, np.array([[[1.5]]]), 1).tolist() == [[[-0.25]]]
        assert fock_from_terms(h, vj, np.array([[[0.75]], [[0.25]]]), 2).tolist() == \
            [[[-0.25]], [[0.25]]]

    def test_matches_pyscf_fock(self, water_rhf, oh_uhf):
        """The rebuilt Fock equals pyscf's for water RHF and OH UHF."""
        for conv in (water_rhf, oh_uhf):
            d = conv.mf.make_rdm1()
            d = d[None] if d.ndim == 2 else d
            vj, vk = conv.ints.jk(d)
            f = fock_from_terms(conv.ints.h, vj, vk, len(d))
            ref = conv.mf.get_fock()
            ref = ref[None] if ref.ndim == 2 else ref
            assert np.max(np.abs(f - ref)) < 1e-10

    def test_fock_is_the_derivative_of_the_energy(self, water_rhf, rng):
        """dE/dP along a symmetric direction Δ equals Tr(F Δ) (E is quadratic: central
        differences are exact up to rounding)."""
        ints = water_rhf.ints
        p = water_rhf.mf.make_rdm1()
        delta = rng.normal(size=p.shape)
        delta = 0.5 * (delta + delta.T)

        def energy(x):
            d = x[None]
            return energy_terms(d, ints.h, *ints.jk(d), ints.e_nuc).total

        vj, vk = ints.jk(p[None])
        f = fock_from_terms(ints.h, vj, vk, 1)[0]
        step = 1e-4
        slope = (energy(p + step * delta) - energy(p - step * delta)) / (2 * step)
        assert slope == pytest.approx(float(np.sum(f * delta)), abs=1e-7)


# --------------------------------------------------------------------------- energy_consistency


class TestEnergyConsistency:
    def test_consistent(self):
        """The reported energy equal to E[P] gives zero, worded verbatim."""
        t = EnergyTerms(nuclear=0.5, one_electron=-2.0, coulomb=1.5, exchange=-0.75)
        m = energy_consistency(-0.75, t)
        assert (m.value, m.quantity) == (0.0, "|E − E[P]|")
        assert m.where == "E = -0.7500000000, E[P] = -0.7500000000 Eh"

    def test_off_by_a_quarter(self):
        """A reported energy 0.25 Eh too high is 0.25 Eh away."""
        t = EnergyTerms(nuclear=0.5, one_electron=-2.0, coulomb=1.5, exchange=-0.75)
        m = energy_consistency(-0.5, t)
        assert m.value == 0.25
        assert m.where == "E = -0.5000000000, E[P] = -0.7500000000 Eh"


# --------------------------------------------------------------------------- reference_energy


class TestReferenceEnergy:
    def test_above(self):
        """An energy above the reference says 'above' with the difference."""
        m = reference_energy(-1.0, -1.25)
        assert (m.value, m.quantity) == (0.25, "|E − E_ref|")
        assert m.where == "E = -1.0000000000 Eh is 2.500e-01 Eh above E_ref = -1.2500000000 Eh"

    def test_below(self):
        """An energy below the reference (a variational red flag) says 'below'."""
        m = reference_energy(-74.9420809282, -74.9420799282)
        assert m.value == pytest.approx(1e-6, rel=1e-6)
        assert m.where == ("E = -74.9420809282 Eh is 1.000e-06 Eh below "
                           "E_ref = -74.9420799282 Eh")

    def test_equal(self):
        """Equal energies give exactly zero."""
        assert reference_energy(-2.5, -2.5).value == 0.0


# --------------------------------------------------------------------------- aufbau


class TestAufbau:
    def test_sorted_energies_give_minus_the_gap(self):
        """Sorted ε with the lowest occupied: value = ε_HOMO − ε_LUMO = −gap."""
        e = np.array([[-1.0, -0.5, -0.3, 0.2, 0.9]])
        occ = np.array([[2.0, 2.0, 2.0, 0.0, 0.0]])
        m = aufbau(e, occ)
        assert m.value == pytest.approx(-0.5, abs=1e-15)
        assert m.quantity == "ε_HOMO − ε_LUMO"

    def test_swapped_homo_and_lumo(self):
        """Swapping an occupied and a virtual orbital energy gives their difference."""
        e = np.array([[-1.0, -0.5, 0.2, -0.3, 0.9]])  # 2 occupied at +0.2, 3 empty at −0.3
        occ = np.array([[2.0, 2.0, 2.0, 0.0, 0.0]])
        m = aufbau(e, occ)
        assert m.value == pytest.approx(0.5, abs=1e-15)
        assert m.where == ("occupied orbital 2 (ε = 0.200000) above empty orbital 3 "
                           "(ε = -0.300000)")

    def test_occupations_out_of_order(self):
        """Occupying orbitals 0, 1 and 4 of five is fine if ε₄ is below ε₂ and ε₃."""
        e = np.array([[-1.0, -0.5, 0.3, 0.4, -0.2]])
        occ = np.array([[2.0, 2.0, 0.0, 0.0, 2.0]])
        assert aufbau(e, occ).value == pytest.approx(-0.5, abs=1e-15)

    def test_unrestricted_names_the_worse_spin(self):
        """Only the beta spin violates aufbau, and is named."""
        e = np.array([[-1.0, -0.6, 0.1], [-0.9, 0.3, 0.2]])
        occ = np.array([[1.0, 1.0, 0.0], [1.0, 1.0, 0.0]])
        m = aufbau(e, occ)
        assert m.value == pytest.approx(0.1, abs=1e-15)
        assert m.where == ("beta, occupied orbital 1 (ε = 0.300000) above empty orbital 2 "
                           "(ε = 0.200000)")

    def test_no_empty_orbital(self):
        """With every orbital occupied there is no gap to measure: −inf."""
        m = aufbau(np.array([[-1.0, -0.5]]), np.array([[2.0, 2.0]]))
        assert m.value == -np.inf and m.where == ""

    def test_nan_energy(self):
        """A NaN orbital energy gives NaN (a failing value)."""
        m = aufbau(np.array([[-1.0, np.nan, 0.5]]), np.array([[2.0, 2.0, 0.0]]))
        assert np.isnan(m.value)


# --------------------------------------------------------------------------- well_formed


NAO = 7  # water/sto-3g: 5 alpha and 5 beta electrons
OH_NAO = 6  # OH/sto-3g: 5 alpha, 4 beta


def water_like(**changes) -> dict:
    sol = {"energy": -74.9, "coefficients": np.eye(NAO),  # synthetic
           "occupations": np.array([2.0, 2, 2, 2, 2, 0, 0])}
    sol.update(changes)
    return extract(sol)


def rhf_problems(sol):
    return well_formed(sol, NAO, "rhf", 5, 5)


class TestWellFormed:
    def test_full_valid_solutions(self, water_rhf, oh_uhf, oh_rohf):
        """pyscf's own RHF, UHF and ROHF solutions with every key are well-formed."""
        for conv in (water_rhf, oh_uhf, oh_rohf):
            p = conv.problem
            assert well_formed(extract(conv.solution()), p.nao, p.method, p.n_alpha,
                               p.n_beta) == []

    def test_missing_required_keys(self):
        """Each missing required key is listed, in contract order."""
        sol = extract({"coefficients": np.eye(NAO)})
        assert rhf_problems(sol) == ["missing required key 'energy'",
                                     "missing required key 'occupations'"]

    def test_malformed_values(self):
        """Unreadable values are reported with the extractor's reason."""
        sol = water_like(energy="low", coefficients=[[1, 2], [3]], density="P",
                         fock=np.array([None, 1.0], dtype=object), converged=1)
        assert rhf_problems(sol) == ["'energy' must be a number, got str",
                                     "'coefficients' cannot be read as an array (ValueError)",
                                     "'density' is a str, not a numeric array",
                                     "'fock' is a ragged or non-numeric array",
                                     "'converged' must be a bool, got int"]

    def test_non_finite_energy(self):
        """An infinite energy is named."""
        assert rhf_problems(water_like(energy=float("inf"))) == ["'energy' is inf"]

    def test_wrong_coefficient_shape(self):
        """Coefficients with the wrong number of rows are rejected, other checks stopped."""
        assert rhf_problems(water_like(coefficients=np.eye(6))) == [
            "'coefficients' has shape (6, 6), expected (nao, nmo) with nao = 7 and 1 ≤ nmo ≤ 7"]
        assert rhf_problems(water_like(coefficients=np.ones((7, 8)))) == [
            "'coefficients' has shape (7, 8), expected (nao, nmo) with nao = 7 and 1 ≤ nmo ≤ 7"]

    def test_unrestricted_coefficients_need_a_spin_axis(self):
        """UHF coefficients of shape (nao, nmo) are rejected."""
        sol = extract({"energy": -75.0, "coefficients": np.eye(OH_NAO),  # synthetic
                       "occupations": np.ones((2, OH_NAO))})
        assert well_formed(sol, OH_NAO, "uhf", 5, 4) == [
            "'coefficients' has shape (6, 6), expected (2, nao, nmo) with nao = 6 and "
            "1 ≤ nmo ≤ 6"]

    def test_wrong_occupations_shape(self):
        """Occupations must have nmo entries."""
        assert rhf_problems(water_like(occupations=[2, 2, 2, 2, 2, 0])) == [
            "'occupations' has shape (6), expected (7) (nmo = 7 from coefficients)"]

    def test_non_finite_arrays(self):
        """NaN/inf elements are counted, singular and plural."""
        d1 = np.zeros((NAO, NAO))
        d1[0, 0] = np.nan
        e2 = np.array([np.inf, np.nan, 0, 0, 0, 0, 0])
        assert rhf_problems(water_like(density=d1, orbital_energies=e2)) == [
            "'orbital_energies' has 2 non-finite elements", "'density' has 1 non-finite element"]

    def test_non_symmetric_density(self):
        """A density with D[0,1] − D[1,0] = 1e-3 is not symmetric."""
        d = np.zeros((NAO, NAO))
        d[0, 1] = 1e-3
        assert rhf_problems(water_like(density=d)) == [
            "'density' is not symmetric: max|A − Aᵀ| = 1.0e-03 > 1e-08"]

    def test_asymmetry_at_the_named_limit_is_allowed(self):
        """An asymmetry of exactly SYMMETRY passes; twice it fails."""
        f = np.zeros((NAO, NAO))
        f[2, 3] = SYMMETRY
        assert rhf_problems(water_like(fock=f)) == []
        f[2, 3] = 2 * SYMMETRY
        assert rhf_problems(water_like(fock=f)) == [
            "'fock' is not symmetric: max|A − Aᵀ| = 2.0e-08 > 1e-08"]

    def test_density_shape_per_method(self):
        """RHF wants one (nao, nao) density, ROHF a pair."""
        assert rhf_problems(water_like(density=np.zeros((2, NAO, NAO)))) == [
            "'density' has shape (2, 7, 7), expected (7, 7)"]
        sol = extract({"energy": -75.0, "coefficients": np.eye(OH_NAO),  # synthetic
                       "occupations": [2, 2, 2, 2, 1, 0], "fock": np.zeros((OH_NAO, OH_NAO))})
        assert well_formed(sol, OH_NAO, "rohf", 5, 4) == [
            "'fock' has shape (6, 6), expected (2, 6, 6)"]

    def test_rhf_occupation_sum(self):
        """An extra pair of electrons in RHF is reported against the expected 10."""
        assert rhf_problems(water_like(occupations=[2, 2, 2, 2, 2, 2, 0])) == [
            "'occupations' sum to 12 electrons, expected 10"]

    def test_uhf_occupation_sums(self):
        """UHF occupation sums are checked per spin."""
        # synthetic energy and coefficients (invented placeholders)
        sol = extract({"energy": -75.0, "coefficients": np.stack([np.eye(OH_NAO)] * 2),
                       "occupations": [[1, 1, 1, 1, 1, 0], [1, 1, 1, 1, 1, 0]]})
        assert well_formed(sol, OH_NAO, "uhf", 5, 4) == [
            "'occupations' sum to 5 alpha and 5 beta electrons, expected 5 and 4"]

    def test_uhf_occupation_values(self):
        """A 2 in a UHF spin orbital is rejected."""
        # synthetic energy and coefficients (invented placeholders)
        sol = extract({"energy": -75.0, "coefficients": np.stack([np.eye(OH_NAO)] * 2),
                       "occupations": [[2, 1, 1, 1, 0, 0], [1, 1, 1, 1, 0, 0]]})
        assert well_formed(sol, OH_NAO, "uhf", 5, 4) == [
            "'occupations' for uhf must be 0 or 1 per spin orbital"]

    def test_rohf_occupations(self):
        """ROHF: total, allowed values, and the doubly/singly split are each checked."""
        def problems(occ):
            # synthetic energy and coefficients (invented placeholders)
            sol = extract({"energy": -75.0, "coefficients": np.eye(OH_NAO), "occupations": occ})
            return well_formed(sol, OH_NAO, "rohf", 5, 4)

        assert problems([2, 2, 2, 2, 1, 0]) == []
        assert problems([2, 2, 2, 2, 2, 0]) == ["'occupations' sum to 10 electrons, expected 9"]
        assert problems([3, 2, 2, 2, 0, 0]) == ["'occupations' for rohf must be 0, 1 or 2"]
        assert problems([2, 2, 2, 1, 1, 1]) == [
            "'occupations' have 3 doubly and 3 singly occupied orbitals, expected 4 and 1"]

    def test_fractional_occupation(self):
        """Occupations must be whole numbers; rounding noise of OCCUPATION_ROUNDING is accepted."""
        msg = ("'occupations' must be whole numbers (0, 1 or 2); fractional occupations are "
               "not part of the contract")
        assert rhf_problems(water_like(occupations=[2, 2, 2, 2, 1.5, 0.5, 0])) == [msg]
        noisy = np.array([2, 2, 2, 2, 2, 0, 0]) + OCCUPATION_ROUNDING / 2
        assert rhf_problems(water_like(occupations=noisy)) == []
        assert rhf_problems(water_like(
            occupations=np.array([2, 2, 2, 2, 2, 0, 0]) + 2 * OCCUPATION_ROUNDING)) == [msg]

    def test_rhf_with_singly_occupied_orbitals(self):
        """RHF occupations 2,2,2,2,1,1 sum to 10 but a 1 is not allowed."""
        assert rhf_problems(water_like(occupations=[2, 2, 2, 2, 1, 1, 0])) == [
            "'occupations' for rhf must be 0 or 2"]

    def test_several_problems_are_all_listed(self):
        """Independent problems in different keys are all reported, in order."""
        sol = water_like(occupations=[2, 2, 2, 2, 2, 2, 0], overlap=np.ones((3, 3)))
        assert rhf_problems(sol) == ["'occupations' sum to 12 electrons, expected 10",
                                     "'overlap' has shape (3, 3), expected (7, 7)"]
