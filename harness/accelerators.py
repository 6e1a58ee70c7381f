"""Convergence accelerators: the protocol, the harness-owned SCF loop, the baselines.

An *accelerator* is the part of an SCF program that turns the current Fock matrix (and
its history) into the matrix to diagonalise next: DIIS and its relatives, damping, or
anything new. The harness owns everything else — integrals (from pyscf), Fock builds,
diagonalisation, occupation, the convergence test — so that accelerators are compared on
exactly the same loop, criterion and budget. Atomic units throughout: Fock matrices and
energies in hartree (Eh), coordinates in bohr.

Protocol
--------
An accelerator is an object with

* ``reset(problem)``: called before every run (one case, one starting guess) with the
  read-only :class:`harness.problem.Problem`; forget all history here;
* ``step(iterate) -> array``: called once per iteration with a frozen :class:`Iterate`;
  returns the Fock matrix to diagonalise next, with the shape of ``iterate.fock``
  (``(n, n)`` is accepted when there is one component);
* ``returns``: ``"fock"`` (default) or ``"density"``; a density accelerator returns a
  density with the shape of ``iterate.density`` instead;
* ``name`` (optional): shown in the tables (default: the class name).

``scf-harness bench MODULE:NAME`` accepts a class (instantiated once per run) or an
instance (``reset`` is called before each run). The bundled example is
:class:`harness.example_accelerator.CommutatorDIIS`.

What the accelerator sees (:class:`Iterate`), per method, as a *working pair* (F, P),
both with a leading component axis:

========  ====================================  =============================
method    fock (F)                              density (P)
========  ====================================  =============================
RHF       (1, n, n): F = H + J(P) − ½K(P)      (1, n, n): total P
UHF       (2, n, n): Fσ = H + J(Pα+Pβ) − K(Pσ)  (2, n, n): Pα, Pβ
ROHF      (1, n, n): Roothaan effective Fock    (1, n, n): Pα + Pβ
========  ====================================  =============================

The ROHF effective Fock is Roothaan's (the same as the example SCF code's): in the basis
of the current orbitals, with Fc = ½(Fα + Fβ), the closed–closed, open–open,
virtual–virtual and closed–virtual blocks are Fc, the closed–open blocks Fβ and the
open–virtual blocks Fα; back to the AO basis as S C R Cᵀ S. It commutes with Pα + Pβ
exactly when the three ROHF gradient blocks vanish.

``error`` is e = X(F P S − S P F)X per component with X = S^(−½) (Löwdin), the quantity
of :func:`harness.checks.stationarity.commutator`; ``measure`` is the convergence
measure of the current state (RHF/UHF: max|e|; ROHF: the largest ROHF gradient block,
:func:`harness.checks.stationarity.rohf_conditions`).

The loop (:func:`run_scf`)
--------------------------
From the starting orbitals, each iteration: P from the orbitals and occupations → one
Fock build F(P) (counted) → E[P] and the measure → stop if measure ≤
``problem.convergence`` → otherwise hand the :class:`Iterate` to the accelerator → the
returned Fock is diagonalised (canonical orthogonalisation, overlap eigenvalues below
:data:`LINEAR_DEPENDENCE` dropped) and occupied by the aufbau rule (RHF: N/2 lowest
doubly; UHF: nσ lowest per spin; ROHF: n_β lowest closed, next n_α − n_β open). A returned
density is projected onto the nearest idempotent one: its natural orbitals (eigenvectors
of S^½ D S^½) with the largest occupations are filled by the same rule (ROHF: from
Pα + Pβ). So every state the loop measures is a proper single determinant. The budget is
:data:`MAX_FOCK_BUILDS` Fock builds; a run is counted in Fock builds, never iterations of
an inner solver.

Baselines (same loop, same criterion, same budget): plain Roothaan iterations, Fock
damping (:data:`DAMPING`), pyscf's commutator DIIS, EDIIS and ADIIS through their
``update`` methods, and pyscf's second-order solver (``mf.newton()``, run natively by
:func:`run_newton`, with our measure as its convergence test and every J/K contraction
counted as described there).
"""

from __future__ import annotations

import contextlib
import dataclasses
import signal
import threading
import time
from typing import Any, Callable

import numpy as np

from harness.checks.energy import fock_from_terms
from harness.checks.orthonormal import LINEAR_DEPENDENCE, lowdin
from harness.checks.stationarity import commutator, rohf_conditions
from harness.errors import PluginLoadError, first_line
from harness.problem import Problem

#: Fock builds allowed per run (the same budget for every method).
MAX_FOCK_BUILDS = 100

#: Seconds one call of a user's accelerator (``reset`` or ``step``) may take before the
#: run fails with "took longer than …" (:func:`time_limited`). A step is a small linear
#: problem (a DIIS solve takes milliseconds), so a minute means the accelerator hangs.
ACCELERATOR_CALL_LIMIT = 60.0

#: Fock damping of the damping baseline: F_in ← (1 − w) F(P) + w F_in(previous), w = DAMPING.
DAMPING = 0.5

#: Constant K of the generalised Wolfsberg–Helmholz starting guess
#: G_μν = ½ K (H_μμ + H_νν) S_μν (μ ≠ ν), G_μμ = H_μμ.
WOLFSBERG_HELMHOLZ = 1.75

#: A returned matrix may be asymmetric by at most this (relative to its largest element)
#: before the run fails; smaller asymmetries (round-off) are symmetrised away.
SYMMETRY_TOLERANCE = 1e-8

#: Subspace size given to pyscf's DIIS-type baselines (pyscf's SCF default, ``diis_space``).
PYSCF_DIIS_SPACE = 8

#: Macro-iterations allowed to pyscf's second-order solver: each costs at least one Fock
#: build, so with this cap the Fock-build budget, not pyscf's own counter, ends a run.
NEWTON_MAX_MACRO = MAX_FOCK_BUILDS

#: pyscf's second-order solver stops refining a step once its gradient norm is below
#: ``conv_tol_grad``; set to this fraction of the requested measure so that the solver
#: keeps working until our measure (largest commutator element) is reached.
NEWTON_GRADIENT_FRACTION = 0.1

RETURNS = ("fock", "density")


# --------------------------------------------------------------------------- the record


def _frozen(a) -> np.ndarray:
    a = np.array(a, dtype=np.float64)
    a.setflags(write=False)
    return a


@dataclasses.dataclass(frozen=True, eq=False)
class Iterate:
    """What an accelerator is handed once per iteration (read-only arrays, Eh).

    iteration: Fock builds made so far in this run (1 on the first call).
    method: "rhf", "uhf" or "rohf".
    fock, density: the working pair (ns, n, n) — see the module docstring.
    overlap: S (n, n); core_hamiltonian: H = T + V (n, n).
    energy: E[P], total including nuclear repulsion (Eh).
    error: X(F P S − S P F)X per component (ns, n, n), X = S^(−½).
    measure: the convergence measure of this state (the run stops when ≤ convergence).
    x: the Löwdin X = S^(−½) (n, n).
    convergence: the measure the run must reach.
    """

    iteration: int
    method: str
    fock: np.ndarray
    density: np.ndarray
    overlap: np.ndarray
    core_hamiltonian: np.ndarray
    energy: float
    error: np.ndarray
    measure: float
    x: np.ndarray
    convergence: float

    def replace(self, **changes) -> "Iterate":
        """A copy with some fields changed (arrays frozen again)."""
        values = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        values.update(changes)
        for name in ("fock", "density", "overlap", "core_hamiltonian", "error", "x"):
            values[name] = _frozen(values[name])
        return Iterate(**values)


# --------------------------------------------------------------------------- the Hamiltonian


@dataclasses.dataclass(frozen=True, eq=False)
class Hamiltonian:
    """The matrices of one problem in some basis (Eh): s overlap, h core Hamiltonian,
    e_nuc nuclear repulsion, and J/K through :meth:`jk`.

    ``t`` is None in the AO basis of ``mol``; otherwise the basis is φ' = φ T (columns of
    T in AO coefficients), so S' = Tᵀ S T, H' = Tᵀ H T and J'/K' = Tᵀ J/K(T P' Tᵀ) T.
    ``eri`` is pyscf's 8-fold packed ERI of ``mol`` (None: integral-direct J/K).
    """

    method: str
    n_alpha: int
    n_beta: int
    s: np.ndarray
    h: np.ndarray
    e_nuc: float
    mol: Any
    eri: np.ndarray | None = None
    t: np.ndarray | None = None

    @property
    def n_components(self) -> int:
        """Components of the working pair: 2 for UHF, 1 for RHF and ROHF."""
        return 2 if self.method == "uhf" else 1

    def jk(self, d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """J of the total density and K of each component of ``d`` (k, n, n).

        J[P]_pq = Σ_rs (pq|rs) P_rs, K[P]_pq = Σ_rs (pr|qs) P_rs; pyscf contracts the
        ERI (in-core when ``eri`` is set, else its direct algorithm).
        """
        from pyscf import lib, scf

        if self.t is not None:
            d = np.einsum("pi,kij,qj->kpq", self.t, d, self.t)
        d = np.ascontiguousarray(d)
        if self.eri is not None:
            with lib.with_omp_threads(IN_CORE_THREADS):
                vj, vk = scf.hf.dot_eri_dm(self.eri, d, hermi=1)
        else:
            vj, vk = scf.hf.get_jk(self.mol, d, hermi=1)
        vj = np.asarray(vj).reshape(d.shape).sum(axis=0)
        vk = np.asarray(vk).reshape(d.shape)
        if self.t is not None:
            vj = self.t.T @ vj @ self.t
            vk = np.einsum("pi,kpq,qj->kij", self.t, vk, self.t)
        return vj, vk

    def transformed(self, t: np.ndarray) -> "Hamiltonian":
        """The same problem in the basis φ T (T (n, m), full column rank)."""
        t_total = t if self.t is None else self.t @ t
        return dataclasses.replace(self, s=t.T @ self.s @ t, h=t.T @ self.h @ t, t=t_total)


#: Largest basis for which the ERI is kept in memory (8-fold packed: n⁴/8 doubles).
INCORE_NAO = 120

#: OpenMP threads of pyscf's kernels (J/K, its matrix products) during an in-core run.
#: At the bench's sizes (n ≲ 40) one J/K contraction takes ~1 ms on one thread, and
#: extra threads only add synchronisation (measured 40× slower with 2 threads on a
#: busy 2-core machine).
IN_CORE_THREADS = 1


def hamiltonian_for(problem: Problem) -> Hamiltonian:
    """Integrals of ``problem`` from pyscf (the molecule the reference uses; bohr, Eh)."""
    mol = problem.to_pyscf()
    s = mol.intor_symmetric("int1e_ovlp")
    h = mol.intor_symmetric("int1e_kin") + mol.intor_symmetric("int1e_nuc")
    eri = mol.intor("int2e", aosym="s8") if mol.nao_nr() <= INCORE_NAO else None
    return Hamiltonian(method=problem.method, n_alpha=problem.n_alpha, n_beta=problem.n_beta,
                       s=s, h=h, e_nuc=float(mol.energy_nuc()), mol=mol, eri=eri)


# --------------------------------------------------------------------------- orbitals


@dataclasses.dataclass(frozen=True, eq=False)
class Orbitals:
    """Orbital sets c (k, n, nmo) and occupations occ (k, nmo): k = 2 for UHF (alpha,
    beta; occupations 0/1), else 1 (RHF 0/2; ROHF 0/1/2)."""

    c: np.ndarray
    occ: np.ndarray


def canonical_orthogonaliser(s: np.ndarray) -> np.ndarray:
    """X = U σ^(−½) over the eigenpairs of S with σ ≥ LINEAR_DEPENDENCE; XᵀSX = 1."""
    sigma, u = np.linalg.eigh(s)
    keep = sigma >= LINEAR_DEPENDENCE
    return u[:, keep] / np.sqrt(sigma[keep])


def _fill(values: np.ndarray, ham: Hamiltonian, descending: bool) -> np.ndarray:
    """Aufbau occupations for sorted-by-value orbitals: one row per component."""
    order = np.argsort(-values if descending else values, axis=-1, kind="stable")
    occ = np.zeros_like(values)
    if ham.method == "uhf":
        occ[0, order[0, :ham.n_alpha]] = 1.0
        occ[1, order[1, :ham.n_beta]] = 1.0
    elif ham.method == "rhf":
        occ[0, order[0, :ham.n_alpha]] = 2.0
    else:
        occ[0, order[0, :ham.n_alpha]] = 1.0
        occ[0, order[0, :ham.n_beta]] = 2.0
    return occ


def orbitals_from_fock(ham: Hamiltonian, f: np.ndarray, xc: np.ndarray) -> tuple[Orbitals,
                                                                                  np.ndarray]:
    """Diagonalise F C = S C ε per component (xc: canonical orthogonaliser) and occupy by
    aufbau. Returns (orbitals, ε (k, nmo))."""
    es, cs = [], []
    for fk in f:
        e, cp = np.linalg.eigh(xc.T @ fk @ xc)
        es.append(e)
        cs.append(xc @ cp)
    e = np.array(es)
    return Orbitals(np.array(cs), _fill(e, ham, descending=False)), e


def orbitals_from_density(ham: Hamiltonian, d: np.ndarray, xc: np.ndarray) -> Orbitals:
    """Natural orbitals of D per component (eigenvectors U of Xᵀ S D S X, C = X U) with
    the largest occupations filled by the aufbau rule: the nearest idempotent density."""
    sx = ham.s @ xc
    nus, cs = [], []
    for dk in d:
        nu, u = np.linalg.eigh(sx.T @ dk @ sx)
        nus.append(nu)
        cs.append(xc @ u)
    nu = np.array(nus)
    return Orbitals(np.array(cs), _fill(nu, ham, descending=True))


def spin_densities(ham: Hamiltonian, orb: Orbitals) -> np.ndarray:
    """RHF: total P (1, n, n); UHF: (Pα, Pβ); ROHF: (Pα, Pβ) from occupations ≥ 1 and = 2.

    Pσ_μν = Σ_i nσ_i C_μi C_νi.
    """
    if ham.method == "rohf":
        c, occ = orb.c[0], orb.occ[0]
        return np.stack([(c * (occ >= 1)) @ c.T, (c * (occ >= 2)) @ c.T])
    return np.einsum("kmi,ki,kni->kmn", orb.c, orb.occ, orb.c)


def fock_matrices(ham: Hamiltonian, d: np.ndarray) -> np.ndarray:
    """RHF: F = H + J(P) − ½K(P) (1, n, n); UHF/ROHF: Fσ = H + J(Pα+Pβ) − K(Pσ) (2, n, n)."""
    j, k = ham.jk(d)
    return fock_from_terms(ham.h, j, k, len(d))


def energy_of(ham: Hamiltonian, d: np.ndarray, f: np.ndarray) -> float:
    """E = ½ Σ_k Tr[P_k (H + F_k)] + E_nuc (RHF: total P; UHF/ROHF: per spin), Eh."""
    return float(0.5 * sum(np.sum(dk * (ham.h + fk)) for dk, fk in zip(d, f)) + ham.e_nuc)


def roothaan_fock(ham: Hamiltonian, f: np.ndarray, orb: Orbitals) -> np.ndarray:
    """Roothaan's ROHF effective Fock (n, n) in the AO basis: S C R Cᵀ S with R the block
    matrix of the module docstring in the basis of the current orbitals."""
    c, occ = orb.c[0], orb.occ[0]
    fa, fb = c.T @ f[0] @ c, c.T @ f[1] @ c
    r = 0.5 * (fa + fb)
    closed, open_ = occ >= 2, occ == 1
    virtual = ~(closed | open_)
    for a, b, m in ((closed, open_, fb), (open_, virtual, fa)):
        r[np.ix_(a, b)] = m[np.ix_(a, b)]
        r[np.ix_(b, a)] = m[np.ix_(b, a)]
    sc = ham.s @ c
    return sc @ r @ sc.T


def working_pair(ham: Hamiltonian, f: np.ndarray, d: np.ndarray, orb: Orbitals):
    """(F, P) handed to accelerators: RHF/UHF unchanged; ROHF (effective Fock, Pα + Pβ)."""
    if ham.method == "rohf":
        return roothaan_fock(ham, f, orb)[None], (d[0] + d[1])[None]
    return f, d


def convergence_measure(ham: Hamiltonian, f: np.ndarray, d: np.ndarray, low) -> float:
    """RHF/UHF: max|X(FPS − SPF)X| over components; ROHF: the largest ROHF gradient block
    (f, d the spin Fock matrices and densities). See harness.checks.stationarity."""
    if ham.method == "rohf":
        return rohf_conditions(f, d, low).value
    return commutator(f, d, ham.s, low).value


def error_matrices(f: np.ndarray, d: np.ndarray, s: np.ndarray, x: np.ndarray) -> np.ndarray:
    """e_k = X(F_k P_k S − S P_k F_k)X for each component of the working pair."""
    return np.array([x @ (fk @ dk @ s - s @ dk @ fk) @ x for fk, dk in zip(f, d)])


# --------------------------------------------------------------------------- guesses


def core_guess(ham: Hamiltonian) -> Orbitals:
    """The generalised Wolfsberg–Helmholz guess: diagonalise G with G_μμ = H_μμ,
    G_μν = ½ K (H_μμ + H_νν) S_μν, K = WOLFSBERG_HELMHOLZ, and occupy by aufbau
    (the same orbitals for both spins under UHF)."""
    hd = np.diag(ham.h)
    g = 0.5 * WOLFSBERG_HELMHOLZ * (hd[:, None] + hd[None, :]) * ham.s
    np.fill_diagonal(g, hd)
    g = np.repeat(g[None], ham.n_components, axis=0)
    orb, _ = orbitals_from_fock(ham, g, canonical_orthogonaliser(ham.s))
    return orb


def rotated(orb: Orbitals, angle: float, rng: np.random.Generator) -> Orbitals:
    """Orbitals rotated by C ← C exp(κ), κ antisymmetric with random normal elements only
    between orbitals of different occupation, scaled so that its largest rotation angle
    (largest singular value) is ``angle`` (rad). Occupations are kept."""
    from scipy.linalg import expm

    cs = []
    for c, occ in zip(orb.c, orb.occ):
        mixes = occ[:, None] != occ[None, :]
        kappa = np.triu(rng.standard_normal((occ.size, occ.size)) * mixes, 1)
        kappa = kappa - kappa.T
        norm = np.linalg.norm(kappa, 2)
        if norm > 0:
            kappa *= angle / norm
        cs.append(c @ expm(kappa))
    return Orbitals(np.array(cs), orb.occ.copy())


# --------------------------------------------------------------------------- the run


@dataclasses.dataclass(frozen=True, eq=False)
class ScfRun:
    """One run of the harness loop (or of a native baseline). Energies in Eh.

    status: "converged", "not converged" (budget used up) or "failed" (``reason`` says
    why: an exception, a NaN, a wrong shape).
    fock_builds: Fock builds used (J/K of one state; see :func:`run_newton`).
    energy: E of the last state measured; measure: its convergence measure.
    history: (m, 3) rows (Fock builds so far, energy, measure), one per state measured.
    orbitals, density: the last state (density: spin densities, RHF the total).
    """

    status: str
    reason: str
    fock_builds: int
    energy: float
    measure: float
    seconds: float
    history: np.ndarray
    orbitals: Orbitals | None = None
    density: np.ndarray | None = None

    @property
    def converged(self) -> bool:
        return self.status == "converged"


def _fail(reason, builds, rows, start, orb=None, d=None) -> ScfRun:
    last = rows[-1] if rows else (builds, float("nan"), float("nan"))
    return ScfRun("failed", reason, builds, float(last[1]), float(last[2]),
                  time.perf_counter() - start, np.array(rows, dtype=float).reshape(-1, 3),
                  orb, d)


def _checked_output(out, shape: tuple[int, ...], what: str) -> np.ndarray:
    """The accelerator's matrix as a float array of ``shape``; ValueError if unusable."""
    try:
        a = np.array(out, dtype=np.float64)
    except (TypeError, ValueError):
        raise ValueError(f"returned {type(out).__name__}, not a numeric {what} array") from None
    if a.shape == shape[1:] and shape[0] == 1:
        a = a[None]
    if a.shape != shape:
        raise ValueError(f"returned a {what} of shape {a.shape}, expected {shape}")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"returned a {what} with NaN or inf")
    asym = np.abs(a - np.swapaxes(a, 1, 2)).max()
    if asym > SYMMETRY_TOLERANCE * max(1.0, np.abs(a).max()):
        raise ValueError(f"returned a non-symmetric {what} (max|A − Aᵀ| = {asym:.1e})")
    return 0.5 * (a + np.swapaxes(a, 1, 2))


def _threads(ham: Hamiltonian):
    """OpenMP threads for pyscf's small-matrix kernels while a run lasts (in-core only)."""
    from pyscf import lib

    return lib.with_omp_threads(IN_CORE_THREADS if ham.eri is not None else None)


def run_scf(ham: Hamiltonian, accelerator, start: Orbitals, *, convergence: float,
            problem: Problem | None = None, max_fock_builds: int = MAX_FOCK_BUILDS,
            record: list | None = None) -> ScfRun:
    """Run the harness SCF loop from ``start`` with ``accelerator`` (see module docstring).

    ``accelerator.reset(problem)`` is called first. ``record``, if a list, receives every
    (Iterate, returned array) pair, for the determinism property. Never raises for what
    the accelerator does: exceptions, NaNs and wrong shapes make a "failed" run.
    """
    with _threads(ham):
        return _run_scf(ham, accelerator, start, convergence=convergence, problem=problem,
                        max_fock_builds=max_fock_builds, record=record)


def _run_scf(ham, accelerator, start, *, convergence, problem, max_fock_builds, record):
    t0 = time.perf_counter()
    rows: list[tuple[float, float, float]] = []
    returns = getattr(accelerator, "returns", "fock")
    if returns not in RETURNS:
        return _fail(f"accelerator declares returns={returns!r}, expected 'fock' or "
                     f"'density'", 0, rows, t0)
    try:
        accelerator.reset(problem)
    except Exception as exc:  # the accelerator's own code
        return _fail(f"reset raised {first_line(exc)}", 0, rows, t0)
    low = lowdin(ham.s)
    xc = canonical_orthogonaliser(ham.s)
    orb = start
    for builds in range(1, max_fock_builds + 1):
        d = spin_densities(ham, orb)
        f = fock_matrices(ham, d)
        energy = energy_of(ham, d, f)
        measure = convergence_measure(ham, f, d, low)
        rows.append((builds, energy, measure))
        if not (np.isfinite(energy) and np.isfinite(measure)):
            return _fail(f"non-finite energy or measure at Fock build {builds}", builds, rows,
                         t0, orb, d)
        if measure <= convergence:
            return ScfRun("converged", "", builds, energy, measure, time.perf_counter() - t0,
                          np.array(rows), orb, d)
        if builds == max_fock_builds:
            break
        fw, dw = working_pair(ham, f, d, orb)
        it = Iterate(iteration=builds, method=ham.method, fock=_frozen(fw),
                     density=_frozen(dw), overlap=_frozen(ham.s),
                     core_hamiltonian=_frozen(ham.h), energy=energy,
                     error=_frozen(error_matrices(fw, dw, ham.s, low.x)), measure=measure,
                     x=_frozen(low.x), convergence=convergence)
        try:
            out = accelerator.step(it)
        except Exception as exc:  # the accelerator's own code
            return _fail(f"step raised {first_line(exc)} at Fock build {builds}", builds,
                         rows, t0, orb, d)
        try:
            a = _checked_output(out, fw.shape, returns)
        except ValueError as exc:
            return _fail(f"accelerator {exc} at Fock build {builds}", builds, rows, t0, orb, d)
        if record is not None:
            record.append((it, a))
        if returns == "fock":
            orb, _ = orbitals_from_fock(ham, a, xc)
        else:
            orb = orbitals_from_density(ham, a, xc)
    last = rows[-1]
    return ScfRun("not converged", f"measure {last[2]:.1e} > {convergence:.0e} after "
                  f"{max_fock_builds} Fock builds", max_fock_builds, last[1], last[2],
                  time.perf_counter() - t0, np.array(rows), orb, d)


# --------------------------------------------------------------------------- baselines


class Roothaan:
    """Plain Roothaan iterations: diagonalise the Fock of the current density."""

    name = "roothaan"
    returns = "fock"

    def reset(self, problem):
        pass

    def step(self, it: Iterate) -> np.ndarray:
        return it.fock


class Damping:
    """Fock damping: F_in(k) = (1 − w) F(P_k) + w F_in(k−1), w = DAMPING (F_in(1) = F(P_1))."""

    name = "damping"
    returns = "fock"

    def __init__(self, weight: float = DAMPING):
        self.weight = weight
        self.previous = None

    def reset(self, problem):
        self.previous = None

    def step(self, it: Iterate) -> np.ndarray:
        f = np.array(it.fock)
        if self.previous is not None:
            f = (1.0 - self.weight) * f + self.weight * self.previous
        self.previous = f
        return f


def _pyscf_layout(a: np.ndarray) -> np.ndarray:
    """pyscf's array layout: one component → (n, n); UHF → (2, n, n)."""
    return np.array(a[0] if a.shape[0] == 1 else a)


class _EnergyOnly:
    """Stands in for the pyscf SCF object that EDIIS asks for E[P]: returns the energy of
    the iterate being handed over (E_nuc included — a constant shift, which leaves the
    EDIIS coefficients, constrained to Σc = 1, unchanged)."""

    def __init__(self, energy: float):
        self.energy = energy

    def energy_elec(self, *args, **kwargs):
        return self.energy, 0.0


class PyscfDIIS:
    """pyscf's own DIIS-type accelerators (``pyscf.scf.diis``), driven through the harness
    loop exactly as pyscf's SCF driver calls them: ``update(S, P, F, mf, h1e, vhf)`` with
    the working pair in pyscf's layout, subspace PYSCF_DIIS_SPACE; CDIIS with its error
    vector in the Löwdin basis (``Corth`` = X; any orthonormal basis gives the same
    coefficients)."""

    returns = "fock"

    def __init__(self, kind: str):
        if kind not in ("cdiis", "ediis", "adiis"):
            raise ValueError(f"unknown pyscf DIIS kind {kind!r}")
        self.kind = kind
        self.name = f"pyscf-{kind}"
        self._diis = None

    def reset(self, problem):
        from pyscf.scf import diis

        cls = {"cdiis": diis.CDIIS, "ediis": diis.EDIIS, "adiis": diis.ADIIS}[self.kind]
        self._diis = cls()
        self._diis.verbose = 0
        self._diis.space = PYSCF_DIIS_SPACE
        self._diis.incore = True

    def step(self, it: Iterate) -> np.ndarray:
        f, d = _pyscf_layout(it.fock), _pyscf_layout(it.density)
        if self.kind == "cdiis":
            self._diis.Corth = np.array(it.x)
            out = self._diis.update(np.array(it.overlap), d, f)
        else:
            out = self._diis.update(np.array(it.overlap), d, f, _EnergyOnly(it.energy),
                                    None, None)
        return np.asarray(out)


class _BudgetUsed(Exception):
    pass


class _Converged(Exception):
    pass


def run_newton(ham: Hamiltonian, start: Orbitals, *, convergence: float,
               max_fock_builds: int = MAX_FOCK_BUILDS) -> ScfRun:
    """pyscf's second-order SCF from ``start``; see :func:`_run_newton`."""
    with _threads(ham):
        return _run_newton(ham, start, convergence=convergence,
                           max_fock_builds=max_fock_builds)


def _run_newton(ham: Hamiltonian, start: Orbitals, *, convergence: float,
                max_fock_builds: int = MAX_FOCK_BUILDS) -> ScfRun:
    """pyscf's second-order SCF (``mf.newton()``, augmented-Hessian orbital rotations)
    from ``start``, with our convergence measure as its convergence test.

    Counting: every call of ``get_jk`` on the SCF objects (Fock builds and the
    orbital-Hessian products of the inner solver alike) is counted as the number of
    densities it contracts divided by the components of one Fock build (1 RHF, 2 UHF and
    ROHF), i.e. in units of one Fock build. The run stops when the measure of a
    macro-iteration's state (``check_convergence``, from pyscf's own F and P, no extra
    build) is ≤ convergence, or when the budget is used up. Only AO-basis Hamiltonians.
    """
    from pyscf import scf

    t0 = time.perf_counter()
    if ham.t is not None:
        raise ValueError("run_newton needs the AO basis of the molecule")
    cls = {"rhf": scf.RHF, "uhf": scf.UHF, "rohf": scf.ROHF}[ham.method]
    mf = cls(ham.mol)
    mf.verbose = 0
    if ham.eri is not None:
        mf._eri = ham.eri
    per_build = 1 if ham.method == "rhf" else 2
    nao = ham.s.shape[0]
    count = [0]
    rows: list[tuple[float, float, float]] = []
    low = lowdin(ham.s)
    state: dict[str, Any] = {}

    def counted(jk):
        def get_jk(mol=None, dm=None, *args, **kwargs):
            n = np.asarray(dm).size // (nao * nao)
            if (count[0] + n / per_build) > max_fock_builds + 1e-9:
                raise _BudgetUsed
            count[0] += n / per_build
            return jk(mol, dm, *args, **kwargs)
        return get_jk

    def check(envs) -> bool:
        d = np.asarray(envs["dm"])
        vhf = np.asarray(envs["vhf"])
        f = (envs["h1e"] + vhf)
        d3, f3 = (d[None], f[None]) if ham.method == "rhf" else (d, f)
        measure = convergence_measure(ham, f3, d3, low)
        energy = float(envs["e_tot"])
        rows.append((count[0], energy, measure))
        state.update(mo_coeff=envs["mo_coeff"], mo_occ=envs["mo_occ"], d=d3)
        if measure <= convergence:
            raise _Converged
        return False

    newton = mf.newton()
    newton.verbose = 0
    newton.max_cycle = NEWTON_MAX_MACRO
    newton.conv_tol_grad = NEWTON_GRADIENT_FRACTION * convergence
    newton.check_convergence = check
    for obj in (newton, newton._scf):
        obj.get_jk = counted(obj.get_jk)
    c = start.c[0] if ham.method != "uhf" else start.c
    occ = start.occ[0] if ham.method != "uhf" else start.occ
    status, reason = "not converged", ""
    try:
        newton.kernel(c, occ)
        reason = f"pyscf stopped after {NEWTON_MAX_MACRO} macro-iterations"
    except _Converged:
        status = "converged"
    except _BudgetUsed:
        reason = f"budget of {max_fock_builds} Fock builds used up"
    except Exception as exc:  # pyscf's solver on a hard case
        status, reason = "failed", f"pyscf newton raised {first_line(exc)}"
    builds = int(np.ceil(count[0] - 1e-9))
    if not rows:
        return ScfRun("failed" if status == "failed" else "not converged",
                      reason or "no macro-iteration finished", builds, float("nan"),
                      float("nan"), time.perf_counter() - t0, np.zeros((0, 3)))
    if status == "not converged" and rows:
        last = rows[-1]
        reason = f"measure {last[2]:.1e} > {convergence:.0e}: " + reason
    last = rows[-1]
    mo_c, mo_occ = np.asarray(state["mo_coeff"]), np.asarray(state["mo_occ"])
    orb = Orbitals(mo_c if mo_c.ndim == 3 else mo_c[None],
                   mo_occ if mo_occ.ndim == 2 else mo_occ[None])
    return ScfRun(status, reason, builds, last[1], last[2], time.perf_counter() - t0,
                  np.array(rows, dtype=float), orb, state["d"])


#: Baselines run through the harness loop: name → factory of a fresh accelerator.
LOOP_BASELINES: dict[str, Callable[[], Any]] = {
    "roothaan": Roothaan,
    "damping": Damping,
    "pyscf-cdiis": lambda: PyscfDIIS("cdiis"),
    "pyscf-ediis": lambda: PyscfDIIS("ediis"),
    "pyscf-adiis": lambda: PyscfDIIS("adiis"),
}
#: Baselines run natively by pyscf's driver.
NATIVE_BASELINES = ("pyscf-newton",)
BASELINE_NAMES = tuple(LOOP_BASELINES) + NATIVE_BASELINES


# --------------------------------------------------------------------------- loading


def accelerator_name(obj) -> str:
    """``obj.name`` if it has one, else its class name."""
    name = getattr(obj, "name", None)
    if isinstance(name, str) and name:
        return name
    return obj.__name__ if isinstance(obj, type) else type(obj).__name__


def as_factory(obj) -> Callable[[], Any]:
    """A zero-argument factory of accelerators from a class, a zero-argument factory
    function or an instance (reused: ``reset`` is called before every run). Raises
    PluginLoadError (one line) if the objects made lack ``reset`` or ``step``."""
    if isinstance(obj, type):
        factory = obj
    elif hasattr(obj, "step") and hasattr(obj, "reset"):
        return lambda: obj
    elif callable(obj):
        factory = obj
    else:
        raise PluginLoadError(f"accelerator {accelerator_name(obj)!r} has no step/reset "
                              f"methods")

    def make():
        acc = factory()
        missing = [m for m in ("reset", "step") if not callable(getattr(acc, m, None))]
        if missing:
            raise PluginLoadError(f"accelerator {accelerator_name(acc)!r} lacks "
                                  f"{' and '.join(missing)} (see harness.accelerators)")
        return acc

    make()  # fail early, at load time
    return make


class AcceleratorTimeout(Exception):
    """A call of the accelerator took longer than its time limit."""


@contextlib.contextmanager
def _alarm(seconds: float, message: str):
    """Raise AcceleratorTimeout(message) in this thread after ``seconds`` (SIGALRM; in
    any other than the main thread no limit applies)."""
    if not seconds or threading.current_thread() is not threading.main_thread():
        yield
        return

    def ring(signum, frame):
        raise AcceleratorTimeout(message)

    before = signal.signal(signal.SIGALRM, ring)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, before)


class _TimeLimited:
    """An accelerator whose ``reset`` and ``step`` calls each get ``seconds``."""

    def __init__(self, inner, seconds: float):
        self._inner = inner
        self._seconds = seconds
        self.returns = getattr(inner, "returns", "fock")

    def __getattr__(self, name):  # anything else the accelerator offers
        if name.startswith("_"):
            raise AttributeError(name)
        return getattr(self._inner, name)

    def _call(self, what: str, arg):
        with _alarm(self._seconds, f"{what} took longer than {self._seconds:g} s"):
            return getattr(self._inner, what)(arg)

    def reset(self, problem):
        return self._call("reset", problem)

    def step(self, it):
        return self._call("step", it)


def time_limited(factory: Callable[[], Any], seconds: float | None = ACCELERATOR_CALL_LIMIT
                 ) -> Callable[[], Any]:
    """A factory of the same accelerators whose every ``reset``/``step`` call raises
    AcceleratorTimeout after ``seconds`` (None or 0: no limit). The harness loop turns
    that into a failed run; the bench, into a failed property."""
    if not seconds:
        return factory
    return lambda: _TimeLimited(factory(), seconds)


def load_accelerator(spec_or_object) -> tuple[str, Callable[[], Any]]:
    """(name, factory) from ``MODULE:NAME`` / ``path.py:NAME`` or an object (class or
    instance). Raises PluginLoadError (one line) for a bad spec or object."""
    obj = spec_or_object
    if isinstance(spec_or_object, str):
        from harness.plugins import load_object

        obj = load_object(spec_or_object, kind="accelerator")
    factory = as_factory(obj)
    return accelerator_name(obj), factory


# --------------------------------------------------------------------------- properties

#: Fixed point: max|F_returned − F_converged| allowed when handed a converged state (Eh).
#: The state is converged to FIXED_POINT_CONVERGENCE, so an accelerator that keeps it
#: moves it by about that much (DIIS: the residual error mixes older Fock matrices in
#: with weights ~ |e|); one that perturbs a converged state moves it by far more.
FIXED_POINT_TOLERANCE = 1e-8
#: Measure to which the fixed-point property converges the state it hands over (the
#: default criterion, 1e-6, leaves DIIS room to move F by ~1e-7).
FIXED_POINT_CONVERGENCE = 1e-10
#: Invariance: iteration counts may differ by this many Fock builds (round-off can tip the
#: last comparison with the threshold) ...
INVARIANCE_BUILDS = 1
#: ... and final energies by this much (Eh): the same state to well below the 1e-6 Eh
#: state-matching tolerance.
INVARIANCE_ENERGY = 1e-8


@dataclasses.dataclass(frozen=True)
class PropertyResult:
    """One accelerator property: name, passed (None: not applicable), the measured value
    and what it means."""

    name: str
    passed: bool | None
    value: float
    detail: str


def converged_iterate(ham: Hamiltonian, run: ScfRun, convergence: float) -> Iterate:
    """The Iterate of the final state of a converged run (as the loop would build it)."""
    low = lowdin(ham.s)
    d = spin_densities(ham, run.orbitals)
    f = fock_matrices(ham, d)
    fw, dw = working_pair(ham, f, d, run.orbitals)
    return Iterate(iteration=run.fock_builds, method=ham.method, fock=_frozen(fw),
                   density=_frozen(dw), overlap=_frozen(ham.s), core_hamiltonian=_frozen(ham.h),
                   energy=energy_of(ham, d, f), error=_frozen(error_matrices(fw, dw, ham.s,
                                                                             low.x)),
                   measure=convergence_measure(ham, f, d, low), x=_frozen(low.x),
                   convergence=convergence)


def fixed_point(factory, problem: Problem, ham: Hamiltonian, history: list) -> PropertyResult:
    """Handed a converged state (after the ``history`` of Iterates of the run that led
    there), the accelerator returns it unchanged: max|A − F| (Fock) or max|A − P|
    (density) ≤ FIXED_POINT_TOLERANCE, both with a fresh accelerator and after history."""
    acc = factory()
    kind = getattr(acc, "returns", "fock")
    final = history[-1]
    worst = 0.0
    for prefix in ([], history[:-1]):
        acc.reset(problem)
        for it in prefix:
            acc.step(it)
        out = _checked_output(acc.step(final), final.fock.shape, kind)
        target = final.fock if kind == "fock" else final.density
        worst = max(worst, float(np.abs(out - target).max()))
    return PropertyResult("fixed-point", worst <= FIXED_POINT_TOLERANCE, worst,
                          f"max|returned − converged {kind}| = {worst:.1e} "
                          f"(tolerance {FIXED_POINT_TOLERANCE:.0e})")


def determinism(factory, problem: Problem, ham: Hamiltonian, start: Orbitals,
                convergence: float) -> PropertyResult:
    """Two runs from the same inputs give bitwise the same sequence of states
    (energies and measures) and of returned matrices."""
    recs, runs = [], []
    for _ in range(2):
        rec: list = []
        runs.append(run_scf(ham, factory(), start, convergence=convergence, problem=problem,
                            record=rec))
        recs.append(rec)
    same_hist = (runs[0].history.shape == runs[1].history.shape
                 and np.array_equal(runs[0].history, runs[1].history))
    same_out = len(recs[0]) == len(recs[1]) and all(
        np.array_equal(a[1], b[1]) for a, b in zip(recs[0], recs[1]))
    diff = 0.0 if same_hist else float("inf")
    if same_hist and not same_out:
        diff = max(float(np.abs(a[1] - b[1]).max()) for a, b in zip(recs[0], recs[1]))
    return PropertyResult("determinism", same_hist and same_out, diff,
                          f"{len(recs[0])} steps, histories "
                          f"{'identical' if same_hist else 'differ'}, returned matrices "
                          f"{'identical' if same_out else 'differ'}")


def invariance(factory, problem: Problem, ham: Hamiltonian, start: Orbitals,
               t: np.ndarray, convergence: float, label: str = "another basis"
               ) -> PropertyResult:
    """The same problem in the basis φ T (``ham.transformed(t)``, start orbitals
    T⁻¹C) converges in the same number of Fock builds (± INVARIANCE_BUILDS) to the same
    energy (± INVARIANCE_ENERGY Eh)."""
    a = run_scf(ham, factory(), start, convergence=convergence, problem=problem)
    ham_t = ham.transformed(t)
    tinv = np.linalg.solve(t, np.eye(t.shape[0]))
    start_t = Orbitals(np.einsum("pq,kqi->kpi", tinv, start.c), start.occ)
    b = run_scf(ham_t, factory(), start_t, convergence=convergence, problem=problem)
    return compare_runs("invariance", label, a, b)


def compare_runs(name: str, label: str, a: ScfRun, b: ScfRun) -> PropertyResult:
    """Invariance verdict for two runs of the same problem: both converged, Fock builds
    within INVARIANCE_BUILDS and energies within INVARIANCE_ENERGY Eh. One converged and
    the other not fails; neither converged is not applicable (passed None)."""
    builds = abs(a.fock_builds - b.fock_builds)
    de = abs(a.energy - b.energy)
    text = (f"{label}: {a.fock_builds} vs {b.fock_builds} Fock builds "
            f"({a.status} / {b.status}), |ΔE| = {de:.1e} Eh")
    if not (a.converged or b.converged):
        return PropertyResult(name, None, float(builds), "n.a.: neither run converged; " + text)
    ok = a.converged and b.converged and builds <= INVARIANCE_BUILDS and de <= INVARIANCE_ENERGY
    return PropertyResult(name, ok, float(builds), text)


def degenerate_subspace(factory, problem: Problem, ham: Hamiltonian, it: Iterate,
                        repeats: int = 4) -> PropertyResult:
    """Handed the same iterate ``repeats`` times (linearly dependent error vectors, a
    singular DIIS system), the accelerator returns only finite matrices."""
    acc = factory()
    acc.reset(problem)
    kind = getattr(acc, "returns", "fock")
    bad = 0
    for k in range(repeats):
        out = np.array(acc.step(it.replace(iteration=it.iteration + k)), dtype=float)
        bad += int(not np.all(np.isfinite(out)))
    return PropertyResult("no-nan-degenerate", bad == 0, float(bad),
                          f"{bad} of {repeats} returned {kind} matrices non-finite for "
                          f"identical error vectors")
