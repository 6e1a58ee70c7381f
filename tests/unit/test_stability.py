"""Kernels of harness.verdict.states: ⟨S²⟩, the energy-error estimate, stability, known states.

Energies in hartree (Eh), orbital-rotation angles in radians, coordinates in bohr. The
pyscf solutions used as input come from conftest; every expected value here is computed
(exact constructions, finite differences of the energy), not copied.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from pyscf.scf import stability as pyscf_stability

from harness.contract.solution import extract
from harness.verdict import states as stab
from harness.catalogue.cases import load_catalogue
from harness.checks.energy import fock_from_terms
from harness.backend.integrals import integrals_for
from harness.catalogue.references import KnownState, load_reference
from harness.contract.results import Status


def _orthonormal(s: np.ndarray, rng) -> np.ndarray:
    """Random orbitals C with CᵀSC = 1 (S^(−1/2) times a random orthogonal matrix)."""
    w, u = np.linalg.eigh(s)
    x = (u / np.sqrt(w)) @ u.T
    q, _ = np.linalg.qr(rng.standard_normal(s.shape))
    return x @ q


@pytest.fixture(scope="module")
def metric():
    rng = np.random.default_rng(7)
    a = rng.standard_normal((6, 6))
    return a @ a.T + 6 * np.eye(6), rng


# --------------------------------------------------------------------------- ⟨S²⟩


def test_spin_squared_of_constructed_determinants(metric):
    s, rng = metric
    c = _orthonormal(s, rng)
    dens = lambda cols: c[:, cols] @ c[:, cols].T  # noqa: E731
    # doublet, beta orbitals a subset of alpha: exactly S(S+1) = 3/4
    assert stab.spin_squared(np.stack([dens([0, 1]), dens([0])]), s, 2, 1) == \
        pytest.approx(0.75, abs=1e-12)
    # triplet, high spin: exactly 2
    assert stab.spin_squared(np.stack([dens([0, 1, 2]), dens([0])]), s, 3, 1) == \
        pytest.approx(2.0, abs=1e-12)
    # two-electron singlet, beta orbital rotated by θ out of the alpha one: sin²θ
    for theta in (0.0, 0.3, np.pi / 2):
        b = np.cos(theta) * c[:, 0] + np.sin(theta) * c[:, 1]
        d = np.stack([dens([0]), np.outer(b, b)])
        assert stab.spin_squared(d, s, 1, 1) == pytest.approx(np.sin(theta) ** 2, abs=1e-12)


def test_spin_check_rohf_exact_and_uhf_against_reference(oh_rohf, oh_uhf):
    sol = oh_rohf.solution()
    r = stab.spin_check(oh_rohf.problem, extract(sol), oh_rohf.ints, None)
    assert r.status is Status.PASSED and r.value < 1e-12
    # the UHF spin densities reported with the ROHF orbitals: ⟨S²⟩ is no longer 3/4
    bad = dict(sol, density=np.asarray(oh_uhf.mf.make_rdm1()))
    r = stab.spin_check(oh_rohf.problem, extract(bad), oh_rohf.ints, None)
    s2_uhf = float(oh_uhf.mf.spin_square()[0])
    assert r.status is Status.FAILED and r.value == pytest.approx(s2_uhf - 0.75, abs=1e-9)
    assert r.message.startswith("spin-squared: |⟨S²⟩ − S(S+1)| = ")
    ref = type("Ref", (), {"s_squared": s2_uhf})()
    r = stab.spin_check(oh_uhf.problem, extract(oh_uhf.solution()), oh_uhf.ints, ref)
    assert r.status is Status.PASSED and r.value < 1e-9
    ref.s_squared = s2_uhf + 2 * stab.SPIN_SQUARED_UHF
    assert stab.spin_check(oh_uhf.problem, extract(oh_uhf.solution()), oh_uhf.ints,
                           ref).status is Status.FAILED


def test_spin_check_rhf_not_applicable(water_rhf):
    r = stab.spin_check(water_rhf.problem, extract(water_rhf.solution()), water_rhf.ints, None)
    assert r.status is Status.NOT_APPLICABLE


# --------------------------------------------------------------------------- error bound


def _rotated_rhf(conv, theta: float):
    """The converged RHF orbitals with HOMO and LUMO mixed by θ (rad); density, rebuilt F."""
    sol = conv.solution()
    c = sol["coefficients"].copy()
    homo = int(np.count_nonzero(sol["occupations"] > 0)) - 1
    h, l = c[:, homo].copy(), c[:, homo + 1].copy()
    c[:, homo], c[:, homo + 1] = np.cos(theta) * h + np.sin(theta) * l, \
        -np.sin(theta) * h + np.cos(theta) * l
    d = (c * sol["occupations"]) @ c.T
    vj, vk = conv.ints.jk(d[None])
    f = fock_from_terms(conv.ints.h, vj, vk, 1)
    energy = conv.ints.e_nuc + 0.5 * float(np.sum(d * (conv.ints.h + f[0])))
    return dict(sol, coefficients=c, density=d, energy=energy), d[None], f


def test_energy_error_bound_scales_as_gradient_squared(water_rhf):
    e0 = water_rhf.mf.e_tot
    values = {}
    for theta in (1e-3, 2e-3):
        sol, d, f = _rotated_rhf(water_rhf, theta)
        m = stab.energy_error_bound(water_rhf.problem, extract(sol), water_rhf.ints, d, f)
        values[theta] = m.value
        # the diagonal model is of the size of the true energy excess (same order)
        assert 0.2 < m.value / (sol["energy"] - e0) < 5.0
    assert values[2e-3] / values[1e-3] == pytest.approx(4.0, rel=0.02)
    sol, d, f = _rotated_rhf(water_rhf, 0.0)
    converged = stab.energy_error_bound(water_rhf.problem, extract(sol), water_rhf.ints, d, f)
    assert converged.value < 1e-14
    sol, d, f = _rotated_rhf(water_rhf, 2e-3)
    r = stab.energy_error_check(water_rhf.problem, extract(sol), water_rhf.ints, d, f)
    assert r.status is Status.FAILED and r.value > stab.ENERGY_ERROR_BOUND
    assert stab.orbital_gradient(water_rhf.problem, extract(sol),
            f) < stab.ERROR_BOUND_GRADIENT_LIMIT
    sol, d, f = _rotated_rhf(water_rhf, 1e-4)
    assert stab.energy_error_check(water_rhf.problem, extract(sol), water_rhf.ints, d,
                                   f).status is Status.PASSED
    sol, d, f = _rotated_rhf(water_rhf, 0.1)
    assert stab.energy_error_check(water_rhf.problem, extract(sol), water_rhf.ints, d,
                                   f).status is Status.NOT_APPLICABLE


@pytest.mark.parametrize("fixture", ["oh_uhf", "oh_rohf", "ch2_rohf"])
def test_energy_error_bound_open_shells(fixture, request):
    conv = request.getfixturevalue(fixture)
    sol = conv.solution()
    d = np.asarray(conv.mf.make_rdm1())
    vj, vk = conv.ints.jk(d)
    f = fock_from_terms(conv.ints.h, vj, vk, 2)
    assert stab.energy_error_bound(conv.problem, extract(sol), conv.ints, d, f).value < 1e-12
    # the first and last orbitals mixed by θ: the estimate grows as θ²
    c, occ = sol["coefficients"], sol["occupations"]
    vals = []
    for theta in (1e-3, 2e-3):
        q = np.eye(c.shape[-1])
        q[0, 0] = q[-1, -1] = np.cos(theta)
        q[0, -1], q[-1, 0] = np.sin(theta), -np.sin(theta)
        cc = c @ q
        if conv.problem.method == "uhf":
            dd = np.einsum("spi,si,sqi->spq", cc, occ, cc)
        else:
            dd = np.stack([(cc * (occ > 0.5)) @ cc.T, (cc * (occ > 1.5)) @ cc.T])
        vj, vk = conv.ints.jk(dd)
        moved = {k: v for k, v in sol.items() if k != "density"} | {"coefficients": cc}
        vals.append(stab.energy_error_bound(conv.problem, extract(moved), conv.ints, dd,
                                            fock_from_terms(conv.ints.h, vj, vk, 2)).value)
    assert vals[0] > 1e-10
    assert vals[1] / vals[0] == pytest.approx(4.0, rel=0.05)


# --------------------------------------------------------------------------- stability


def _curvature(mf, mode, step=1e-3):
    """d²E/dt² (Eh/rad²) along the unit mode, by central differences of pyscf's energy."""
    from pyscf import scf

    def energy(t):
        moved = dataclasses.replace(mode, vector=t * mode.vector)
        c = stab.rotated_orbitals(mf, moved)
        if mode.kind == "internal":
            return mf.energy_tot(mf.make_rdm1(c, mf.mo_occ))
        occ = np.stack([mf.mo_occ > 0, mf.mo_occ > 0]).astype(float)
        u = scf.UHF(mf.mol)
        return u.energy_tot(u.make_rdm1(c, occ))

    # external: (κ, −κ) has norm √2 per unit t; the reported λ is per unit norm
    scale = 1.0 if mode.kind == "internal" else 0.5
    return scale * (energy(step) + energy(-step) - 2 * energy(0.0)) / step ** 2


def test_true_minimum_is_stable_and_eigenvalue_is_the_curvature(water_rhf):
    sol = water_rhf.solution()
    r = stab.stability(water_rhf.problem, extract(sol), water_rhf.ints)
    assert r.stable and r.eigenvalue > 0.1 and r.followed_energy is None
    mf = stab.scf_object(water_rhf.problem, extract(sol), water_rhf.ints)
    mode = stab.internal_mode(mf)
    assert mode.eigenvalue == pytest.approx(_curvature(mf, mode), rel=1e-4)
    check = stab.stability_check(water_rhf.problem, extract(sol), water_rhf.ints, result=r)
    assert check.status is Status.PASSED
    assert check.message == (f"stability: lowest orbital Hessian eigenvalue "
                             f"{r.eigenvalue:.1e} ≥ −1.0e-05 (water-sto-3g-rhf): stable "
                             f"(internal)")


@pytest.fixture(scope="module")
def stretched():
    """h2-stretched-6-31g-uhf with the RHF-like UHF solution (α = β) from pyscf."""
    from pyscf import scf

    case = load_catalogue().case("h2-stretched-6-31g-uhf")
    problem = case.problem()
    ints = integrals_for(problem)
    mf = scf.UHF(ints.mol)
    mf.verbose, mf.conv_tol = 0, 1e-12
    mf.kernel()  # pyscf's default guess stays spin-restricted here
    sol = {"energy": float(mf.e_tot), "coefficients": np.asarray(mf.mo_coeff),
           "occupations": np.asarray(mf.mo_occ), "orbital_energies": np.asarray(mf.mo_energy)}
    return problem, ints, mf, sol, load_reference(case)


def test_restricted_uhf_of_stretched_h2_is_unstable_and_following_lowers(stretched):
    problem, ints, mf, sol, ref = stretched
    assert abs(float(mf.spin_square()[0])) < 1e-8
    r = stab.stability(problem, extract(sol), ints)
    assert not r.stable and r.kind == "internal"
    assert r.eigenvalue < -0.1
    assert r.followed_energy == pytest.approx(ref.energy, abs=1e-8)
    assert r.lowering == pytest.approx(sol["energy"] - ref.energy, abs=1e-8)
    assert r.lowering > 0.1 and r.followed_s2 > 0.5
    mode = stab.internal_mode(stab.scf_object(problem, extract(sol), ints))
    assert mode.eigenvalue == pytest.approx(_curvature(mf, mode), rel=1e-3)
    check = stab.stability_check(problem, extract(sol), ints, result=r)
    assert check.status is Status.FAILED
    assert check.message == (
        f"stability: lowest orbital Hessian eigenvalue −{abs(r.eigenvalue):.1e} < −1.0e-05 "
        f"(h2-stretched-6-31g-uhf): unstable; following lowers E by {r.lowering:.3e} Eh to "
        f"−{abs(r.followed_energy):.5f} Eh, ⟨S²⟩ {r.followed_s2:.2f}")


def test_external_mode_flags_the_rhf_saddle_only_in_that_mode():
    from pyscf import scf

    case = load_catalogue().case("h2-stretched-6-31g-rhf")
    problem = case.problem()
    ints = integrals_for(problem)
    mf = scf.RHF(ints.mol)
    mf.verbose, mf.conv_tol = 0, 1e-12
    mf.kernel()
    sol = {"energy": float(mf.e_tot), "coefficients": mf.mo_coeff, "occupations": mf.mo_occ}
    internal = stab.stability_check(problem, extract(sol), ints)
    assert internal.status is Status.PASSED
    r = stab.stability(problem, extract(sol), ints, mode="external")
    assert not r.stable and r.kind == "external RHF→UHF" and r.eigenvalue < -0.1
    uhf_ref = load_reference(load_catalogue().case("h2-stretched-6-31g-uhf"))
    assert r.followed_energy == pytest.approx(uhf_ref.energy, abs=1e-8)
    mode = stab.external_mode(stab.scf_object(problem, extract(sol), ints))
    assert mode.eigenvalue == pytest.approx(_curvature(mf, mode), rel=1e-3)
    check = stab.stability_check(problem, extract(sol), ints, mode="external", result=r)
    assert check.status is Status.FAILED and "unstable (external RHF→UHF)" in check.message
    assert stab.stability_check(problem, extract(sol), ints, mode="off").status is \
        Status.NOT_APPLICABLE


def test_far_from_stationary_is_not_applicable(water_rhf):
    sol, _, _ = _rotated_rhf(water_rhf, 0.2)
    r = stab.stability_check(water_rhf.problem, extract(sol), water_rhf.ints)
    assert r.status is Status.NOT_APPLICABLE and "not a stationary point" in r.message


def test_stability_does_not_flag_a_loosely_converged_minimum(water_rhf):
    """A small rotation (gradient ~1e-4) is not a saddle: λ stays positive."""
    sol, _, _ = _rotated_rhf(water_rhf, 1e-4)
    r = stab.stability(water_rhf.problem, extract(sol), water_rhf.ints)
    assert r.stable and r.eigenvalue > 0.1 and 1e-5 < r.gradient < 1e-3


def test_pyscf_rotation_helper_exists():
    """The private pyscf helpers this module relies on are still there."""
    assert callable(pyscf_stability._rotate_mo)
    assert callable(pyscf_stability._gen_hop_rhf_external)


# --------------------------------------------------------------------------- known states


def _reference_with(energies_s2):
    states = tuple(KnownState(energy=e, s_squared=s2, stable=(k == 0), eigenvalue=0.1,
                              label="", found_by="test")
                   for k, (e, s2) in enumerate(energies_s2))
    return type("Ref", (), {"energy": energies_s2[0][0], "known_states": states})()


def test_match_state_messages():
    ref = _reference_with([(-1.0, 0.75), (-0.95, 0.76), (-0.9157, 0.80)])
    assert stab.match_state(-1.0 + 5e-7, 0.75, ref, tolerance=1e-6) is None
    assert stab.match_state(-0.9157, 0.7612, ref, tolerance=1e-6) == (
        "your solution is the known state 2, a saddle point, 0.0843 Eh above the ground "
        "state (⟨S²⟩ 0.76 vs 0.80)")
    assert stab.match_state(-1.00023, 0.75, ref, tolerance=1e-6) == (
        "E is 2.3e-04 Eh below the reference: the reference missed a state, or the code is "
        "not variational")
    assert stab.match_state(-0.97, None, ref, tolerance=1e-6) == (
        "E is 3.0e-02 Eh above the reference and matches no known state (nearest: state 1, "
        "+2.0e-02 Eh from yours)")


def test_match_state_prefers_the_closer_spin():
    ref = _reference_with([(-1.0, 0.0), (-0.9, 1.0), (-0.9 + 2e-7, 0.0)])
    assert "known state 2" in stab.match_state(-0.9, 0.0, ref, tolerance=1e-6)
    assert "known state 1" in stab.match_state(-0.9, 0.98, ref, tolerance=1e-6)


def test_stored_known_states_start_with_the_reference():
    cat = load_catalogue()
    for name in ("h2-stretched-6-31g-uhf", "o2-cc-pvdz-rohf", "nh2-sto-3g-rohf"):
        ref = load_reference(cat.case(name))
        states = ref.known_states
        assert len(states) >= 2, name
        assert states[0].energy == pytest.approx(ref.energy, abs=1e-9) and states[0].stable
        energies = [st.energy for st in states[1:]]
        assert energies == sorted(energies)
        assert all(b - a > 1e-6 for a, b in zip([states[0].energy] + energies, energies))
