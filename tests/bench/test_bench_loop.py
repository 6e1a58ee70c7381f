"""The harness-owned SCF loop, the baselines and the accelerator protocol.

Energies in Eh. The loop's answers are compared with the stored pyscf references (which
come from pyscf's own SCF driver, not from this loop).
"""

from __future__ import annotations

import time

import numpy as np
import pytest

from harness.bench import accelerators as acc
from harness.checks.orthonormal import lowdin
from harness.checks.stationarity import commutator
from harness.contract.errors import PluginLoadError
from harness.bench.example_accelerator import CommutatorDIIS, diis_coefficients
from harness.catalogue.references import reference_for

SMOKE = ("water-sto-3g-rhf", "oh-sto-3g-uhf", "nh2-sto-3g-rohf")


@pytest.mark.parametrize("name", SMOKE)
@pytest.mark.parametrize("method", ["example", "roothaan", "pyscf-cdiis"])
def test_loop_reaches_reference_energy(setup, name, method):
    """RHF/UHF/ROHF through the loop converge to the stored pyscf energy (1e-8 Eh)."""
    case, problem, ham, start = setup(name)
    make = CommutatorDIIS if method == "example" else acc.LOOP_BASELINES[method]
    run = acc.run_scf(ham, make(), start, convergence=problem.convergence, problem=problem)
    ref, _ = reference_for(case)
    assert run.converged, run.reason
    assert run.measure <= problem.convergence
    assert abs(run.energy - ref.energy) < 1e-8
    assert run.history.shape == (run.fock_builds, 3)
    assert run.history[-1, 2] == run.measure
    assert np.all(np.diff(run.history[:, 0]) == 1)


def test_measure_is_the_checks_commutator(setup):
    """The loop's measure (RHF) is harness.checks.stationarity.commutator of F(P), P."""
    _, problem, ham, start = setup("water-sto-3g-rhf")
    d = acc.spin_densities(ham, start)
    f = acc.fock_matrices(ham, d)
    low = lowdin(ham.s)
    assert acc.convergence_measure(ham, f, d, low) == commutator(f, d, ham.s, low).value
    e = acc.error_matrices(f, d, ham.s, low.x)
    assert np.abs(e).max() == pytest.approx(acc.convergence_measure(ham, f, d, low), rel=1e-12)


def test_rohf_working_pair_vanishes_only_at_convergence(setup):
    """ROHF: the effective Fock commutes with Pα+Pβ at the converged state, not at the guess."""
    _, problem, ham, start = setup("nh2-sto-3g-rohf")
    low = lowdin(ham.s)

    def error(orb):
        d = acc.spin_densities(ham, orb)
        fw, dw = acc.working_pair(ham, acc.fock_matrices(ham, d), d, orb)
        return np.abs(acc.error_matrices(fw, dw, ham.s, low.x)).max()

    run = acc.run_scf(ham, CommutatorDIIS(), start, convergence=1e-9, problem=problem)
    assert error(start) > 1e-2
    assert error(run.orbitals) < 1e-8


def test_budget_and_status(setup):
    """A budget too small stops the run as 'not converged' after exactly that many builds."""
    _, problem, ham, start = setup("water-sto-3g-rhf")
    run = acc.run_scf(ham, acc.Roothaan(), start, convergence=problem.convergence,
                      max_fock_builds=3)
    assert run.status == "not converged"
    assert run.fock_builds == 3 and run.history.shape == (3, 3)
    assert "after 3 Fock builds" in run.reason


class _Bad:
    returns = "fock"

    def __init__(self, what):
        self.what = what

    def reset(self, problem):
        if self.what == "reset":
            raise RuntimeError("cannot start")

    def step(self, it):
        f = np.array(it.fock)
        if self.what == "raise":
            raise ZeroDivisionError("oops")
        if self.what == "nan":
            f[0, 0, 0] = np.nan
        if self.what == "shape":
            return f[0, :-1, :-1]
        if self.what == "asym":
            f[0, 0, 1] += 1e-3
        if self.what == "text":
            return "F"
        return f


@pytest.mark.parametrize("what, words", [
    ("reset", "reset raised RuntimeError: cannot start"),
    ("raise", "step raised ZeroDivisionError: oops at Fock build 1"),
    ("nan", "returned a fock with NaN or inf at Fock build 1"),
    ("shape", "returned a fock of shape (6, 6), expected (1, 7, 7)"),
    ("asym", "returned a non-symmetric fock (max|A − Aᵀ| = 1.0e-03)"),
    ("text", "returned str, not a numeric fock array at Fock build 1"),
])
def test_misbehaving_accelerator_fails_the_run(setup, what, words):
    """Exceptions, NaN, wrong shapes and asymmetric matrices fail the run with a reason."""
    _, problem, ham, start = setup("water-sto-3g-rhf")
    run = acc.run_scf(ham, _Bad(what), start, convergence=problem.convergence, problem=problem)
    assert run.status == "failed"
    assert words in run.reason


class _Hangs:
    """Returns the Fock unchanged, except that its second step never ends."""

    returns = "fock"

    def reset(self, problem):
        self.calls = 0

    def step(self, it):
        self.calls += 1
        while self.calls == 2:
            time.sleep(0.01)
        return it.fock


def test_a_hanging_step_fails_the_run_at_the_call_limit(setup):
    """time_limited: a step over its limit fails the run with the reason, promptly."""
    _, problem, ham, start = setup("water-sto-3g-rhf")
    started = time.monotonic()
    run = acc.run_scf(ham, acc.time_limited(_Hangs, 0.2)(), start,
                      convergence=problem.convergence, problem=problem)
    assert run.status == "failed"
    assert run.reason == ("step raised AcceleratorTimeout: step took longer than 0.2 s at "
                          "Fock build 2")
    assert time.monotonic() - started < 30  # the step never returns by itself


def test_time_limit_keeps_a_working_accelerator_and_its_attributes(setup):
    """Within its limit the wrapped accelerator runs as it is (same sequence), keeps its
    declared kind and other attributes, and no alarm is left behind."""
    import signal

    from harness.bench.example_accelerator import CommutatorDIIS

    _, problem, ham, start = setup("water-sto-3g-rhf")
    plain = acc.run_scf(ham, CommutatorDIIS(), start, convergence=problem.convergence)
    wrapped = acc.time_limited(CommutatorDIIS, 5.0)()
    assert wrapped.returns == "fock" and wrapped.size == CommutatorDIIS().size
    run = acc.run_scf(ham, wrapped, start, convergence=problem.convergence)
    assert np.array_equal(run.history, plain.history)
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)
    assert acc.time_limited(CommutatorDIIS, None) is CommutatorDIIS


def test_declared_return_kind_is_checked(setup):
    _, problem, ham, start = setup("water-sto-3g-rhf")
    bad = _Bad("none")
    bad.returns = "orbitals"
    run = acc.run_scf(ham, bad, start, convergence=problem.convergence)
    assert run.status == "failed" and "returns='orbitals'" in run.reason


class _AufbauDensity:
    """A density accelerator equivalent to plain Roothaan: aufbau density of F."""

    returns = "density"

    def reset(self, problem):
        self.ham = None

    def step(self, it):
        out = []
        xc = acc.canonical_orthogonaliser(np.asarray(it.overlap))
        n = it.fock.shape[0]
        for k in range(n):
            e, cp = np.linalg.eigh(xc.T @ it.fock[k] @ xc)
            c = xc @ cp
            nocc = 5 if n == 1 else (5, 4)[k]  # water: 5 doubly; OH: 5 alpha, 4 beta
            occ = 2.0 if n == 1 else 1.0
            out.append(occ * c[:, :nocc] @ c[:, :nocc].T)
        return np.array(out)


@pytest.mark.parametrize("name", ["water-sto-3g-rhf", "oh-sto-3g-uhf"])
def test_density_accelerator_is_projected_exactly(setup, name):
    """Returning the aufbau density of F gives exactly the Roothaan sequence."""
    _, problem, ham, start = setup(name)
    a = acc.run_scf(ham, _AufbauDensity(), start, convergence=problem.convergence)
    b = acc.run_scf(ham, acc.Roothaan(), start, convergence=problem.convergence)
    assert a.fock_builds == b.fock_builds
    assert np.allclose(a.history[:, 1:], b.history[:, 1:], rtol=0, atol=1e-9)


def test_density_projection_is_nearest_idempotent(setup):
    """A mixed (non-idempotent) density is replaced by its dominant natural orbitals."""
    _, problem, ham, start = setup("water-sto-3g-rhf")
    xc = acc.canonical_orthogonaliser(ham.s)
    run = acc.run_scf(ham, CommutatorDIIS(), start, convergence=1e-9)
    p1 = acc.spin_densities(ham, run.orbitals)
    p0 = acc.spin_densities(ham, start)
    mixed = 0.9 * p1 + 0.1 * p0
    orb = acc.orbitals_from_density(ham, mixed, xc)
    p = acc.spin_densities(ham, orb)[0]
    assert np.abs(p @ ham.s @ p - 2 * p).max() < 1e-10  # idempotent (RHF: P S P = 2P)
    assert np.abs(p - p1[0]).max() < 0.1 * np.abs(p1 - p0).max()


def test_damping_and_roothaan_differ_but_agree_on_the_answer(setup):
    """Damping takes more builds than Roothaan on water and lands on the same energy."""
    _, problem, ham, start = setup("water-sto-3g-rhf")
    r = acc.run_scf(ham, acc.Roothaan(), start, convergence=problem.convergence)
    d = acc.run_scf(ham, acc.Damping(), start, convergence=problem.convergence)
    assert d.converged and r.converged
    assert d.fock_builds > r.fock_builds
    assert abs(d.energy - r.energy) < 1e-8


@pytest.mark.parametrize("name", SMOKE)
def test_newton_counts_fock_builds_honestly(setup, name):
    """pyscf newton: our count of J/K contractions agrees with pyscf's own tally of JK
    builds (jktot, which counts one extra per macro-iteration) within one per
    macro-iteration, and the run converges to the reference."""
    from pyscf import scf

    case, problem, ham, start = setup(name)
    run = acc.run_newton(ham, start, convergence=problem.convergence)
    ref, _ = reference_for(case)
    assert run.converged and abs(run.energy - ref.energy) < 1e-8
    mf = {"rhf": scf.RHF, "uhf": scf.UHF, "rohf": scf.ROHF}[problem.method](ham.mol)
    mf.verbose = 0
    newton = mf.newton()
    newton.conv_tol_grad = acc.NEWTON_GRADIENT_FRACTION * problem.convergence
    tally = []
    newton.callback = lambda envs: tally.append(envs["jktot"])
    c = start.c if problem.method == "uhf" else start.c[0]
    occ = start.occ if problem.method == "uhf" else start.occ[0]
    newton.max_cycle = len(run.history)
    newton.kernel(c, occ)
    macro = len(run.history)
    assert abs(tally[macro - 1] - run.fock_builds) <= macro


def test_newton_budget(setup):
    _, problem, ham, start = setup("water-sto-3g-rhf")
    run = acc.run_newton(ham, start, convergence=problem.convergence, max_fock_builds=10)
    assert run.status == "not converged" and run.fock_builds <= 10
    assert "budget of 10 Fock builds" in run.reason


def test_pyscf_diis_matches_ours_on_smoke(setup):
    """Our example DIIS and pyscf's CDIIS are the same method: same builds on the smoke
    cases from the default guess."""
    for name in SMOKE:
        _, problem, ham, start = setup(name)
        a = acc.run_scf(ham, CommutatorDIIS(), start, convergence=problem.convergence)
        b = acc.run_scf(ham, acc.PyscfDIIS("cdiis"), start, convergence=problem.convergence)
        assert abs(a.fock_builds - b.fock_builds) <= 1, name


def test_diis_coefficients_solve_the_constrained_problem():
    """c sums to 1 and minimises |Σ c e| (compared with the bordered normal equations)."""
    rng = np.random.default_rng(3)
    e = rng.standard_normal((5, 12))
    c = diis_coefficients(e)
    assert c.sum() == pytest.approx(1.0, abs=1e-14)
    b = e @ e.T
    a = -np.ones((6, 6))
    a[:5, :5] = b
    a[5, 5] = 0
    rhs = np.zeros(6)
    rhs[5] = -1
    ref = np.linalg.solve(a, rhs)[:5]
    assert np.allclose(c, ref, atol=1e-10)


def test_rotated_guess_keeps_occupations_and_orthonormality(setup):
    _, problem, ham, start = setup("oh-sto-3g-uhf")
    rng = np.random.default_rng(0)
    rot = acc.rotated(start, 0.3, rng)
    assert np.array_equal(rot.occ, start.occ)
    for c in rot.c:
        assert np.abs(c.T @ ham.s @ c - np.eye(c.shape[1])).max() < 1e-10
    # the largest rotation angle between occupied and virtual spaces is 0.3 rad
    for c0, c1, occ in zip(start.c, rot.c, start.occ):
        o = occ > 0
        s = np.linalg.svd(c0[:, o].T @ ham.s @ c1[:, o], compute_uv=False)
        assert np.arccos(np.clip(s.min(), -1, 1)) == pytest.approx(0.3, abs=1e-8)


def test_load_accelerator_forms(tmp_path):
    name, make = acc.load_accelerator("harness.bench.example_accelerator:CommutatorDIIS")
    assert name == "example-diis" and isinstance(make(), CommutatorDIIS)
    obj = CommutatorDIIS()
    name, make = acc.load_accelerator(obj)
    assert make() is obj
    f = tmp_path / "mine.py"
    f.write_text("class Nothing:\n    pass\n")
    with pytest.raises(PluginLoadError, match="lacks reset and step"):
        acc.load_accelerator(f"{f}:Nothing")
    with pytest.raises(PluginLoadError, match="has no attribute 'Missing'"):
        acc.load_accelerator(f"{f}:Missing")
    with pytest.raises(PluginLoadError, match="no colon"):
        acc.load_accelerator("harness.bench.example_accelerator")
