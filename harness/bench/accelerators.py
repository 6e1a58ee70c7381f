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
  read-only :class:`harness.contract.problem.Problem`; forget all history here;
* ``step(iterate) -> array``: called once per iteration with a frozen :class:`Iterate`;
  returns the Fock matrix to diagonalise next, with the shape of ``iterate.fock``
  (``(n, n)`` is accepted when there is one component);
* ``returns``: ``"fock"`` (default) or ``"density"``; a density accelerator returns a
  density with the shape of ``iterate.density`` instead;
* ``name`` (optional): shown in the tables (default: the class name).

``scf-harness bench MODULE:ACCELERATOR`` (:func:`load_accelerator`) accepts exactly two
things: a *class*, instantiated with no arguments for every run (and once at load, to
check it), or an *instance*, any other object with callable ``reset`` and ``step`` (used
as it is; ``reset`` is called before each run). Nothing else is called: a function, a
method, a module or a number is refused at load, uncalled. A load problem — the class
lacks ``reset``/``step``, creating it raises, ``returns`` is not ``"fock"`` or
``"density"``, reading an attribute raises — is a one-line
:class:`harness.contract.errors.PluginLoadError` naming the spec (a usage error: exit 2). The name
shown is ``name`` (or the class name) without control characters, at most
:data:`NAME_LENGTH` characters. The bundled example is
:class:`harness.bench.example_accelerator.CommutatorDIIS`. The bench runs a spec's
accelerator in its own process behind the closed channel (:mod:`harness.bench.isolated`);
the functions here call whatever object they are given, in this process.

Whatever the accelerator's code raises during a run — any exception, ``SystemExit``
(``sys.exit``), ``GeneratorExit`` or another ``BaseException`` — fails that run (or that
property) with a one-line reason; only ``KeyboardInterrupt`` stops the bench. So does an
unusable return value (:class:`ProtocolError`: not numeric, complex, wrong shape, NaN,
non-symmetric) and a call over its time limit (:class:`AcceleratorTimeout`, which user
code's ``except Exception`` does not catch).

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
import inspect
import re
import signal
import threading
import time
import unicodedata
from typing import Any, Callable

import numpy as np

from harness.checks.energy import fock_from_terms
from harness.checks.orthonormal import LINEAR_DEPENDENCE, lowdin
from harness.checks.stationarity import commutator, rohf_conditions
from harness.contract.errors import PluginLoadError, first_line
from harness.contract.problem import Problem

#: Fock builds allowed per run (the same budget for every method).
MAX_FOCK_BUILDS = 100

#: Seconds one call of a user's accelerator (``reset`` or ``step``) may take before the
#: run fails with "took longer than …" (:func:`time_limited`). A step is a small linear
#: problem (a DIIS solve takes milliseconds), so a minute means the accelerator hangs.
ACCELERATOR_CALL_LIMIT = 60.0
#: Largest call limit accepted (s, about 11.6 days): the interval timer behind the limit
#: cannot hold much longer ones (1e10 s overflows it), and no step should take days.
MAX_CALL_LIMIT = 1e6

#: Longest accelerator name shown (characters; a longer one is cut and ends in "…").
NAME_LENGTH = 40

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
        from harness.backend.baselines import jk_direct, jk_incore

        if self.t is not None:
            d = np.einsum("pi,kij,qj->kpq", self.t, d, self.t)
        d = np.ascontiguousarray(d)
        if self.eri is not None:
            vj, vk = jk_incore(self.eri, d, IN_CORE_THREADS)
        else:
            vj, vk = jk_direct(self.mol, d)
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
    from harness.backend.baselines import hamiltonian_integrals

    mol, s, h, e_nuc, eri = hamiltonian_integrals(problem, INCORE_NAO)
    return Hamiltonian(method=problem.method, n_alpha=problem.n_alpha, n_beta=problem.n_beta,
                       s=s, h=h, e_nuc=e_nuc, mol=mol, eri=eri)


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


class ProtocolError(ValueError):
    """The accelerator broke the protocol (an unusable return value or declaration); the
    message says how, e.g. "returned a fock of shape (6, 6), expected (1, 7, 7)"."""


def _as_matrix(out, shape: tuple[int, ...], what: str) -> np.ndarray:
    """The accelerator's matrix as a real float array of ``shape`` (``(n, n)`` accepted for
    one component); ProtocolError if it is not numeric, complex or of another shape."""
    try:
        a = np.asarray(out)
        complex_ = np.iscomplexobj(a)
        if not complex_:
            a = np.array(a, dtype=np.float64)
    except KeyboardInterrupt:
        raise
    except (TypeError, ValueError):
        raise ProtocolError(f"returned {type(out).__name__}, not a numeric {what} "
                            f"array") from None
    except BaseException as exc:  # the object's own __array__, or a number beyond float
        raise ProtocolError(f"returned {type(out).__name__}, not a numeric {what} array "
                            f"({first_line(exc)})") from None
    if complex_:
        raise ProtocolError(f"returned a complex {what}")
    if a.shape == shape[1:] and shape[0] == 1:
        a = a[None]
    if a.shape != shape:
        raise ProtocolError(f"returned a {what} of shape {a.shape}, expected {shape}")
    return a


def _checked_output(out, shape: tuple[int, ...], what: str) -> np.ndarray:
    """The accelerator's matrix as a finite symmetric float array of ``shape``
    (symmetrised: ½(A + Aᵀ)); ProtocolError (a ValueError) if unusable."""
    a = _as_matrix(out, shape, what)
    if not np.all(np.isfinite(a)):
        raise ProtocolError(f"returned a {what} with NaN or inf")
    asym = np.abs(a - np.swapaxes(a, 1, 2)).max()
    if asym > SYMMETRY_TOLERANCE * max(1.0, np.abs(a).max()):
        raise ProtocolError(f"returned a non-symmetric {what} (max|A − Aᵀ| = {asym:.1e})")
    return 0.5 * (a + np.swapaxes(a, 1, 2))


def _short(value) -> str:
    """``value`` for a one-line message: ``=repr`` of a plain scalar or string (cut at
    NAME_LENGTH characters), else `` of type T``."""
    if value is None or type(value) in (str, bool, int, float):
        try:
            text = repr(value)
        except ValueError:  # an int too long to print
            text = "a huge int"
        return "=" + (text if len(text) <= NAME_LENGTH else text[:NAME_LENGTH - 1] + "…")
    return f" of type {type(value).__name__}"


def declared_returns(accelerator) -> str:
    """``accelerator.returns`` ("fock" when absent); ProtocolError if it is not one of
    RETURNS (the exact string) or reading it raises."""
    try:
        returns = getattr(accelerator, "returns", "fock")
    except KeyboardInterrupt:
        raise
    except BaseException as exc:  # a property of the user's code
        raise ProtocolError(f"reading its returns attribute raised {first_line(exc)}") from None
    if not (isinstance(returns, str) and returns in RETURNS):
        raise ProtocolError(f"declares returns{_short(returns)}, expected 'fock' or "
                            f"'density'")
    return returns


def _threads(ham: Hamiltonian):
    """OpenMP threads for pyscf's small-matrix kernels while a run lasts (in-core only)."""
    from harness.backend.baselines import omp_threads

    return omp_threads(IN_CORE_THREADS if ham.eri is not None else None)


def run_scf(ham: Hamiltonian, accelerator, start: Orbitals, *, convergence: float,
            problem: Problem | None = None, max_fock_builds: int = MAX_FOCK_BUILDS,
            record: list | None = None) -> ScfRun:
    """Run the harness SCF loop from ``start`` with ``accelerator`` (see module docstring).

    ``accelerator.reset(problem)`` is called first. ``record``, if a list, receives every
    (Iterate, returned array) pair, for the determinism property. Never raises for what
    the accelerator does: whatever it raises (except KeyboardInterrupt), NaNs and wrong
    shapes make a "failed" run.
    """
    with _threads(ham):
        return _run_scf(ham, accelerator, start, convergence=convergence, problem=problem,
                        max_fock_builds=max_fock_builds, record=record)


def _run_scf(ham, accelerator, start, *, convergence, problem, max_fock_builds, record):
    t0 = time.perf_counter()
    rows: list[tuple[float, float, float]] = []
    try:
        returns = declared_returns(accelerator)
    except ProtocolError as exc:
        return _fail(f"accelerator {exc}", 0, rows, t0)
    try:
        accelerator.reset(problem)
    except KeyboardInterrupt:
        raise
    except BaseException as exc:  # the accelerator's own code, sys.exit included
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
        except KeyboardInterrupt:
            raise
        except BaseException as exc:  # the accelerator's own code, sys.exit included
            return _fail(f"step raised {first_line(exc)} at Fock build {builds}", builds,
                         rows, t0, orb, d)
        try:
            a = _checked_output(out, fw.shape, returns)
        except ProtocolError as exc:
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


def run_fresh(factory: Callable[[], Any], ham: Hamiltonian, start: Orbitals, *,
              convergence: float, problem: Problem | None = None,
              max_fock_builds: int = MAX_FOCK_BUILDS, record: list | None = None) -> ScfRun:
    """:func:`run_scf` with a new accelerator from ``factory()``. Creating it is part of
    the run: if that raises (anything but KeyboardInterrupt) or makes an object that
    breaks the protocol, the run is "failed" with the reason."""
    t0 = time.perf_counter()
    try:
        accelerator = factory()
    except KeyboardInterrupt:
        raise
    except ProtocolError as exc:
        return _fail(f"accelerator {exc}", 0, [], t0)
    except BaseException as exc:  # the accelerator's constructor
        return _fail(f"creating the accelerator raised {first_line(exc)}", 0, [], t0)
    return run_scf(ham, accelerator, start, convergence=convergence, problem=problem,
                   max_fock_builds=max_fock_builds, record=record)


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
        from harness.backend.baselines import pyscf_diis

        self._diis = pyscf_diis(self.kind)
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
    from harness.backend.baselines import newton_scf

    t0 = time.perf_counter()
    if ham.t is not None:
        raise ValueError("run_newton needs the AO basis of the molecule")
    newton = newton_scf(ham.method, ham.mol, ham.eri)
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

#: ANSI escape sequences (colours, cursor moves), removed from a displayed name.
_ANSI_ESCAPE = re.compile(r"\x1b\[[0-?]*[ -/]*[@-~]|\x1b.?")


def display_name(text: str) -> str:
    """``text`` fit for one line of a table or a plot legend: ANSI escapes and control
    characters removed (line breaks and tabs become spaces), runs of spaces collapsed, at
    most NAME_LENGTH characters (a longer one is cut and ends in "…")."""
    text = _ANSI_ESCAPE.sub("", text)
    text = "".join(" " if ch.isspace() else ch for ch in text
                   if ch.isspace() or unicodedata.category(ch)[0] != "C")
    text = " ".join(text.split())
    return text if len(text) <= NAME_LENGTH else text[:NAME_LENGTH - 1] + "…"


def _read(obj, attr: str):
    """``getattr(obj, attr, None)``; ProtocolError if reading it raises (a ``__getattr__``
    or property of the user's code)."""
    try:
        return getattr(obj, attr, None)
    except KeyboardInterrupt:
        raise
    except BaseException as exc:
        raise ProtocolError(f"reading its {attr} attribute raised {first_line(exc)}") from None


def accelerator_name(obj) -> str:
    """The name shown for ``obj``: its ``name`` if that is a string with something left
    after :func:`display_name`, else its class name (of ``obj`` itself for a class).
    ProtocolError if reading ``name`` raises."""
    name = _read(obj, "name")
    name = display_name(name) if isinstance(name, str) else ""
    cls = obj if isinstance(obj, type) else type(obj)
    return name or display_name(cls.__name__) or "accelerator"


def _missing(obj) -> list[str]:
    """Which of ``reset`` and ``step`` ``obj`` lacks as callables."""
    return [m for m in ("reset", "step") if not callable(_read(obj, m))]


def check_accelerator(obj):
    """``obj`` if it follows the protocol (callable ``reset`` and ``step``, ``returns``
    "fock", "density" or absent); else ProtocolError saying what is wrong."""
    missing = _missing(obj)
    if missing:
        raise ProtocolError(f"{type(obj).__name__} object lacks {' and '.join(missing)} "
                            f"(see harness.bench.accelerators)")
    declared_returns(obj)
    return obj


def _what(obj) -> str:
    """What ``obj`` is, in a few words ("a function", "a module", "an object of type float")."""
    if inspect.ismodule(obj):
        return "a module"
    if inspect.ismethod(obj):
        return "a method"
    if inspect.isroutine(obj):
        return "a function"
    return f"an object of type {type(obj).__name__}"


def as_factory(obj, label: str | None = None) -> Callable[[], Any]:
    """A zero-argument factory of accelerators from a class or an instance (the rule of
    the module docstring): for a class, each call makes a new instance with ``obj()``
    (made once here, to check it); for any other object with callable ``reset`` and
    ``step``, each call returns ``obj`` itself. Nothing else is called.

    Raises PluginLoadError (one line, naming ``label``, default the name) for anything
    else (a function, a method, a module, a number), a class that lacks ``reset`` or
    ``step``, a constructor that raises, or an object that breaks the protocol
    (:func:`check_accelerator`). Later calls raise what the constructor raises, or
    ProtocolError (:func:`run_fresh` makes either a failed run).
    """
    if label is None:
        try:
            label = accelerator_name(obj)
        except ProtocolError:
            label = type(obj).__name__

    def refused(why: str) -> PluginLoadError:
        return PluginLoadError(f"accelerator {label!r}: {why}")

    try:
        if isinstance(obj, type):
            missing = _missing(obj)
            if missing:
                raise refused(f"class {obj.__name__} lacks {' and '.join(missing)} (see "
                              f"harness.bench.accelerators)")

            def make():
                return check_accelerator(obj())

            try:
                make()  # fail early, at load time
            except (KeyboardInterrupt, ProtocolError):
                raise
            except BaseException as exc:  # the accelerator's constructor
                raise refused(f"creating it raised {first_line(exc)}") from None
            return make
        missing = _missing(obj)
        if len(missing) == 2:
            raise refused(f"it is {_what(obj)}, not an accelerator: give a class or an "
                          f"instance with reset and step methods (see harness.bench.accelerators)")
        check_accelerator(obj)
    except ProtocolError as exc:
        raise refused(str(exc)) from None
    return lambda: obj


class AcceleratorTimeout(BaseException):
    """A call of the accelerator took longer than its time limit.

    A BaseException (like KeyboardInterrupt), so that the accelerator's own
    ``except Exception`` cannot swallow it; the harness catches it around every call and
    fails the run or property."""


@contextlib.contextmanager
def _alarm(seconds: float, message: str):
    """Raise AcceleratorTimeout(message) in this thread after ``seconds`` (SIGALRM; in
    any other than the main thread no limit applies). If the code inside swallows it and
    returns, it is raised again on leaving."""
    if not seconds or threading.current_thread() is not threading.main_thread():
        yield
        return
    rang = []

    def ring(signum, frame):
        rang.append(True)
        raise AcceleratorTimeout(message)

    before = signal.signal(signal.SIGALRM, ring)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, before)
    if rang:  # the call caught it (``except BaseException``) and went on
        raise AcceleratorTimeout(message)


class _TimeLimited:
    """An accelerator whose ``reset`` and ``step`` calls each get ``seconds``; every other
    attribute (``returns``, ``name``, ...) is the accelerator's own."""

    def __init__(self, inner, seconds: float):
        self._inner = inner
        self._seconds = seconds

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
    """A factory of the same accelerators whose every ``reset``/``step`` call (and the
    ``factory()`` call itself) raises AcceleratorTimeout after ``seconds`` (None or 0: no
    limit; ValueError beyond MAX_CALL_LIMIT). The harness loop turns that into a failed
    run; the bench, into a failed property."""
    if not seconds:
        return factory
    if not 0 < seconds <= MAX_CALL_LIMIT:
        raise ValueError(f"call limit {seconds:g} s is not in (0, {MAX_CALL_LIMIT:g}] s")

    def make():
        with _alarm(seconds, f"creating it took longer than {seconds:g} s"):
            inner = factory()
        return _TimeLimited(inner, seconds)

    return make


def load_accelerator(spec_or_object) -> tuple[str, Callable[[], Any]]:
    """(name shown, factory) from ``MODULE:ACCELERATOR`` / ``path.py:ACCELERATOR`` or an
    object, by the rule of the module docstring (:func:`as_factory`; the name:
    :func:`accelerator_name`). Raises PluginLoadError (one line naming the spec) for a
    bad spec or object."""
    obj, label = spec_or_object, None
    if isinstance(spec_or_object, str):
        from harness.run.plugins import load_object

        obj = load_object(spec_or_object, kind="accelerator")
        label = spec_or_object
    try:
        name = accelerator_name(obj)
    except ProtocolError as exc:
        raise PluginLoadError(f"accelerator {label or type(obj).__name__!r}: {exc}") from None
    return name, as_factory(obj, label or name)


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
    kind = declared_returns(acc)
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
    (energies and measures) and of returned matrices. A failed run (the accelerator
    raised or returned something unusable) fails the property with its reason."""
    recs, runs = [], []
    for _ in range(2):
        rec: list = []
        runs.append(run_fresh(factory, ham, start, convergence=convergence, problem=problem,
                              record=rec))
        recs.append(rec)
    failed = [r for r in runs if r.status == "failed"]
    if failed:
        return PropertyResult("determinism", False, float("nan"),
                              f"a run failed: {failed[0].reason}")
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
    a = run_fresh(factory, ham, start, convergence=convergence, problem=problem)
    ham_t = ham.transformed(t)
    tinv = np.linalg.solve(t, np.eye(t.shape[0]))
    start_t = Orbitals(np.einsum("pq,kqi->kpi", tinv, start.c), start.occ)
    b = run_fresh(factory, ham_t, start_t, convergence=convergence, problem=problem)
    return compare_runs("invariance", label, a, b)


def compare_runs(name: str, label: str, a: ScfRun, b: ScfRun) -> PropertyResult:
    """Invariance verdict for two runs of the same problem: both converged, Fock builds
    within INVARIANCE_BUILDS and energies within INVARIANCE_ENERGY Eh. One converged and
    the other not fails; so does a failed run (the accelerator raised or returned
    something unusable: its reason is given); neither converged (the budget ran out) is
    not applicable (passed None)."""
    builds = abs(a.fock_builds - b.fock_builds)
    de = abs(a.energy - b.energy)
    text = (f"{label}: {a.fock_builds} vs {b.fock_builds} Fock builds "
            f"({a.status} / {b.status}), |ΔE| = {de:.1e} Eh")
    failed = [r for r in (a, b) if r.status == "failed"]
    if failed:
        return PropertyResult(name, False, float(builds),
                              f"{label}: a run failed: {failed[0].reason}")
    if not (a.converged or b.converged):
        return PropertyResult(name, None, float(builds), "n.a.: neither run converged; " + text)
    ok = a.converged and b.converged and builds <= INVARIANCE_BUILDS and de <= INVARIANCE_ENERGY
    return PropertyResult(name, ok, float(builds), text)


def degenerate_subspace(factory, problem: Problem, ham: Hamiltonian, it: Iterate,
                        repeats: int = 4) -> PropertyResult:
    """Handed the same iterate ``repeats`` times (linearly dependent error vectors, a
    singular DIIS system), the accelerator returns only finite matrices (converted as the
    loop converts them: ProtocolError if not numeric, complex or of the wrong shape)."""
    acc = factory()
    kind = declared_returns(acc)
    acc.reset(problem)
    bad = 0
    for k in range(repeats):
        out = _as_matrix(acc.step(it.replace(iteration=it.iteration + k)), it.fock.shape, kind)
        bad += int(not np.all(np.isfinite(out)))
    return PropertyResult("no-nan-degenerate", bad == 0, float(bad),
                          f"{bad} of {repeats} returned {kind} matrices non-finite for "
                          f"identical error vectors")
