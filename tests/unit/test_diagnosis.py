"""Unit tests of ``harness.verdict.diagnosis`` on constructed inputs.

The Fock fit recovers exact coefficients from random symmetric "terms", refuses collinear
or under-determined fits, and names a bug only for an exact signature; the energy, count
and orbital-energy signatures are matched only when unique. Atomic units (bohr, Eh).
"""

from __future__ import annotations

import json
from types import SimpleNamespace

import numpy as np
import pytest

from harness.verdict import diagnosis as dg
from harness.contract.solution import extract
from harness.checks.energy import EnergyTerms
from harness.contract.results import CheckResult, Status
from harness.contract.units import ANGSTROM_IN_BOHR, HARTREE_IN_EV

NAO = 7
RNG_SEED = 11


def sym(rng, n=NAO):
    a = rng.normal(size=(n, n))
    return a + a.T


@pytest.fixture
def terms():
    rng = np.random.default_rng(RNG_SEED)
    return {name: sym(rng) for name in ("T", "V", "J", "K")}


def combine(terms, coef):
    return sum(c * terms[n] for n, c in coef.items())


RHF_EXPECTED = {"T": 1.0, "V": 1.0, "J": 1.0, "K": -0.5}


# --------------------------------------------------------------------------- fock_fit


class TestFockFit:
    def test_exact_coefficients_recovered(self, terms):
        coef = {"T": 0.7, "V": -1.3, "J": 2.1, "K": -0.45}
        fit = dg.fock_fit(combine(terms, coef), terms)
        assert fit.names == ("T", "V", "J", "K")
        np.testing.assert_allclose(fit.coefficients, list(coef.values()), atol=1e-12)
        assert fit.residual < 1e-14
        assert fit.separable and fit.confident
        assert 1.0 <= fit.condition < 100.0

    def test_residual_is_relative_to_f(self, terms):
        rng = np.random.default_rng(3)
        noise = sym(rng)
        f = combine(terms, RHF_EXPECTED)
        fit = dg.fock_fit(f + 1e-3 * noise, terms)
        iu = np.triu_indices(NAO)
        a = np.stack([terms[n][iu] for n in "TVJK"], 1)
        b = (f + 1e-3 * noise)[iu]
        r = b - a @ np.linalg.lstsq(a, b, rcond=None)[0]
        assert fit.residual == pytest.approx(np.linalg.norm(r) / np.linalg.norm(b), rel=1e-8)
        assert fit.residual > dg.FIT_RESIDUAL
        assert not fit.confident

    def test_tiny_noise_stays_confident(self, terms):
        rng = np.random.default_rng(4)
        f = combine(terms, RHF_EXPECTED) + 1e-11 * sym(rng)
        fit = dg.fock_fit(f, terms)
        assert fit.confident
        assert max(fit.uncertainty) < 1e-9

    def test_collinear_terms_are_not_separable(self, terms):
        regs = dict(terms, K=2.0 * terms["J"])
        fit = dg.fock_fit(combine(terms, RHF_EXPECTED), regs)
        assert not fit.separable and not fit.confident
        assert fit.condition > dg.MAX_CONDITION
        assert all(np.isnan(fit.coefficients))

    def test_empty_term_is_undetermined(self, terms):
        regs = dict(terms, K=np.zeros((NAO, NAO)))
        fit = dg.fock_fit(terms["T"] + terms["V"] + terms["J"], regs)
        assert np.isnan(fit.coefficients[3])
        np.testing.assert_allclose(fit.coefficients[:3], [1, 1, 1], atol=1e-12)
        assert fit.confident

    def test_too_few_elements(self):
        rng = np.random.default_rng(5)
        regs = {n: sym(rng, 2) for n in "TVJK"}  # 3 elements, 4 terms
        fit = dg.fock_fit(regs["T"], regs)
        assert not fit.separable and not fit.confident


# --------------------------------------------------------------------------- signatures


class TestFockSignature:
    @pytest.mark.parametrize("change, name", [
        ({"K": -1.0}, "exchange scaled by 2"),
        ({"K": 0.0}, "no exchange"),
        ({"T": 0.0}, "core Hamiltonian missing kinetic energy"),
        ({"V": 0.0}, "missing nuclear attraction"),
    ])
    def test_rhf_named(self, terms, change, name):
        coef = {**RHF_EXPECTED, **change}
        fit = dg.fock_fit(combine(terms, coef), terms)
        assert dg.fock_signature(fit, "Fock", RHF_EXPECTED) == name
        assert dg.fock_hint([("Fock", fit, RHF_EXPECTED)]).startswith(name + ": Fock ≈ ")

    def test_exact_hint_text(self, terms):
        fit = dg.fock_fit(combine(terms, {**RHF_EXPECTED, "K": -1.0}), terms)
        hint = dg.fock_hint([("Fock", fit, RHF_EXPECTED)])
        assert hint == ("exchange scaled by 2: Fock ≈ 1.00 T + 1.00 V + 1.00 J − 1.00 K "
                        f"(expected −0.50 K), residual {fit.residual:.0e}")

    def test_correct_fock_gives_no_hint(self, terms):
        fit = dg.fock_fit(combine(terms, RHF_EXPECTED), terms)
        assert dg.fock_signature(fit, "Fock", RHF_EXPECTED) is None
        assert dg.fock_hint([("Fock", fit, RHF_EXPECTED)]) is None

    def test_near_miss_coefficient_is_general_not_named(self, terms):
        """K = −0.99 is within neither 1e-3 of −1 nor of −½: described, not named."""
        fit = dg.fock_fit(combine(terms, {**RHF_EXPECTED, "K": -0.99}), terms)
        assert dg.fock_signature(fit, "Fock", RHF_EXPECTED) is None
        hint = dg.fock_hint([("Fock", fit, RHF_EXPECTED)])
        assert hint.startswith("Fock ≈ 1.00 T + 1.00 V + 1.00 J − 0.99 K (expected −0.50 K)")

    def test_two_bugs_are_not_named(self, terms):
        fit = dg.fock_fit(combine(terms, {**RHF_EXPECTED, "K": -1.0, "T": 0.0}), terms)
        assert dg.fock_signature(fit, "Fock", RHF_EXPECTED) is None
        assert "expected 1.00 T, −0.50 K" in dg.fock_hint([("Fock", fit, RHF_EXPECTED)])

    def test_noisy_fit_gives_no_hint(self, terms):
        rng = np.random.default_rng(8)
        f = combine(terms, {**RHF_EXPECTED, "K": -1.0}) + 1e-4 * sym(rng)
        fit = dg.fock_fit(f, terms)
        assert dg.fock_hint([("Fock", fit, RHF_EXPECTED)]) is None


def uhf_terms(rng, same=False):
    t, v = sym(rng), sym(rng)
    j = np.stack([sym(rng), sym(rng)])
    k = np.stack([sym(rng), sym(rng)])
    if same:
        j[1], k[1] = j[0], k[0]
    return t, v, j, k


class TestUHFSignatures:
    def fock(self, t, v, j, k, ja=(1, 1), ka=(-1, 0), jb=(1, 1), kb=(0, -1)):
        fa = t + v + ja[0] * j[0] + ja[1] * j[1] + ka[0] * k[0] + ka[1] * k[1]
        fb = t + v + jb[0] * j[0] + jb[1] * j[1] + kb[0] * k[0] + kb[1] * k[1]
        return np.stack([fa, fb])

    @pytest.mark.parametrize("kw, name", [
        ({}, None),
        ({"ka": (-2, 0), "kb": (0, -2)}, "exchange scaled by 2"),
        ({"ka": (0, 0), "kb": (0, 0)}, "no exchange"),
        ({"ja": (1, 0), "jb": (0, 1)}, "Coulomb from one spin only"),
        ({"ka": (-1, -1), "kb": (-1, -1)},
         "exchange built from the total density instead of each spin's density"),
        ({"ka": (-0.5, -0.5), "kb": (-0.5, -0.5)},
         "exchange built from the total density instead of each spin's density"),
    ])
    def test_named(self, kw, name):
        t, v, j, k = uhf_terms(np.random.default_rng(21))
        fits = dg.fit_fock("uhf", self.fock(t, v, j, k, **kw), t, v, j, k)
        assert [f[0] for f in fits] == ["Fα", "Fβ"]
        assert fits[0][1].names == ("T", "V", "J(Pα)", "J(Pβ)", "K(Pα)", "K(Pβ)")
        hint = dg.fock_hint(fits)
        if name is None:
            assert hint is None
        else:
            assert hint.startswith(name + ": Fα ≈ ")
            assert "; Fβ ≈ " in hint

    def test_one_spin_wrong_is_named_for_that_spin(self):
        t, v, j, k = uhf_terms(np.random.default_rng(22))
        fits = dg.fit_fock("uhf", self.fock(t, v, j, k, ka=(-2, 0)), t, v, j, k)
        hint = dg.fock_hint(fits)
        assert hint.startswith("exchange scaled by 2: Fα ≈ 1.00 T + 1.00 V + 1.00 J(Pα) "
                               "+ 1.00 J(Pβ) − 2.00 K(Pα) + 0.00 K(Pβ) (expected −1.00 K(Pα))")
        assert "Fβ" not in hint  # the beta Fock is as expected

    def test_spins_disagreeing_are_not_named(self):
        t, v, j, k = uhf_terms(np.random.default_rng(22))
        fits = dg.fit_fock("uhf", self.fock(t, v, j, k, ka=(-2, 0), kb=(0, 0)), t, v, j, k)
        hint = dg.fock_hint(fits)
        assert hint.startswith("Fα ≈ 1.00 T + 1.00 V + 1.00 J(Pα) + 1.00 J(Pβ) − 2.00 K(Pα)")
        assert "; Fβ ≈ 1.00 T + 1.00 V + 1.00 J(Pα) + 1.00 J(Pβ) + 0.00 K(Pα) + 0.00 K(Pβ)" in hint

    def test_collinear_spins_are_merged(self):
        """Pα = Pβ: J(Pα) = J(Pβ), K(Pα) = K(Pβ); the fit falls back to J(P), K(Pσ)."""
        t, v, j, k = uhf_terms(np.random.default_rng(23), same=True)
        f = self.fock(t, v, j, k, ka=(-1, -1), kb=(-1, -1))  # exchange of the total density
        fits = dg.fit_fock("uhf", f, t, v, j, k)
        assert fits[0][1].names == ("T", "V", "J(P)", "K(Pσ)")
        np.testing.assert_allclose(fits[0][1].coefficients, [1, 1, 1, -2], atol=1e-12)
        hint = dg.fock_hint(fits)
        assert hint.startswith("exchange scaled by 2 or built from the total density "
                               "(Pα ≈ Pβ: not separable): Fα ≈ 1.00 T + 1.00 V + 1.00 J(P) "
                               "− 2.00 K(Pσ) (expected −1.00 K(Pσ))")

    def test_collinear_correct_gives_no_hint(self):
        t, v, j, k = uhf_terms(np.random.default_rng(24), same=True)
        fits = dg.fit_fock("uhf", self.fock(t, v, j, k), t, v, j, k)
        assert fits[0][1].names == ("T", "V", "J(P)", "K(Pσ)")
        assert dg.fock_hint(fits) is None


# --------------------------------------------------------------------------- energy


TERMS = EnergyTerms(nuclear=9.1681, one_electron=-122.5, coulomb=46.2, exchange=-8.9)
E_KIN, E_ATT = 75.0, -197.5
E_NUC_ANG = TERMS.nuclear / ANGSTROM_IN_BOHR


class TestEnergySignatures:
    @pytest.mark.parametrize("diff, name", [
        (-TERMS.nuclear, "nuclear repulsion missing"),
        (TERMS.nuclear, "nuclear repulsion counted twice"),
        (E_NUC_ANG - TERMS.nuclear, "coordinates read as ångström"),
        (TERMS.coulomb + TERMS.exchange, "two-electron energy double counted"),
        (TERMS.exchange, "exchange energy doubled"),
        (-TERMS.exchange, "exchange energy missing"),
        (-E_KIN, "kinetic energy missing"),
        (-E_ATT, "nuclear-attraction energy missing"),
    ])
    def test_unique(self, diff, name):
        cand = dg.energy_candidates(TERMS, E_KIN, E_ATT, E_NUC_ANG)
        found = dg.unique_match(diff + 3e-7, cand, dg.ENERGY_MATCH, dg.ENERGY_SEPARATION)
        assert found is not None and found.startswith(name)
        # a near miss (another error on top) is not matched
        assert dg.unique_match(diff + 1e-5, cand, dg.ENERGY_MATCH, dg.ENERGY_SEPARATION) is None

    def test_hint_text(self):
        cand = dg.energy_candidates(TERMS, E_KIN, E_ATT, E_NUC_ANG)
        hint = dg.energy_hint("nuclear repulsion missing", -TERMS.nuclear, cand, TERMS,
                              E_NUC_ANG)
        assert hint == ("nuclear repulsion missing: E − E[P] = -9.168100 Eh = −E_nuc "
                        "(9.168100 Eh)")

    def test_two_electrons_are_ambiguous(self):
        """For two electrons E_K = −½E_J, so E_J + E_K = −E_K: neither is named."""
        two = EnergyTerms(nuclear=0.7143, one_electron=-2.5, coulomb=1.3, exchange=-0.65)
        cand = dg.energy_candidates(two, 1.2, -3.7, two.nuclear / ANGSTROM_IN_BOHR)
        assert dg.unique_match(two.coulomb + two.exchange, cand, dg.ENERGY_MATCH,
                               dg.ENERGY_SEPARATION) is None

    def test_nuclear_repulsion(self):
        assert dg.nuclear_repulsion([1, 1], [[0, 0, 0], [0, 0, 1.4]]) == pytest.approx(1 / 1.4,
                                                                                     rel=1e-15)
        z, r = [8, 1, 1], np.array([[0, -0.14, 0], [1.64, 1.14, 0], [-1.64, 1.14, 0]])
        # E_nuc is homogeneous of degree −1 in the coordinates
        assert dg.nuclear_repulsion(z, r * ANGSTROM_IN_BOHR) == pytest.approx(
            dg.nuclear_repulsion(z, r) / ANGSTROM_IN_BOHR, rel=1e-14)

    def test_nuclear_repulsion_matches_pyscf(self, water_rhf):
        mol = water_rhf.ints.mol
        assert dg.nuclear_repulsion(mol.atom_charges(), mol.atom_coords()) == pytest.approx(
            mol.energy_nuc(), abs=1e-12)


# --------------------------------------------------------------------------- counts


class TestCountSignature:
    @pytest.mark.parametrize("trace, words", [
        (5.0, "N/2 = 5: alpha density reported as total?"),
        (20.0, "2N = 20: density doubled"),
        (12.0, "N + 2 = 12: one doubly occupied orbital too many"),
        (8.0, "N − 2 = 8: one doubly occupied orbital too few"),
    ])
    def test_rhf(self, trace, words):
        assert words in dg.count_signature("rhf", [trace + 1e-9], [10])

    @pytest.mark.parametrize("trace", [5.1, 9.0, 10.0 + 1e-5, 7.0])
    def test_rhf_other_counts(self, trace):
        assert dg.count_signature("rhf", [trace], [10]) is None

    def test_four_electrons_ambiguous(self):
        """N = 4: N/2 = N − 2; neither is named."""
        assert dg.count_signature("rhf", [2.0], [4]) is None

    def test_uhf(self):
        assert "one alpha orbital too many" in dg.count_signature("uhf", [6.0, 4.0], [5, 4])
        assert "one beta orbital too few" in dg.count_signature("uhf", [5.0, 3.0], [5, 4])
        assert dg.count_signature("uhf", [4.0, 5.0], [5, 4]) is None  # both wrong
        assert dg.count_signature("uhf", [7.0, 4.0], [5, 4]) is None  # off by two


# --------------------------------------------------------------------------- orbitals


class TestOrbitalSignature:
    def setup_method(self):
        rng = np.random.default_rng(31)
        self.r = np.sort(rng.uniform(-20, 2, size=(1, 7)), axis=1)
        self.occ = np.array([[2, 2, 2, 2, 2, 0, 0]], dtype=float)

    def test_rayleigh_quotients_are_eigenvalues(self):
        rng = np.random.default_rng(32)
        a = rng.normal(size=(NAO, NAO))
        s = a @ a.T + NAO * np.eye(NAO)
        f = sym(rng)
        w, u = np.linalg.eigh(s)
        x = (u / np.sqrt(w)) @ u.T
        e, cp = np.linalg.eigh(x @ f @ x)
        c = (x @ cp) * rng.uniform(0.5, 2.0, size=NAO)  # any normalisation
        np.testing.assert_allclose(dg.rayleigh_quotients(f[None], c[None], s)[0], e,
                                   atol=1e-12)

    def test_ev(self):
        hint = dg.orbital_signature(self.r * HARTREE_IN_EV, self.r, self.occ)
        assert hint.startswith("orbital energies in eV: ε / r = 27.2114")

    def test_level_shift(self):
        eps = self.r + 0.5 * (self.occ == 0)
        hint = dg.orbital_signature(eps, self.r, self.occ)
        assert hint.startswith("level shift of 0.50 Eh left in the virtual orbital energies")

    def test_near_misses(self):
        shifted_all = self.r + 0.5
        assert dg.orbital_signature(shifted_all, self.r, self.occ) is None
        uneven = self.r + np.array([[0, 0, 0, 0, 0, 0.5, 0.6]])
        assert dg.orbital_signature(uneven, self.r, self.occ) is None
        one_virtual = np.array([[2, 2, 2, 2, 2, 2, 0]], dtype=float)
        assert dg.orbital_signature(self.r + 0.5 * (one_virtual == 0), self.r,
                                    one_virtual) is None
        assert dg.orbital_signature(self.r * 27.0, self.r, self.occ) is None
        assert dg.orbital_signature(self.r + 1e-7, self.r, self.occ) is None


# --------------------------------------------------------------------------- diagnose


def test_no_failure_no_diagnosis(water_rhf):
    water = water_rhf
    p = water.problem
    results = {"energy-consistency": CheckResult("energy-consistency", Status.PASSED, 0.0,
                                                 1e-8, "")}
    d = dg.diagnose(p, {"energy": 0.0}, water.ints, np.zeros((1, p.nao, p.nao)), results)
    assert d.hints == {} and d.analysis == {}


def test_wrong_energy_on_constructed_solution(water_rhf):
    """pyscf's converged RHF density with E − E_nuc reported: the hint names E_nuc."""
    water = water_rhf
    mf, p = water.mf, water.problem
    dm = mf.make_rdm1()
    sol = {"energy": float(mf.e_tot) - float(mf.energy_nuc()), "density": dm,
           "coefficients": mf.mo_coeff, "occupations": mf.mo_occ}
    fail = lambda n: CheckResult(n, Status.FAILED, 1.0, 1e-8, "")  # noqa: E731
    ok = lambda n: CheckResult(n, Status.PASSED, 0.0, 1e-8, "")  # noqa: E731
    results = {"electron-count": ok("electron-count"), "energy-consistency":
               fail("energy-consistency"), "self-consistency": ok("self-consistency")}
    d = dg.diagnose(p, extract(sol), water.ints, dm[None], results,
                    reference=SimpleNamespace(energy=float(mf.e_tot)))
    e_nuc = float(mf.energy_nuc())
    assert d.hints == {"energy-consistency": f"nuclear repulsion missing: E − E[P] = "
                                             f"{-e_nuc:+.6f} Eh = −E_nuc ({e_nuc:.6f} Eh)"}
    assert d.analysis["energy"]["E - E[P]"] == pytest.approx(-e_nuc, abs=1e-9)
    json.dumps(d.analysis, allow_nan=False)


# ----------------------------------------------------------------- stale density, screening


class _Result:
    def __init__(self, passed):
        self.passed = passed


def _results(**flags):
    return {name.replace("_", "-"): _Result(v) for name, v in flags.items()}


def _orbital_problem(rng, n=6, nocc=2):
    """Synthetic: S = 1 + small symmetric, a symmetric F, its occupied eigenvectors."""
    s = np.eye(n) + 0.02 * sym(rng, n)
    f = sym(rng, n)
    w, u = np.linalg.eigh(s)
    x = (u / np.sqrt(w)) @ u.T
    e, cp = np.linalg.eigh(x @ f @ x)
    c = x @ cp
    return s, f, c[:, :nocc]


class TestStaleDensity:
    """Synthetic densities (synthetic numbers, not a molecule)."""

    flags = dict(density_consistency=False, idempotency=True, electron_count=True)

    def test_orbitals_of_the_reported_densitys_fock(self):
        rng = np.random.default_rng(31)
        s, f, c = _orbital_problem(rng)
        built = (2 * c @ c.T)[None]
        other = np.linalg.qr(rng.standard_normal((6, 2)))[0]
        w, u = np.linalg.eigh(s)
        x = (u / np.sqrt(w)) @ u.T
        d = (2 * (x @ other) @ (x @ other).T)[None]  # idempotent in the S metric
        hint, numbers = dg.stale_density_hint("rhf", d, built, f[None], s,
                                              _results(**self.flags))
        assert numbers["orbitals vs F[P]"] < 1e-12
        assert hint.startswith("density not rebuilt from the final orbitals: the reported P "
                               "is a density (PSP = P, Tr(PS) = N) but differs from C n Cᵀ "
                               "of the reported orbitals by ")

    def test_orbitals_of_another_matrix_get_no_hint(self):
        rng = np.random.default_rng(32)
        s, f, c = _orbital_problem(rng)
        built = (2 * c @ c.T)[None]
        hint, numbers = dg.stale_density_hint("rhf", built * 0.5, built, f[None] + 0.1 * sym(rng, 6),
                                              s, _results(**self.flags))
        assert hint is None and numbers["orbitals vs F[P]"] > dg.STALE_ORBITALS_STATIONARY

    @pytest.mark.parametrize("flag", ["idempotency", "electron_count"])
    def test_not_a_density_gets_no_hint(self, flag):
        rng = np.random.default_rng(33)
        s, f, c = _orbital_problem(rng)
        built = (2 * c @ c.T)[None]
        flags = dict(self.flags, **{flag: False})
        assert dg.stale_density_hint("rhf", built, built, f[None], s, _results(**flags)) \
            == (None, {})

    def test_rohf_gets_no_hint(self):
        rng = np.random.default_rng(34)
        s, f, c = _orbital_problem(rng)
        d = np.stack([c @ c.T, c @ c.T])
        assert dg.stale_density_hint("rohf", d, d, np.stack([f, f]), s,
                                     _results(**self.flags)) == (None, {})


class TestScreening:
    def eri(self, rng, n=4):
        """A synthetic (μν|λσ) with the 8-fold symmetry: Σ_k B_k ⊗ B_k of symmetric B_k."""
        b = np.stack([sym(rng, n) for _ in range(3)]) * np.logspace(0, -3, n)[None, :, None]
        b = 0.5 * (b + b.transpose(0, 2, 1))
        return np.einsum("kij,kls->ijls", b, b)

    def test_masks_order_and_monotone(self):
        eri = self.eri(np.random.default_rng(41))
        loc = np.array([0, 1, 4])
        loose = list(dg.screening_masks(eri, loc, 1e-2))
        tight = list(dg.screening_masks(eri, loc, 1e-8))
        assert len(loose) == len(dg.SCREENING_SCHEMES)
        np.testing.assert_array_equal(loose[0], np.abs(eri) >= 1e-2)
        for a, b in zip(loose, tight):
            assert np.all(b[a])  # what survives the loose threshold survives the tight one
        assert not loose[0].all() and not loose[1].all() and tight[1].all()
        # the shell-pair bound is the largest AO-pair bound of the shells: keeps a superset
        assert np.all(loose[2][loose[1]])

    def test_screened_fock_with_every_integral_is_the_plain_fock(self):
        rng = np.random.default_rng(42)
        eri = self.eri(rng)
        h, d = sym(rng, 4), sym(rng, 4)[None]
        j = np.einsum("ijkl,kl->ij", eri, d[0])
        k = np.einsum("ikjl,kl->ij", eri, d[0])
        np.testing.assert_allclose(dg.screened_fock(eri, np.ones(eri.shape, bool), h, d)[0],
                                   h + j - 0.5 * k, atol=1e-12)

    def test_no_screening_test_unless_stationary_on_its_own_fock(self):
        out = dg.screening_hint("rhf", None, np.zeros((1, 3, 3)), None, None,
                                _results(self_consistency=False, stationarity=False))
        assert out == (None, {}, None)
