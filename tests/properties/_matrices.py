"""Test-only hypothesis strategies: overlap matrices, orthonormal orbitals, occupations.

Everything is built so that the exact answer is known by construction:
S = U diag(w) Uᵀ with eigenvalues w in [MIN_EIGENVALUE, MAX_EIGENVALUE], hence
X = S^(-1/2) = U diag(w^(-1/2)) Uᵀ exactly, and orbitals C = X Q with Q orthogonal are
S-orthonormal. The Gaussian matrices come from a drawn seed (numpy's generator), the
sizes, eigenvalues, angles and occupations from hypothesis, so failures shrink and replay.
Atomic units are implied but irrelevant: these are model matrices.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from hypothesis import strategies as st

#: Overlap eigenvalue range: condition number at most 1e4, like a real basis with
#: diffuse functions; small enough that rounding stays near 1e-12.
MIN_EIGENVALUE = 1e-3
MAX_EIGENVALUE = 10.0

MIN_NAO = 2
MAX_NAO = 12

seeds = st.integers(min_value=0, max_value=2 ** 32 - 1)


def orthogonal(n: int, rng: np.random.Generator) -> np.ndarray:
    """A random orthogonal matrix from the QR factorisation of a Gaussian matrix."""
    q, r = np.linalg.qr(rng.normal(size=(n, n)))
    return q * np.sign(np.diag(r))


@dataclasses.dataclass(frozen=True)
class Overlap:
    """S = U diag(w) Uᵀ with its exact inverse square root ``x`` and square root ``root``."""

    s: np.ndarray
    x: np.ndarray
    root: np.ndarray
    w: np.ndarray

    @property
    def n(self) -> int:
        return len(self.s)


@dataclasses.dataclass(frozen=True)
class Orbitals:
    """S-orthonormal orbitals C = X Q, orbital energies ε (sorted ascending, distinct)
    and the number of doubly occupied orbitals (1 ≤ nocc < n)."""

    overlap: Overlap
    c: np.ndarray
    q: np.ndarray
    e: np.ndarray
    nocc: int

    @property
    def s(self) -> np.ndarray:
        return self.overlap.s

    @property
    def n(self) -> int:
        return self.overlap.n

    def fock(self) -> np.ndarray:
        """The Fock matrix whose Roothaan–Hall solutions are (C, ε): F = S C diag(ε) Cᵀ S."""
        s = self.s
        return s @ (self.c * self.e) @ self.c.T @ s

    def rhf_density(self, c: np.ndarray | None = None) -> np.ndarray:
        """Aufbau RHF total density 2 C_occ C_occᵀ, shape (1, n, n)."""
        c = self.c if c is None else c
        return (2.0 * c[:, : self.nocc] @ c[:, : self.nocc].T)[None]


@st.composite
def overlaps(draw, *, min_nao: int = MIN_NAO, max_nao: int = MAX_NAO) -> Overlap:
    """Random SPD overlap matrices of size min_nao..max_nao, eigenvalues in [1e-3, 10]."""
    if not MIN_NAO <= min_nao <= max_nao:
        raise ValueError(f"need {MIN_NAO} ≤ min_nao ≤ max_nao, got {min_nao}, {max_nao}")
    n = draw(st.integers(min_value=min_nao, max_value=max_nao))
    w = np.array(draw(st.lists(st.floats(min_value=MIN_EIGENVALUE, max_value=MAX_EIGENVALUE),
                               min_size=n, max_size=n)))
    u = orthogonal(n, np.random.default_rng(draw(seeds)))
    s = (u * w) @ u.T
    s = 0.5 * (s + s.T)
    return Overlap(s=s, x=(u / np.sqrt(w)) @ u.T, root=(u * np.sqrt(w)) @ u.T, w=w)


@st.composite
def orbitals(draw, *, min_nao: int = MIN_NAO, max_nao: int = MAX_NAO) -> Orbitals:
    """S-orthonormal orbitals C = S^(-1/2) Q with sorted, distinct orbital energies in
    [−5, 5] Eh (gaps ≥ 1e-3) and an occupied count 1 ≤ nocc < n."""
    ov = draw(overlaps(min_nao=min_nao, max_nao=max_nao))
    n = ov.n
    q = orthogonal(n, np.random.default_rng(draw(seeds)))
    gaps = draw(st.lists(st.floats(min_value=1e-3, max_value=10.0 / n), min_size=n - 1,
                         max_size=n - 1))
    start = draw(st.floats(min_value=-5.0, max_value=-0.0))
    e = start + np.concatenate([[0.0], np.cumsum(gaps)])
    nocc = draw(st.integers(min_value=1, max_value=n - 1))
    return Orbitals(overlap=ov, c=ov.x @ q, q=q, e=e, nocc=nocc)


@st.composite
def occupation_masks(draw, n: int, nocc: int) -> np.ndarray:
    """A boolean mask choosing nocc of n orbitals (not necessarily the lowest)."""
    chosen = draw(st.lists(st.integers(min_value=0, max_value=n - 1), min_size=nocc,
                           max_size=nocc, unique=True))
    mask = np.zeros(n, dtype=bool)
    mask[chosen] = True
    return mask


@st.composite
def phases(draw, n: int) -> np.ndarray:
    """n random signs ±1 (MO phase flips)."""
    return np.where(np.array(draw(st.lists(st.booleans(), min_size=n, max_size=n))), -1.0, 1.0)


@dataclasses.dataclass(frozen=True)
class TwoElectron:
    """A random positive semidefinite 'ERI' supermatrix (pq|rs) = Σ_L b_L[pq] b_L[rs] with
    symmetric b_L: it has the 8-fold permutational symmetry of real integrals."""

    b: np.ndarray  # (naux, n, n), each b_L symmetric

    def jk(self, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """J of the total density, K of each component: J_pq = Σ_rs (pq|rs) P_rs,
        K_pq = Σ_rs (pr|qs) P_rs = Σ_L (b_L P b_L)_pq."""
        vj = np.einsum("lpq,lrs,rs->pq", self.b, self.b, d.sum(axis=0))
        vk = np.einsum("lpr,xrs,lsq->xpq", self.b, d, self.b)
        return vj, vk

    def eri(self) -> np.ndarray:
        return np.einsum("lpq,lrs->pqrs", self.b, self.b)


@st.composite
def two_electron(draw, n: int, *, max_aux: int = 6) -> TwoElectron:
    """Random TwoElectron of dimension n with 1..max_aux symmetric factors."""
    naux = draw(st.integers(min_value=1, max_value=max_aux))
    rng = np.random.default_rng(draw(seeds))
    a = rng.normal(size=(naux, n, n))
    return TwoElectron(b=0.5 * (a + np.swapaxes(a, 1, 2)))
