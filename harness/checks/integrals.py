"""Checks of the integrals a code reports: one-electron matrices and the ERI tensor.

The one-electron matrices (kinetic T, nuclear attraction V, core Hamiltonian H = T + V)
and the two-electron integrals (ij|kl) in chemists' notation,

    (ij|kl) = ∫∫ χ_i(r₁) χ_j(r₁) |r₁ − r₂|⁻¹ χ_k(r₂) χ_l(r₂) dr₁ dr₂,

are compared with pyscf's for the same basis (AO order of the case), and checked for
the properties every correct set of integrals has whatever program made it: S and T
positive definite, the 8-fold permutational symmetry of (ij|kl), the Cauchy–Schwarz
inequality |(ij|kl)|² ≤ (ij|ij)(kl|kl) and positive semidefiniteness of the (ij),(kl)
supermatrix. All integrals in hartree (Eh), lengths in bohr.

The kernels return :class:`harness.contract.results.Measurement`; :func:`integral_checks` turns a
solution into one :class:`harness.contract.results.CheckResult` per check.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from harness.contract.solution import Solution

import numpy as np

from harness.checks.orthonormal import locate, matrix_difference, worst
from harness.contract.results import CheckResult, Measurement, judge, not_applicable
from harness.checks.tolerances import Tolerances

#: The ERI checks are not run above this many AOs: the reference tensor has nao⁴
#: doubles (100 MB at nao = 60, 1.4 GB at 114) and the symmetry check makes seven
#: transposed copies of it.
ERI_MAX_NAO = 60

#: The seven non-trivial index permutations of (ij|kl) under which a real ERI tensor is
#: invariant, with the name each is reported under.
PERMUTATIONS = (
    ((1, 0, 2, 3), "(ji|kl)"),
    ((0, 1, 3, 2), "(ij|lk)"),
    ((1, 0, 3, 2), "(ji|lk)"),
    ((2, 3, 0, 1), "(kl|ij)"),
    ((3, 2, 0, 1), "(lk|ij)"),
    ((2, 3, 1, 0), "(kl|ji)"),
    ((3, 2, 1, 0), "(lk|ji)"),
)


def _ao_where(index: tuple[int, ...], labels, kind: str = "AO quartet") -> str:
    return locate("", kind, index, labels) if index else ""


def definiteness(a: np.ndarray, symbol: str, labels=None) -> Measurement:
    """−λ_min(A) of a symmetric matrix A (nao, nao): ≤ 0 when A is positive semidefinite.

    Uses the eigenvalues of ½(A + Aᵀ) as given — no unit diagonal is assumed (pyscf
    normalises cartesian functions of l ≥ 2 only radially, so S_μμ ≠ 1 there). The
    location is the AO with the largest weight in the lowest eigenvector.
    """
    a = np.asarray(a, dtype=float)
    w, u = np.linalg.eigh(0.5 * (a + a.T))
    k = int(np.argmax(np.abs(u[:, 0])))
    where = f"lowest eigenvector largest on {_ao_where((k,), labels, 'AO')}"
    return Measurement(float(-w[0]), f"−λ_min({symbol})", where)


def eri_difference(g: np.ndarray, g_ref: np.ndarray, labels=None) -> Measurement:
    """max |(ij|kl) − (ij|kl)_ref| over all quartets, worst one located by its four AOs."""
    value, idx = worst(np.asarray(g) - np.asarray(g_ref))
    where = _ao_where(idx, labels) if not value == 0 else ""
    return Measurement(value, "max|(ij|kl) − (ij|kl)_ref|", where)


def eri_symmetry(g: np.ndarray, labels=None) -> Measurement:
    """max over the 7 permutations P of max |g − P(g)|, e.g. |(ij|kl) − (kl|ij)|.

    Zero for a tensor with the 8-fold symmetry (ij|kl) = (ji|kl) = (ij|lk) = (ji|lk) =
    (kl|ij) = (lk|ij) = (kl|ji) = (lk|ji). Says which permutation is worst and where.
    """
    g = np.asarray(g)
    best = (0.0, (), "")
    for axes, name in PERMUTATIONS:
        value, idx = worst(g - g.transpose(axes))
        if not value <= best[0]:
            best = (value, idx, name)
    value, idx, name = best
    where = f"(ij|kl) ≠ {name} at {_ao_where(idx, labels)}" if idx and not value == 0 else ""
    return Measurement(value, "max|(ij|kl) − permuted|", where)


def schwarz(g: np.ndarray, labels=None) -> Measurement:
    """max over quartets of (ij|kl)² − (ij|ij)(kl|kl), in Eh²: ≤ 0 for correct integrals.

    The Cauchy–Schwarz inequality of the Coulomb inner product (f|g) = ∫∫ f g / r₁₂
    with f = χ_iχ_j, g = χ_kχ_l. Equality (0) holds for the diagonal quartets, so the
    value of a correct tensor is 0 up to rounding; the worst quartet is located.
    """
    g = np.asarray(g, dtype=float)
    n = g.shape[0]
    q = np.einsum("ijij->ij", g)
    excess = g * g - q[:, :, None, None] * q[None, None, :, :]
    if np.isnan(excess).any():
        idx = tuple(int(i) for i in np.argwhere(np.isnan(excess))[0])
        value = float("nan")
    else:
        flat = int(np.argmax(excess))
        idx = tuple(int(i) for i in np.unravel_index(flat, (n,) * 4))
        value = float(excess[idx])
    return Measurement(value, "max((ij|kl)² − (ij|ij)(kl|kl))", _ao_where(idx, labels))


def symmetric_pair_matrix(g: np.ndarray) -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray]]:
    """The supermatrix M[(ij),(kl)] = (ij|kl) on the orthonormal symmetric-pair basis.

    With the 8-fold symmetry imposed by averaging, M (n² × n²) vanishes on pairs
    antisymmetric in i ↔ j; on the orthonormal basis e_ii, (e_ij + e_ji)/√2 (i > j) it
    is M_s[p, q] = c_p c_q (ij|kl) with c = 1 (i = j), √2 (i > j), so that the non-zero
    eigenvalues of M are exactly those of M_s. Returns (M_s, (i, j) index arrays).
    """
    g = np.asarray(g, dtype=float)
    g = 0.5 * (g + g.transpose(1, 0, 2, 3))
    g = 0.5 * (g + g.transpose(0, 1, 3, 2))
    i, j = np.tril_indices(g.shape[0])
    c = np.where(i == j, 1.0, np.sqrt(2.0))
    m = g[i, j][:, i, j] * c[:, None] * c[None, :]
    return 0.5 * (m + m.T), (i, j)


def eri_definite(g: np.ndarray, labels=None) -> Measurement:
    """−λ_min of the (ij),(kl) supermatrix of (ij|kl): ≤ 0 when it is positive semidefinite.

    The Coulomb kernel 1/r₁₂ is a positive operator, so Σ x_ij x_kl (ij|kl) ≥ 0 for every
    x: the supermatrix is PSD. Computed on symmetric pairs (:func:`symmetric_pair_matrix`);
    the location is the AO pair with the largest weight in the lowest eigenvector.
    """
    m, (i, j) = symmetric_pair_matrix(g)
    if not np.isfinite(m).all():
        return Measurement(float("nan"), "−λ_min((ij|kl))", "non-finite integrals")
    w, u = np.linalg.eigh(m)
    p = int(np.argmax(np.abs(u[:, 0])))
    where = f"lowest eigenvector largest on {_ao_where((int(i[p]), int(j[p])), labels, 'AO pair')}"
    return Measurement(float(-w[0]), "−λ_min((ij|kl))", where)


def integral_checks(sol: Solution, ints, tolerances: Tolerances | None, case: str
                    ) -> dict[str, CheckResult]:
    """The integral checks of one extracted solution, by name.

    ``sol``: the extracted (well-formed, pyscf-AO-order) solution; ``ints``: the case's
    :class:`harness.backend.integrals.AOIntegrals` (its ``kinetic()``, ``nuclear_attraction()`` and ``eri()`` arrays are the references);
    all tolerances are fixed (``harness.checks.tolerances``), in Eh (Eh² for Schwarz).

    kinetic, nuclear-attraction, core-hamiltonian: max|A_code − A_ref| for the code's
    ``kinetic``, ``nuclear_attraction``, ``core_hamiltonian``; overlap-definite and
    kinetic-definite: −λ_min of the code's ``overlap`` and ``kinetic``; two-electron
    (against pyscf's int2e), -symmetry, -schwarz, -definite: the code's ``two_electron``,
    not applicable above ERI_MAX_NAO AOs. Each is not applicable when its key is absent.
    """
    tol = tolerances or Tolerances()
    labels = ints.labels
    out: dict[str, CheckResult] = {}

    def verdict(name, measurement):
        # every integral tolerance is fixed: the convergence argument is not used
        return judge(name, measurement, tol.for_check(name, 1.0), case)

    def missing(name, key):
        out[name] = not_applicable(name, f"no '{key}' key", case)

    if sol.kinetic is not None:
        t_ref = ints.kinetic()
        out["kinetic"] = verdict("kinetic", matrix_difference(sol.kinetic, t_ref,
                                                              "max|T − T_ref|", labels))
    else:
        missing("kinetic", "kinetic")
    if sol.nuclear_attraction is not None:
        v_ref = ints.nuclear_attraction()
        out["nuclear-attraction"] = verdict("nuclear-attraction", matrix_difference(
            sol.nuclear_attraction, v_ref, "max|V − V_ref|", labels))
    else:
        missing("nuclear-attraction", "nuclear_attraction")
    if sol.core_hamiltonian is not None:
        out["core-hamiltonian"] = verdict("core-hamiltonian", matrix_difference(
            sol.core_hamiltonian, ints.h, "max|H − H_ref|", labels))
    else:
        missing("core-hamiltonian", "core_hamiltonian")
    if sol.overlap is not None:
        out["overlap-definite"] = verdict("overlap-definite",
                                          definiteness(sol.overlap, "S", labels))
    else:
        missing("overlap-definite", "overlap")
    if sol.kinetic is not None:
        out["kinetic-definite"] = verdict("kinetic-definite",
                                          definiteness(sol.kinetic, "T", labels))
    else:
        missing("kinetic-definite", "kinetic")

    eri_names = ("two-electron", "two-electron-symmetry", "two-electron-schwarz",
                 "two-electron-definite")
    nao = len(labels)
    if sol.two_electron is None:
        for name in eri_names:
            missing(name, "two_electron")
    elif nao > ERI_MAX_NAO:
        for name in eri_names:
            out[name] = not_applicable(name, f"nao = {nao} > {ERI_MAX_NAO}: the ERI checks "
                                       f"need several nao⁴ arrays", case)
    else:
        g = sol.two_electron
        g_ref = np.asarray(ints.eri()).reshape((nao,) * 4)
        out["two-electron"] = verdict("two-electron", eri_difference(g, g_ref, labels))
        out["two-electron-symmetry"] = verdict("two-electron-symmetry", eri_symmetry(g, labels))
        out["two-electron-schwarz"] = verdict("two-electron-schwarz", schwarz(g, labels))
        out["two-electron-definite"] = verdict("two-electron-definite", eri_definite(g, labels))
    return out
