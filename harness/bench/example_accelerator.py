"""The example accelerator: a plain commutator DIIS, written to the harness protocol.

Use it as the template for your own (``scf-harness bench
harness.bench.example_accelerator:CommutatorDIIS``). The harness calls ``reset(problem)``
before each run and ``step(iterate)`` once per iteration; ``step`` returns the Fock
matrix to diagonalise next (``returns = "fock"``). See :mod:`harness.bench.accelerators` for
the fields of the iterate. Fock matrices in hartree (Eh).

Pulay's commutator DIIS: keep the last ``size`` pairs (F_i, e_i), with e_i the
commutator X(F_i P_i S − S P_i F_i)X in the Löwdin basis (``iterate.error``, all
components of the working pair), and return F = Σ_i c_i F_i with the c minimising
|Σ_i c_i e_i|² under Σ_i c_i = 1. The usual bordered system

    [ B   −1 ] [c]   [ 0]
    [ −1ᵀ  0 ] [λ] = [−1],      B_ij = ⟨e_i, e_j⟩,

is solved in the equivalent form without the constraint: with e_n the newest vector,
c_i = γ_i (i < n), c_n = 1 − Σ_i γ_i and γ = argmin |e_n + Σ_i γ_i (e_i − e_n)|, by
least squares with a relative singular-value cut-off :data:`RCOND`. This avoids
squaring the condition number (B spans |e|² from 1 to 1e-20 near convergence), keeps a
converged newest iterate (e_n = 0 gives γ = 0, F unchanged) and gives the minimal-norm
coefficients, never NaN, when error vectors are linearly dependent (a repeated iterate,
a stalled run).
"""

from __future__ import annotations

import numpy as np

#: Pairs (F, e) kept.
DIIS_SIZE = 8

#: Singular values of the (scaled) DIIS matrix below RCOND × the largest are ignored.
RCOND = 1e-12


def diis_coefficients(errors: np.ndarray, rcond: float = RCOND) -> np.ndarray:
    """c minimising |Σ_i c_i e_i|² with Σ_i c_i = 1; errors is (m, k), newest row last.

    γ = argmin |e_n + A γ| with the columns of A the differences e_i − e_n (i < n);
    c = (γ, 1 − Σγ).
    """
    newest = errors[-1]
    a = (errors[:-1] - newest).T
    if a.size == 0:
        return np.ones(1)
    gamma = np.linalg.lstsq(a, -newest, rcond=rcond)[0]
    return np.append(gamma, 1.0 - gamma.sum())


class CommutatorDIIS:
    """Commutator DIIS over the last ``size`` iterates (see the module docstring)."""

    name = "example-diis"
    returns = "fock"

    def __init__(self, size: int = DIIS_SIZE):
        self.size = size
        self.focks: list[np.ndarray] = []
        self.errors: list[np.ndarray] = []

    def reset(self, problem) -> None:
        """Forget the history (called before every run)."""
        self.focks, self.errors = [], []

    def step(self, iterate) -> np.ndarray:
        """F_next = Σ c_i F_i over the kept history, the newest iterate included."""
        self.focks.append(np.array(iterate.fock))
        self.errors.append(np.array(iterate.error).ravel())
        del self.focks[:-self.size], self.errors[:-self.size]
        if len(self.focks) == 1:
            return self.focks[0]
        c = diis_coefficients(np.array(self.errors))
        return np.einsum("i,i...->...", c, np.array(self.focks))
