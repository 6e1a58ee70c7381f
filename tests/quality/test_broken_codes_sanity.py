"""Each planted bug in ``broken_codes`` really is there (and each correct variant is correct).

These tests do not run the harness checks (that is the job of the quality tests proper):
they measure, on tiny cases, the property each variant was built to have. Energies in Eh,
coordinates in bohr.
"""

from __future__ import annotations

import numpy as np
import pytest
from pyscf import scf

import broken_codes as bc
from harness.testing.example_scf import LabSCF, lowdin_powers, solve
from harness.contract.problem import Problem
from harness.checks.tolerances import IDEMPOTENCY
from harness.contract.units import HARTREE_IN_EV

# Water geometry (bohr): Crawford group "Programming Projects", Project #3, water/STO-3G.
WATER = dict(numbers=[8, 1, 1], coordinates=[(0.0, -0.143225816552, 0.0),
                                             (1.638036840407, 1.136548822547, 0.0),
                                             (-1.638036840407, 1.136548822547, 0.0)])
# OH at r = 0.970 Å = 1.8330 bohr (experimental-type value, from memory).
OH = dict(numbers=[8, 1], coordinates=[(0.0, 0.0, 0.0), (0.0, 0.0, 1.8330)], multiplicity=2)
# Methane, published geometry (bohr): same project, methane/STO-3G input.
H = 1.183771681898
METHANE = dict(numbers=[6, 1, 1, 1, 1], coordinates=[(0, 0, 0), (H, H, H), (-H, -H, H),
                                                     (-H, H, -H), (H, -H, -H)])

PROBLEMS = {
    "water-sto-3g-rhf": Problem.create(name="water-sto-3g-rhf", basis="sto-3g", **WATER),
    "oh-sto-3g-uhf": Problem.create(name="oh-sto-3g-uhf", basis="sto-3g", method="uhf", **OH),
    "oh-sto-3g-rohf": Problem.create(name="oh-sto-3g-rohf", basis="sto-3g", method="rohf", **OH),
}
TINY = list(PROBLEMS)


@pytest.fixture(scope="module")
def correct():
    return {name: solve(p) for name, p in PROBLEMS.items()}


def _stack(x, ndim):
    x = np.asarray(x)
    return x if x.ndim == ndim else x[None]


def _pyscf_fock_energy(problem, d):
    """F(P) and E[P] from pyscf's J/K (independent of the example code)."""
    mol = problem.to_pyscf()
    h = mol.intor("int1e_kin") + mol.intor("int1e_nuc")
    vj, vk = scf.hf.get_jk(mol, d)
    if problem.method == "rhf":
        f = h + vj - 0.5 * vk
        return f, float(0.5 * np.sum(d * (h + f)) + mol.energy_nuc())
    f = h + vj[0] + vj[1] - vk
    return f, float(0.5 * sum(np.sum(ds * (h + fs)) for ds, fs in zip(d, f)) + mol.energy_nuc())


def _roothaan_hall(r):
    _, x, _ = lowdin_powers(r["overlap"])
    root = np.linalg.inv(x)
    return max(np.abs(x @ f @ c - root @ c * e).max() for f, c, e in zip(
        _stack(r["fock"], 3), _stack(r["coefficients"], 3), _stack(r["orbital_energies"], 2)))


# ---------------------------------------------------------------------------------------
# planted bugs
# ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("name", TINY)
def test_wrong_exchange_factor(name):
    p = PROBLEMS[name]
    r = bc.wrong_exchange_factor(p)
    # converged on its own (wrong) Fock ...
    assert r["converged"] and bc.stationarity_of(p, r) > 10 * p.convergence
    own = LabSCF(p).stationarity(r["fock"], r["density"], r["coefficients"], r["occupations"])
    assert own <= p.convergence
    # ... but the Fock and energy rebuilt independently from its density disagree
    f, e = _pyscf_fock_energy(p, r["density"])
    rebuilt = LabSCF(p).stationarity(f, r["density"], r["coefficients"], r["occupations"])
    assert rebuilt > 100 * p.convergence
    assert abs(r["energy"] - e) > 1.0


@pytest.mark.parametrize("name", TINY)
def test_missing_nuclear_repulsion(name, correct):
    p = PROBLEMS[name]
    r = bc.missing_nuclear_repulsion(p)
    e_nuc = p.to_pyscf().energy_nuc()
    assert abs((correct[name]["energy"] - r["energy"]) - e_nuc) <= 1e-9
    assert e_nuc > 1.0


@pytest.mark.parametrize("name", TINY)
def test_eigensolve_ignores_overlap(name):
    p = PROBLEMS[name]
    r = bc.eigensolve_ignores_overlap(p)
    for c in _stack(r["coefficients"], 3):
        assert np.abs(c.T @ c - np.eye(c.shape[1])).max() <= 1e-12  # orthonormal as if S = 1
        assert np.abs(c.T @ r["overlap"] @ c - np.eye(c.shape[1])).max() > 1e-2
    count = sum(np.trace(d @ r["overlap"]) for d in _stack(r["density"], 3))
    assert abs(count - p.n_electrons) > 1e-2


@pytest.mark.parametrize("name", TINY)
def test_one_electron_too_many(name):
    p = PROBLEMS[name]
    r = bc.one_electron_too_many(p)
    assert r["occupations"].sum() == p.n_electrons + 1
    count = sum(np.trace(d @ r["overlap"]) for d in _stack(r["density"], 3))
    assert abs(count - (p.n_electrons + 1)) <= 1e-10


@pytest.mark.parametrize("name", TINY)
def test_two_iterations_claims_converged(name):
    p = PROBLEMS[name]
    r = bc.two_iterations_claims_converged(p)
    assert r["converged"] is True and r["iterations"] == 2
    assert bc.stationarity_of(p, r) > 10 * p.convergence


@pytest.mark.parametrize("name", TINY)
def test_excited_determinant(name, correct):
    p = PROBLEMS[name]
    r = bc.excited_determinant(p)
    assert r["converged"] and bc.stationarity_of(p, r) <= p.convergence  # stationary ...
    assert r["energy"] > correct[name]["energy"] + 0.1  # ... but far above the ground state
    assert np.abs(r["density"] - correct[name]["density"]).max() > 0.1  # another determinant


def test_excited_determinant_violates_aufbau_for_water():
    # The RHF water excited state has an occupied orbital above an empty one; the OH UHF
    # one happens to satisfy aufbau, there only the reference energy tells.
    r = bc.excited_determinant(PROBLEMS["water-sto-3g-rhf"])
    e, n = r["orbital_energies"], r["occupations"]
    assert e[n > 0].max() - e[n == 0].min() > 0.05


@pytest.mark.parametrize("name", TINY)
def test_damping_left_in_final_density(name):
    p = PROBLEMS[name]
    r = bc.damping_left_in_final_density(p)
    s = r["overlap"]
    d = _stack(r["density"], 3)
    weight = 2.0 if p.method == "rhf" else 1.0  # P S P = 2P for a closed-shell total density
    # measured: 2e-7 to 5e-7, against the harness's idempotency tolerance of 1e-8
    assert max(np.abs(ds @ s @ ds - weight * ds).max() for ds in d) > 10 * IDEMPOTENCY
    c, occ = r["coefficients"], r["occupations"]
    if p.method == "rohf":
        from_c = np.stack([(c * (occ >= 1)) @ c.T, (c * (occ >= 2)) @ c.T])
    else:
        from_c = np.stack([(cs * ns) @ cs.T for cs, ns in zip(_stack(c, 3), _stack(occ, 2))])
    # measured: 1.8e-5 (ROHF) to 2e-4, against 10 × convergence = 1e-5
    assert np.abs(from_c - d).max() > 10 * p.convergence


@pytest.mark.parametrize("name", ["water-sto-3g-rhf", "oh-sto-3g-uhf"])
def test_energies_in_ev(name, correct):
    r = bc.energies_in_ev(PROBLEMS[name])
    ratio = np.asarray(r["orbital_energies"]) / np.asarray(correct[name]["orbital_energies"])
    assert np.abs(ratio - HARTREE_IN_EV).max() <= 1e-6
    assert _roothaan_hall(r) > 1.0


@pytest.mark.parametrize("name", TINY)
def test_stopped_hundred_times_looser(name):
    p = PROBLEMS[name]
    r = bc.stopped_hundred_times_looser(p)
    measure = bc.stationarity_of(p, r)
    assert r["converged"] and 20 * p.convergence < measure <= 100 * p.convergence


# ---------------------------------------------------------------------------------------
# correct variants
# ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("name", ["water-sto-3g-rhf", "oh-sto-3g-uhf"])
def test_random_mo_phases(name, correct):
    r = bc.random_mo_phases(PROBLEMS[name])
    c0, c = _stack(correct[name]["coefficients"], 3), _stack(r["coefficients"], 3)
    signs = np.sign(np.einsum("smi,smi->si", c0, c))
    assert np.abs(c - c0 * signs[:, None, :]).max() <= 1e-14
    assert np.any(signs < 0) and np.any(signs > 0)
    for cs, ns, ds in zip(c, _stack(r["occupations"], 2), _stack(r["density"], 3)):
        assert np.abs((cs * ns) @ cs.T - ds).max() <= 1e-12


def test_rotated_degenerate_orbitals():
    p = Problem.create(name="methane-sto-3g-rhf", basis="sto-3g", **METHANE)
    r0, r = solve(p), bc.rotated_degenerate_orbitals(p)
    sets = bc.degenerate_sets(r0["orbital_energies"], r0["occupations"])
    assert sorted(len(s) for s in sets) == [3, 3]  # t₂ occupied and t₂ virtual
    assert {float(r0["occupations"][s[0]]) for s in sets} == {0.0, 2.0}
    moved = np.abs(r["coefficients"] - r0["coefficients"]).max(axis=0)
    rotated = np.concatenate(sets)
    assert moved[rotated].min() > 0.1 and np.delete(moved, rotated).max() == 0.0
    c, occ = r["coefficients"], r["occupations"]
    assert np.abs((c * occ) @ c.T - r0["density"]).max() <= 1e-12
    assert np.abs(c.T @ r["overlap"] @ c - np.eye(c.shape[1])).max() <= 1e-12
    assert _roothaan_hall(r) <= 10 * p.convergence


def test_required_keys_only(correct):
    r = bc.required_keys_only(PROBLEMS["water-sto-3g-rhf"])
    assert set(r) == {"energy", "coefficients", "occupations"}
    assert r["energy"] == correct["water-sto-3g-rhf"]["energy"]


@pytest.mark.parametrize("name", TINY)
def test_exactly_at_convergence(name, correct):
    p = PROBLEMS[name]
    r = bc.exactly_at_convergence(p)
    measure = bc.stationarity_of(p, r)
    assert r["converged"] and 0.3 * p.convergence < measure <= p.convergence
    # consistent: F = F(P), E = E[P] by independent J/K, and still the ground state
    f, e = _pyscf_fock_energy(p, r["density"])
    assert np.abs(f - r["fock"]).max() <= 1e-10 and abs(e - r["energy"]) <= 1e-10
    assert abs(r["energy"] - correct[name]["energy"]) <= 1e-8
    if p.method != "rohf":
        assert _roothaan_hall(r) <= 10 * p.convergence
