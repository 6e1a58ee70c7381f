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

import dataclasses
from typing import TYPE_CHECKING, Mapping

if TYPE_CHECKING:
    from harness.contract.solution import Solution

import numpy as np

from harness.checks.orthonormal import locate, matrix_difference, worst
from harness.contract.results import CheckResult, Measurement, Status, judge, not_applicable
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


# ------------------------------------------------------------------ energy effect

def energy_weighted_density(d: np.ndarray, f: np.ndarray) -> np.ndarray:
    """The energy-weighted density W (nao, nao) of density ``d`` and Fock matrix ``f``
    (both with a leading spin axis, see ``harness.checks.spin``).

    RHF (d = (P,), P the total density, f = (F,)): W = ½ P F P; UHF/ROHF:
    W = Σσ Pσ Fσ Pσ. For canonical orbitals (F C = S C ε, Cᵀ S C = 1) this is
    W = Σ_i n_i ε_i C_i C_iᵀ, the form in the textbooks; written with F it needs no
    orbital energies and does not depend on how the occupied orbitals are rotated.
    (For ROHF it is the UHF-form expression at the ROHF density: exact for the
    first-order energy only at a UHF-stationary density, an approximation otherwise.)
    """
    d = np.asarray(d, dtype=float)
    f = np.asarray(f, dtype=float)
    w = sum(ds @ fs @ ds for ds, fs in zip(d, f))  # 2 n³ per spin (not an n⁴ einsum loop)
    return 0.5 * w if len(d) == 1 else w


def _effect(value: float, symbol: str) -> Measurement:
    return Measurement(abs(float(value)), f"|δE({symbol})|", f"δE = {float(value):+.1e} Eh")


def one_electron_effect(delta: np.ndarray, d: np.ndarray, symbol: str = "H") -> Measurement:
    """First-order energy change of a one-electron operator change δA (T, V or H):
    δE = Tr(P δA), P = Σσ Pσ the total density (Eh).

    Hellmann–Feynman: at a stationary density the orbital response enters only at second
    order (Helgaker, Jørgensen & Olsen, Molecular Electronic-Structure Theory, Wiley 2000,
    the first-order energy of a perturbation; from memory)."""
    p = np.asarray(d, dtype=float).sum(axis=0)
    return _effect(float(np.einsum("pq,qp->", p, np.asarray(delta, dtype=float))), symbol)


def two_electron_effect(delta_g: np.ndarray, d: np.ndarray) -> Measurement:
    """First-order energy change of an ERI change δ(ij|kl): δE = ½ Tr(P δG[P]), i.e.
    ½ Tr(P δJ) − ¼ Tr(P δK) for RHF (total P) and ½ Tr(P δJ) − ½ Σσ Tr(Pσ δKσ) for
    UHF/ROHF, with δJ_ij = Σ δ(ij|kl) P_kl and δK_ij = Σ δ(ik|jl) P_kl (Eh;
    Hellmann–Feynman as in :func:`one_electron_effect`)."""
    return _effect(_two_electron_delta(delta_g, d), "(ij|kl)")


def _two_electron_delta(delta_g, d) -> float:
    g = np.asarray(delta_g, dtype=float)
    d = np.asarray(d, dtype=float)
    p = d.sum(axis=0)
    e = 0.5 * float(np.einsum("ij,ijkl,kl->", p, g, p, optimize=True))
    k = float(np.einsum("sij,ikjl,skl->", d, g, d, optimize=True))
    return e - (0.25 * k if len(d) == 1 else 0.5 * k)


def overlap_effect(delta_s: np.ndarray, w: np.ndarray) -> Measurement:
    """First-order energy change of an overlap change δS: δE = −Tr(W δS), W the
    energy-weighted density (:func:`energy_weighted_density`), in Eh. The orbitals must
    stay orthonormal in the changed metric; the Lagrange multipliers of that constraint
    are W (Helgaker, Jørgensen & Olsen 2000, the reorthonormalisation term of the
    first-order energy; from memory)."""
    return _effect(-float(np.einsum("pq,qp->", np.asarray(w, float),
                                    np.asarray(delta_s, float))), "S")


def _effect_verdict(name: str, symbol: str, diff: Measurement, effect: Measurement,
                    tolerance: float, bound: float, case: str) -> CheckResult:
    """Pass when the energy effect is within ``tolerance`` (Eh) and no element is off by
    more than ``bound``; the message states both sizes either way."""
    moves = effect.value
    ok_effect = bool(moves <= tolerance)
    ok_bound = bool(diff.value <= bound)
    where = f", {diff.where}" if diff.where else ""
    head = f"{name}: your {symbol} differs by up to {diff.value:.1e}"
    if ok_effect and ok_bound:
        message = (f"{head}; at your density that moves E by {moves:.1e} Eh ≤ "
                   f"{tolerance:g} ({case})")
    elif not ok_effect:
        message = (f"{head}; at your density that moves E by {moves:.1e} Eh > "
                   f"{tolerance:g} ({case}){where}")
    else:
        message = (f"{head} > {bound:g} ({case}){where}; at your density that moves E by "
                   f"{moves:.1e} Eh")
    return CheckResult(name=name, status=Status.PASSED if ok_effect and ok_bound
                       else Status.FAILED, value=moves, tolerance=tolerance, message=message)


@dataclasses.dataclass(frozen=True)
class Density:
    """What the energy effects are measured at: the code's density ``d`` (leading spin
    axis) and energy-weighted density ``w`` (nao, nao), pyscf's AO order."""

    d: np.ndarray
    w: np.ndarray


def density_for(sol: "Solution", method: str, fock=None) -> Density | None:
    """The code's density (its ``density``, else built from orbitals and occupations) and
    W = ½PFP / ΣPσFσPσ with its ``fock`` (else ``fock``, e.g. one rebuilt from P); None
    when the solution gives neither a density nor orbitals, or no Fock matrix is known."""
    from harness.checks.spin import (density_by_spin, density_from_orbitals, fock_by_spin,
                                     orbitals_by_spin)

    try:
        if isinstance(sol.density, np.ndarray):
            d = density_by_spin(method, sol.density)
        else:
            d = density_from_orbitals(*orbitals_by_spin(method, sol.coefficients,
                                                        sol.occupations))
        f = fock_by_spin(method, sol.fock) if isinstance(sol.fock, np.ndarray) else fock
        if f is None:
            return None
        return Density(d=d, w=energy_weighted_density(d, f))
    except (ValueError, TypeError):
        return None


def energy_effects(sol: "Solution", ints, at: Density) -> dict[str, float]:
    """Signed first-order energy effects (Eh) of the integrals the code reports, by check
    name: δE = Tr(P δH) + ½Tr(P δG[P]) − Tr(W δS), δ = code − reference, split by class
    (overlap, kinetic, nuclear-attraction, core-hamiltonian, two-electron; the last only
    up to ERI_MAX_NAO AOs)."""
    out: dict[str, float] = {}
    nao = len(ints.labels)
    if isinstance(sol.overlap, np.ndarray):
        out["overlap"] = -float(np.einsum("pq,qp->", at.w, sol.overlap - ints.s))
    p = at.d.sum(axis=0)
    for name, value, ref in (("kinetic", sol.kinetic, ints.kinetic),
                             ("nuclear-attraction", sol.nuclear_attraction,
                              ints.nuclear_attraction),
                             ("core-hamiltonian", sol.core_hamiltonian, lambda: ints.h)):
        if isinstance(value, np.ndarray):
            out[name] = float(np.einsum("pq,qp->", p, value - ref()))
    if isinstance(sol.two_electron, np.ndarray) and nao <= ERI_MAX_NAO:
        g_ref = np.asarray(ints.eri()).reshape((nao,) * 4)
        out["two-electron"] = _two_electron_delta(sol.two_electron - g_ref, at.d)
    return out


def explained_energy(effects: Mapping[str, float]) -> float | None:
    """The part of E − E_ref the reported integrals explain (Eh): the sum of the effects,
    counting H once (core-hamiltonian if reported, else kinetic + nuclear-attraction);
    None when no integral is reported."""
    if not effects:
        return None
    names = ["overlap", "two-electron"] + (
        ["core-hamiltonian"] if "core-hamiltonian" in effects
        else ["kinetic", "nuclear-attraction"])
    return float(sum(effects.get(n, 0.0) for n in names))


def overlap_check(sol: "Solution", ints, at: Density | None, tolerances: Tolerances | None,
                  case: str) -> CheckResult:
    """The overlap check: the energy effect −Tr(W δS) of the code's S against pyscf's
    (at the code's density), within the overlap tolerance (Eh), and no element off by
    more than INTEGRAL_ELEMENT_BOUND. Not applicable without an ``overlap`` key."""
    if sol.overlap is None:
        return not_applicable("overlap", "no 'overlap' key", case)
    tol = tolerances or Tolerances()
    diff = matrix_difference(sol.overlap, ints.s, "max|S − S_ref|", ints.labels)
    if at is None:
        return not_applicable("overlap", "no density and Fock matrix to weigh the "
                              "difference with", case)
    return _effect_verdict("overlap", "S", diff, overlap_effect(sol.overlap - ints.s, at.w),
                           tol.for_check("overlap", 1.0), _element_bound(), case)


def _element_bound() -> float:
    from harness.checks.tolerances import INTEGRAL_ELEMENT_BOUND

    return INTEGRAL_ELEMENT_BOUND


def integral_checks(sol: Solution, ints, tolerances: Tolerances | None, case: str,
                    at: Density | None = None, method: str | None = None
                    ) -> dict[str, CheckResult]:
    """The integral checks of one extracted solution, by name.

    ``sol``: the extracted (well-formed, pyscf-AO-order) solution; ``ints``: the case's
    :class:`harness.backend.integrals.AOIntegrals` (its ``kinetic()``,
    ``nuclear_attraction()`` and ``eri()`` arrays are the references); ``at``: the
    density the energy effects are measured at (None: :func:`density_for` of the
    solution, ``method`` from the shape of its orbitals). Tolerances in Eh (Eh² for
    Schwarz).

    kinetic, nuclear-attraction, core-hamiltonian, two-electron: the first-order energy
    effect of the difference from pyscf's integrals at the code's density (Tr(P δT),
    Tr(P δV), Tr(P δH), ½Tr(P δG[P])) within INTEGRAL_ENERGY_EFFECT, and no element off
    by more than INTEGRAL_ELEMENT_BOUND; overlap-definite and kinetic-definite: −λ_min
    of the code's ``overlap`` and ``kinetic``; two-electron-symmetry, -schwarz,
    -definite: properties of the code's ``two_electron``; the ERI checks are not
    applicable above ERI_MAX_NAO AOs. Each is not applicable when its key is absent.
    """
    tol = tolerances or Tolerances()
    labels = ints.labels
    out: dict[str, CheckResult] = {}
    if at is None:
        method = method or _method_of(sol)
        at = density_for(sol, method, fock=None) if method else None
    bound = _element_bound()

    def verdict(name, measurement):
        # every integral tolerance is fixed: the convergence argument is not used
        return judge(name, measurement, tol.for_check(name, 1.0), case)

    def missing(name, key):
        out[name] = not_applicable(name, f"no '{key}' key", case)

    def weighed(name, symbol, value, ref, quantity):
        diff = matrix_difference(value, ref, quantity, labels)
        if at is None:
            return not_applicable(name, "no density and Fock matrix to weigh the "
                                  "difference with", case)
        return _effect_verdict(name, symbol, diff,
                               one_electron_effect(value - ref, at.d, symbol),
                               tol.for_check(name, 1.0), bound, case)

    if sol.kinetic is not None:
        out["kinetic"] = weighed("kinetic", "T", sol.kinetic, ints.kinetic(),
                                 "max|T − T_ref|")
    else:
        missing("kinetic", "kinetic")
    if sol.nuclear_attraction is not None:
        out["nuclear-attraction"] = weighed("nuclear-attraction", "V", sol.nuclear_attraction,
                                            ints.nuclear_attraction(), "max|V − V_ref|")
    else:
        missing("nuclear-attraction", "nuclear_attraction")
    if sol.core_hamiltonian is not None:
        out["core-hamiltonian"] = weighed("core-hamiltonian", "H", sol.core_hamiltonian,
                                          ints.h, "max|H − H_ref|")
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
        diff = eri_difference(g, g_ref, labels)
        if at is None:
            out["two-electron"] = not_applicable("two-electron", "no density and Fock "
                                                 "matrix to weigh the difference with", case)
        else:
            out["two-electron"] = _effect_verdict(
                "two-electron", "(ij|kl)", diff, two_electron_effect(g - g_ref, at.d),
                tol.for_check("two-electron", 1.0), bound, case)
        out["two-electron-symmetry"] = verdict("two-electron-symmetry", eri_symmetry(g, labels))
        out["two-electron-schwarz"] = verdict("two-electron-schwarz", schwarz(g, labels))
        out["two-electron-definite"] = verdict("two-electron-definite", eri_definite(g, labels))
    return out


def _method_of(sol) -> str | None:
    """"uhf" for (2, nao, nmo) orbitals, else "rohf" when an occupation is 1, "rhf"
    otherwise (a direct caller's guess of the method; evaluate passes the density)."""
    c, occ = sol.coefficients, sol.occupations
    if not isinstance(c, np.ndarray) or not isinstance(occ, np.ndarray):
        return None
    if c.ndim == 3:
        return "uhf"
    return "rohf" if np.any(np.abs(occ - 1.0) < 0.5) else "rhf"
