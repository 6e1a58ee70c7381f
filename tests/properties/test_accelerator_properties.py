"""Hypothesis properties of convergence accelerators, each reported by name.

fixed-point, determinism, invariance (another orthonormal basis; the molecule rotated),
no-nan-degenerate: the functions in harness.bench.accelerators / harness.bench.runs, applied to our
example commutator DIIS (must hold) and to planted accelerators (must be caught), on
small catalogue cases and on random DIIS histories. Energies and Fock matrices in Eh.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from harness.bench import accelerators as acc
from harness.bench import runs as bench
from harness.catalogue.cases import load_catalogue
from harness.bench.example_accelerator import CommutatorDIIS, diis_coefficients
from harness.testing.planted.accelerators import KickedDIIS, MaximumOverlapDIIS

#: Each example runs a few small SCFs: keep the example counts small.
FEW = settings(max_examples=6, deadline=None)
MANY = settings(max_examples=60, deadline=None)
CASES = ("water-sto-3g-rhf", "oh-sto-3g-uhf", "nh2-sto-3g-rohf")


@functools.lru_cache(maxsize=None)
def _setup(name):
    case = load_catalogue().case(name)
    problem = case.problem()
    ham = acc.hamiltonian_for(problem)
    return problem, ham, acc.core_guess(ham)


@functools.lru_cache(maxsize=None)
def _converged(name, factory=CommutatorDIIS):
    """(history of Iterates ending with a state converged to FIXED_POINT_CONVERGENCE)."""
    problem, ham, start = _setup(name)
    rec: list = []
    run = acc.run_scf(ham, factory(), start, convergence=acc.FIXED_POINT_CONVERGENCE,
                      problem=problem, record=rec)
    assert run.converged
    return [it for it, _ in rec] + [acc.converged_iterate(ham, run,
                                                          acc.FIXED_POINT_CONVERGENCE)]


# ----------------------------------------------------------------------------- fixed point


@FEW
@given(name=st.sampled_from(CASES), keep=st.integers(0, 8))
def test_fixed_point_kept(name, keep):
    """fixed-point: handed a converged Fock after any part of its history, our DIIS
    returns it unchanged to FIXED_POINT_TOLERANCE."""
    problem, ham, _ = _setup(name)
    history = _converged(name)
    prefix = history[:-1][-keep:] if keep else []
    result = acc.fixed_point(CommutatorDIIS, problem, ham, prefix + [history[-1]])
    assert result.name == "fixed-point"
    assert result.passed, result.detail
    assert result.value <= acc.FIXED_POINT_TOLERANCE


@pytest.mark.parametrize("factory", [KickedDIIS, MaximumOverlapDIIS])
def test_fixed_point_catches_planted(factory):
    """fixed-point: an accelerator that moves a converged state fails, by far."""
    problem, ham, _ = _setup("water-sto-3g-rhf")
    result = acc.fixed_point(factory, problem, ham, _converged("water-sto-3g-rhf"))
    assert result.passed is False
    assert result.value > 100 * acc.FIXED_POINT_TOLERANCE


# ----------------------------------------------------------------------------- determinism


@FEW
@given(name=st.sampled_from(CASES), seed=st.integers(0, 2**16))
def test_determinism(name, seed):
    """determinism: the same inputs (a random perturbed start) give the same sequence."""
    problem, ham, start = _setup(name)
    start = acc.rotated(start, bench.GUESS_ANGLE, np.random.default_rng(seed))
    result = acc.determinism(CommutatorDIIS, problem, ham, start, problem.convergence)
    assert result.name == "determinism" and result.passed, result.detail


class _Noisy(CommutatorDIIS):
    """Not deterministic: a fresh random perturbation per call (planted)."""

    def step(self, iterate):
        return super().step(iterate) + 1e-9 * np.random.default_rng().random() * np.asarray(
            iterate.overlap)[None]


def test_determinism_catches_randomness():
    problem, ham, start = _setup("water-sto-3g-rhf")
    result = acc.determinism(_Noisy, problem, ham, start, problem.convergence)
    assert result.passed is False


# ----------------------------------------------------------------------------- invariance


@FEW
@given(name=st.sampled_from(CASES), seed=st.integers(0, 2**16))
def test_invariance_other_orthonormal_basis(name, seed):
    """invariance: the same problem in a random orthonormal basis converges in the same
    number of Fock builds (± INVARIANCE_BUILDS) to the same energy."""
    problem, ham, start = _setup(name)
    t = bench.random_orthonormal_basis(ham.s, np.random.default_rng(seed))
    assert np.abs(t.T @ ham.s @ t - np.eye(len(t))).max() < 1e-10
    result = acc.invariance(CommutatorDIIS, problem, ham, start, t, problem.convergence)
    assert result.name == "invariance" and result.passed, result.detail


@FEW
@given(angles=st.tuples(*[st.floats(-np.pi, np.pi) for _ in range(3)]))
def test_invariance_rotated_molecule(angles):
    """invariance: water rotated rigidly gives the same Fock builds and energy."""
    problem, _, _ = _setup("water-sto-3g-rhf")
    result = bench.rotation_invariance(CommutatorDIIS, problem, problem.convergence, angles)
    assert result.name == "rotation-invariance" and result.passed, result.detail


class _AoDiagonalShift(CommutatorDIIS):
    """Not invariant: shifts the AO diagonal (a basis-dependent operation, planted)."""

    def step(self, iterate):
        f = super().step(iterate)
        return f + 0.05 * np.eye(f.shape[-1])[None]


def test_invariance_catches_basis_dependence():
    problem, ham, start = _setup("water-sto-3g-rhf")
    t = bench.random_orthonormal_basis(ham.s, np.random.default_rng(1))
    result = acc.invariance(_AoDiagonalShift, problem, ham, start, t, problem.convergence)
    assert result.passed is False


# ----------------------------------------------------------------------------- degeneracy


@MANY
@given(m=st.integers(2, 8), k=st.integers(1, 30), rank=st.integers(1, 3),
       seed=st.integers(0, 2**16), scale=st.floats(1e-12, 1e2))
def test_diis_coefficients_finite_for_dependent_errors(m, k, rank, seed, scale):
    """no-nan-degenerate: m error vectors spanning only `rank` dimensions (repeats,
    linear combinations, tiny or huge scale) give finite coefficients summing to 1 that
    reach the smallest |Σ c e| (the minimum over the affine hull, checked against a
    direct projection)."""
    rng = np.random.default_rng(seed)
    basis = rng.standard_normal((min(rank, k), k))
    e = scale * rng.standard_normal((m, basis.shape[0])) @ basis
    c = diis_coefficients(e)
    assert np.all(np.isfinite(c))
    assert c.sum() == pytest.approx(1.0, abs=1e-9)
    # optimal value: distance from the origin to the affine hull of the e_i
    d = (e[:-1] - e[-1]).T
    best = e[-1] - d @ np.linalg.pinv(d) @ e[-1] if d.size else e[-1]
    assert np.linalg.norm(c @ e) <= np.linalg.norm(best) + 1e-8 * scale


@FEW
@given(name=st.sampled_from(CASES), repeats=st.integers(2, 10))
def test_no_nan_for_repeated_iterate(name, repeats):
    """no-nan-degenerate: the same iterate handed over repeatedly gives finite Focks."""
    problem, ham, _ = _setup(name)
    it = _converged(name)[0]
    result = acc.degenerate_subspace(CommutatorDIIS, problem, ham, it, repeats)
    assert result.name == "no-nan-degenerate" and result.passed, result.detail


class _NormalEquations(CommutatorDIIS):
    """Plain inversion of the bordered DIIS matrix (no safeguard, planted)."""

    def step(self, iterate):
        self.focks.append(np.array(iterate.fock))
        self.errors.append(np.array(iterate.error).ravel())
        e = np.array(self.errors)
        m = len(e)
        a = -np.ones((m + 1, m + 1))
        a[:m, :m] = e @ e.T
        a[m, m] = 0.0
        rhs = np.zeros(m + 1)
        rhs[m] = -1.0
        with np.errstate(all="ignore"):
            try:
                c = np.linalg.solve(a, rhs)[:m]
            except np.linalg.LinAlgError:
                c = np.full(m, np.nan)
        return np.einsum("i,i...->...", c, np.array(self.focks))


def test_no_nan_catches_unguarded_solve():
    problem, ham, _ = _setup("water-sto-3g-rhf")
    it = _converged("water-sto-3g-rhf")[0]
    result = acc.degenerate_subspace(_NormalEquations, problem, ham, it, 4)
    assert result.passed is False and result.value >= 1
