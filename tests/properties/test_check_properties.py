"""Hypothesis properties of the check kernels on random model matrices.

Random SPD overlaps (n = 2..12, eigenvalues in [1e-3, 10]), S-orthonormal orbitals
C = S^(-1/2) Q, model Fock matrices F = S C diag(ε) Cᵀ S whose exact Roothaan–Hall
solutions are (C, ε), and random positive 'ERI' supermatrices. Each property states
what a kernel must measure for any such input. Atomic units (Eh).
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from _matrices import (Orbitals, occupation_masks, orbitals, orthogonal, overlaps, phases,
                       two_electron)
from harness.checks import (aufbau, commutator, density_consistency, electron_count,
                            energy_terms, idempotency, lowdin, orthonormality, roothaan_hall)
from harness.checks.energy import fock_from_terms

SETTINGS = settings(max_examples=50, deadline=None)

#: Rounding bounds for exact constructions, measured worst cases (3000 adversarial draws:
#: n = 12, eigenvalues all at 1e-3 or 10) in brackets. cond(S) ≤ 1e4 makes |C| ≤ ~30
#: elementwise and |P| ≤ ~2e3, so P S P carries the largest rounding.
ORTHO_EXACT = 1e-10  # [1.1e-12]
COUNT_EXACT = 1e-10  # [9.8e-12]
DENSITY_EXACT = 1e-8  # [8.5e-10]; the shipped IDEMPOTENCY tolerance
#: The commutator and Roothaan–Hall residual also scale with |ε| ≤ 15 Eh.
FOCK_EXACT = 1e-8  # [4.9e-10 commutator, 1.2e-10 Roothaan–Hall]


def rotate_within(c: np.ndarray, lo: int, hi: int, rng) -> np.ndarray:
    """Apply a random orthogonal rotation to columns lo:hi of c."""
    c = c.copy()
    if hi - lo > 0:
        c[:, lo:hi] = c[:, lo:hi] @ orthogonal(hi - lo, rng)
    return c


def occ_virt_rotated(orb: Orbitals, theta: float) -> np.ndarray:
    """The HOMO rotated into the LUMO by θ: a density that is *not* stationary."""
    c = orb.c.copy()
    i, a = orb.nocc - 1, orb.nocc
    ci, ca = c[:, i].copy(), c[:, a].copy()
    c[:, i] = np.cos(theta) * ci + np.sin(theta) * ca
    c[:, a] = -np.sin(theta) * ci + np.cos(theta) * ca
    return c


# --------------------------------------------------------------------------- orthonormality


@SETTINGS
@given(orbitals())
def test_orthonormal_orbitals_measure_zero(orb):
    """max|CᵀSC − 1| of C = S^(-1/2) Q is at rounding level."""
    assert orthonormality(orb.c[None], orb.s).value <= ORTHO_EXACT


@SETTINGS
@given(orbitals(), st.data())
def test_scaled_column_measures_its_norm_error(orb, data):
    """Scaling MO k by (1+δ) gives |(1+δ)² − 1| to 1e-9 relative, at MO pair (k, k)."""
    k = data.draw(st.integers(min_value=0, max_value=orb.n - 1))
    delta = data.draw(st.floats(min_value=1e-3, max_value=0.5))
    delta *= data.draw(st.sampled_from([-1, 1]))
    c = orb.c.copy()
    c[:, k] *= 1 + delta
    m = orthonormality(c[None], orb.s)
    expected = abs((1 + delta) ** 2 - 1)
    assert abs(m.value - expected) <= 1e-9 * expected
    assert m.where == f"MO pair ({k}, {k})"


# --------------------------------------------------------------------------- densities


@SETTINGS
@given(orbitals(), st.data())
def test_densities_from_orthonormal_orbitals(orb, data):
    """Any 0/1 (UHF) or 0/2 (RHF) occupation of orthonormal orbitals gives an idempotent
    density with exactly the occupied number of electrons."""
    n = orb.n
    na = data.draw(st.integers(min_value=0, max_value=n))
    nb = data.draw(st.integers(min_value=0, max_value=na))
    ma = data.draw(occupation_masks(n, na))
    mb = data.draw(occupation_masks(n, nb))
    c = orb.c
    d = np.stack([c[:, ma] @ c[:, ma].T, c[:, mb] @ c[:, mb].T])
    assert idempotency(d, orb.s).value <= DENSITY_EXACT
    assert electron_count(d, orb.s, (na, nb)).value <= COUNT_EXACT
    p = 2.0 * d[:1]
    assert idempotency(p, orb.s, scale=2.0).value <= DENSITY_EXACT
    assert electron_count(p, orb.s, (2 * na,)).value <= COUNT_EXACT
    # ... and the wrong count is off by exactly the difference.
    assert abs(electron_count(d, orb.s, (na + 1, nb)).value - 1.0) <= COUNT_EXACT


@SETTINGS
@given(orbitals(), st.floats(min_value=0.05, max_value=0.95))
def test_fractional_occupation_is_not_idempotent(orb, f):
    """Occupation f in the HOMO gives idempotency |f² − f|·max|c c ᵀ| exactly."""
    c = orb.c
    occ = np.zeros(orb.n)
    occ[: orb.nocc] = 1.0
    occ[orb.nocc - 1] = f
    d = ((c * occ) @ c.T)[None]
    ck = c[:, orb.nocc - 1]
    expected = (f - f * f) * np.max(np.abs(np.outer(ck, ck)))
    assert abs(idempotency(d, orb.s).value - expected) <= DENSITY_EXACT + 1e-9 * expected


# --------------------------------------------------------------------------- stationarity, aufbau


@SETTINGS
@given(orbitals())
def test_model_fock_is_stationary_and_aufbau(orb):
    """F = S C diag(ε) Cᵀ S commutes with the aufbau density, (C, ε) solves Roothaan–Hall,
    and aufbau holds with value −(ε_LUMO − ε_HOMO) when ε is sorted."""
    f = orb.fock()[None]
    low = lowdin(orb.s)
    assert low.n_dropped == 0
    assert commutator(f, orb.rhf_density(), orb.s, low).value <= FOCK_EXACT
    assert roothaan_hall(f, orb.c[None], orb.e[None], low).value <= FOCK_EXACT
    occ = np.zeros((1, orb.n))
    occ[0, : orb.nocc] = 2.0
    m = aufbau(orb.e[None], occ)
    assert m.value == orb.e[orb.nocc - 1] - orb.e[orb.nocc]
    assert m.value < 0


@SETTINGS
@given(orbitals(), st.data())
def test_aufbau_fails_exactly_when_not_the_lowest(orb, data):
    """With distinct sorted ε, aufbau is violated iff the occupied set is not the lowest
    nocc orbitals, and the value is max ε_occ − min ε_empty."""
    mask = data.draw(occupation_masks(orb.n, orb.nocc))
    m = aufbau(orb.e[None], (2.0 * mask)[None])
    assert m.value == orb.e[mask].max() - orb.e[~mask].min()
    lowest = bool(np.all(mask[: orb.nocc]))
    assert (m.value <= 0) == lowest


@SETTINGS
@given(orbitals(), st.floats(min_value=1e-4, max_value=0.3))
def test_occupied_virtual_rotation_is_seen(orb, theta):
    """HOMO→LUMO rotation by θ: commutator |sin 2θ|(ε_L − ε_H)·max|q_H q_Lᵀ − q_L q_Hᵀ|."""
    f = orb.fock()[None]
    d = orb.rhf_density(occ_virt_rotated(orb, theta))
    i, a = orb.nocc - 1, orb.nocc
    g = np.outer(orb.q[:, i], orb.q[:, a]) - np.outer(orb.q[:, a], orb.q[:, i])
    expected = np.sin(2 * theta) * (orb.e[a] - orb.e[i]) * np.abs(g).max()
    m = commutator(f, d, orb.s, lowdin(orb.s))
    assert abs(m.value - expected) <= FOCK_EXACT + 1e-7 * expected


# --------------------------------------------------------------------------- invariances


@SETTINGS
@given(orbitals(), st.data())
def test_measures_are_invariant_under_phase_flips(orb, data):
    """Flipping MO signs changes no measure: orthonormality of a mis-normalised set,
    Roothaan–Hall residual with a wrong ε, density, commutator."""
    signs = data.draw(phases(orb.n))
    k = data.draw(st.integers(min_value=0, max_value=orb.n - 1))
    c = orb.c.copy()
    c[:, k] *= 1.01
    flipped = c * signs
    s, low, f = orb.s, lowdin(orb.s), orb.fock()[None]
    a, b = orthonormality(c[None], s), orthonormality(flipped[None], s)
    assert a.value == b.value and a.where == b.where
    wrong = orb.e.copy()
    wrong[k] += 0.1
    r1 = roothaan_hall(f, orb.c[None], wrong[None], low)
    r2 = roothaan_hall(f, (orb.c * signs)[None], wrong[None], low)
    assert abs(r1.value - r2.value) <= 1e-12 * max(1.0, r1.value)
    assert r1.where == r2.where
    d1, d2 = orb.rhf_density(), orb.rhf_density(orb.c * signs)
    assert density_consistency(d2, d1).value <= DENSITY_EXACT
    theta_c = occ_virt_rotated(orb, 0.05)
    m1 = commutator(f, orb.rhf_density(theta_c), s, low)
    m2 = commutator(f, orb.rhf_density(theta_c * signs), s, low)
    assert abs(m1.value - m2.value) <= 1e-10 * max(1.0, m1.value)


@SETTINGS
@given(orbitals(), st.integers(min_value=0, max_value=2 ** 32 - 1))
def test_measures_are_invariant_under_occupied_and_virtual_rotations(orb, seed):
    """Rotating within the occupied and within the virtual space leaves the density, the
    commutator (of a non-stationary density), idempotency and the count unchanged."""
    rng = np.random.default_rng(seed)
    s, low, f = orb.s, lowdin(orb.s), orb.fock()[None]
    c = occ_virt_rotated(orb, 0.05)
    c2 = rotate_within(rotate_within(c, 0, orb.nocc, rng), orb.nocc, orb.n, rng)
    d1, d2 = orb.rhf_density(c), orb.rhf_density(c2)
    assert density_consistency(d2, d1).value <= DENSITY_EXACT
    m1, m2 = commutator(f, d1, s, low), commutator(f, d2, s, low)
    assert m1.value > 0
    assert abs(m1.value - m2.value) <= FOCK_EXACT
    assert idempotency(d2, s, scale=2.0).value <= DENSITY_EXACT
    assert electron_count(d2, s, (2 * orb.nocc,)).value <= COUNT_EXACT
    assert orthonormality(c2[None], s).value <= ORTHO_EXACT


# --------------------------------------------------------------------------- energy terms


@SETTINGS
@given(overlaps(max_nao=8), st.data())
def test_energy_terms_scale_linearly_and_quadratically(ov, data):
    """E1 is linear in P, J and K linear, hence E_J and E_K quadratic; E_J ≥ 0 ≥ E_K for a
    positive density and a positive ERI supermatrix."""
    n = ov.n
    g = data.draw(two_electron(n))
    rng = np.random.default_rng(data.draw(st.integers(min_value=0, max_value=2 ** 32 - 1)))
    a = rng.normal(size=(n, n))
    p = (a @ a.T)[None]  # positive semidefinite
    h = rng.normal(size=(n, n))
    h = 0.5 * (h + h.T)
    vj, vk = g.jk(p)
    vj2, vk2 = g.jk(2 * p)
    assert np.allclose(vj2, 2 * vj, rtol=1e-12, atol=1e-12)
    assert np.allclose(vk2, 2 * vk, rtol=1e-12, atol=1e-12)
    t1 = energy_terms(p, h, vj, vk, 0.25)
    t2 = energy_terms(2 * p, h, vj2, vk2, 0.25)
    scale = 1.0 + abs(t1.one_electron) + abs(t1.coulomb) + abs(t1.exchange)
    assert abs(t2.one_electron - 2 * t1.one_electron) <= 1e-12 * scale
    assert abs(t2.coulomb - 4 * t1.coulomb) <= 1e-12 * 4 * scale
    assert abs(t2.exchange - 4 * t1.exchange) <= 1e-12 * 4 * scale
    assert t1.nuclear == t2.nuclear == 0.25
    assert t1.coulomb >= -1e-12 * scale and t1.exchange <= 1e-12 * scale


@SETTINGS
@given(overlaps(max_nao=6), st.data())
def test_energy_terms_match_explicit_integrals(ov, data):
    """E_J = ½ Σ (pq|rs) P_pq P_rs and E_K = −¼ Σ (pr|qs) P_pq P_rs (RHF) and the UHF
    form with Pα = Pβ = P/2 agrees; the helper's J, K match the explicit supermatrix."""
    n = ov.n
    g = data.draw(two_electron(n))
    rng = np.random.default_rng(data.draw(st.integers(min_value=0, max_value=2 ** 32 - 1)))
    a = rng.normal(size=(n, n))
    p = a @ a.T
    eri = g.eri()
    vj, vk = g.jk(p[None])
    assert np.allclose(vj, np.einsum("pqrs,rs->pq", eri, p), atol=1e-10)
    assert np.allclose(vk[0], np.einsum("prqs,rs->pq", eri, p), atol=1e-10)
    h = np.zeros((n, n))
    t = energy_terms(p[None], h, vj, vk, 0.0)
    ej = 0.5 * np.einsum("pqrs,pq,rs->", eri, p, p)
    ek = -0.25 * np.einsum("prqs,pq,rs->", eri, p, p)
    tol = 1e-10 * (1.0 + abs(ej) + abs(ek))
    assert abs(t.coulomb - ej) <= tol and abs(t.exchange - ek) <= tol
    d2 = np.stack([p / 2, p / 2])
    t2 = energy_terms(d2, h, *g.jk(d2), 0.0)
    assert abs(t2.total - t.total) <= tol


@SETTINGS
@given(overlaps(max_nao=6), st.data())
def test_fock_is_the_gradient_of_the_energy(ov, data):
    """Tr(F Δ) = dE/dt at t = 0 for E(P + tΔ): E is quadratic, so the central difference
    is exact up to rounding (RHF and UHF)."""
    n = ov.n
    g = data.draw(two_electron(n))
    rng = np.random.default_rng(data.draw(st.integers(min_value=0, max_value=2 ** 32 - 1)))

    def sym(m):
        return 0.5 * (m + np.swapaxes(m, -1, -2))

    h = sym(rng.normal(size=(n, n)))
    for nspin in (1, 2):
        d = sym(rng.normal(size=(nspin, n, n)))
        delta = sym(rng.normal(size=(nspin, n, n)))

        def energy(x):
            return energy_terms(x, h, *g.jk(x), 0.0).total

        f = fock_from_terms(h, *g.jk(d), nspin)
        step = 1e-3
        slope = (energy(d + step * delta) - energy(d - step * delta)) / (2 * step)
        assert abs(slope - float(np.sum(f * delta))) <= 1e-7 * (1.0 + abs(slope))
