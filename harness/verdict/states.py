"""Which state did the code find, and is it a minimum? Stability, ⟨S²⟩, energy-error bound.

Every invariant of the core checks holds at ANY stationary point of the Hartree–Fock
energy: an excited determinant, a UHF solution stuck on the spin-restricted saddle, a
symmetry-broken state that is not the lowest. This module says whether the code's
solution is a minimum (pyscf's orbital Hessian, analysing the code's own orbitals),
which of the known stationary states of the reference it is (:func:`match_state`),
whether its ⟨S²⟩ is right (our numpy) and how far its energy may still be from the
stationary value (:func:`energy_error_bound`, our numpy).

Units: atomic units throughout — energies in hartree (Eh), orbital-rotation angles in
radians, so Hessian eigenvalues are in Eh/rad² and gradients in Eh/rad.

**The number reported** (``StabilityResult.eigenvalue``) is the lowest eigenvalue λ of
the orbital Hessian of the total energy with respect to real orbital rotations, as
pyscf's stability analysis builds it (Hessian-vector products of
``pyscf.soscf.newton_ah.gen_g_hop_*``, lowest roots by Davidson). Convention: for a unit
vector κ of rotation parameters, orbitals C → C exp(t(K − Kᵀ)) with K the virtual–occupied
block filled from κ, E(t) = E₀ + g·κ t + ½ λ t² + O(t³), i.e. λ is the curvature d²E/dt²
in Eh/rad² along the softest direction. Parameters: RHF one spatial rotation κ_ai for both
spins; UHF (κα_ai, κβ_ai) stacked; ROHF pyscf's ROHF parameters (closed–open, closed–virtual,
open–virtual). For "external RHF→UHF" the direction is (κ, −κ)/√2 in the UHF parameters
(alpha rotated one way, beta the other), and λ = 2 × pyscf's RHF→UHF eigenvalue. The
value for internal analyses equals pyscf's logged "lowest eigs of H". λ < 0 means the
solution is a saddle point: the energy goes down along that rotation.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from harness.contract.solution import Solution

import dataclasses
import math
import time

import numpy as np

from harness.contract.defaults import STABILITY_MODES
from harness.checks.spin import density_by_spin, density_from_orbitals, orbitals_by_spin
from harness.contract.results import CheckResult, Measurement, Status, fixed, judge, not_applicable
# pyscf's Hessian and the λ threshold live in the backend; re-exported under their old names
from harness.backend.stability import (  # noqa: F401  (re-exported)
    DAVIDSON_ROOTS, DAVIDSON_TOLERANCE, START_NOISE, START_SEED, STABILITY_EIGENVALUE, Mode,
    _occupations_for, density_energy, external_mode, internal_mode, rotated_orbitals,
    scf_object)

#: A candidate saddle is reported unstable only if following its mode lowers the energy
#: of the code's density by more than this (Eh): the reference-energy precision (1e-6 Eh),
#: so noise in λ on a converged minimum (the rerun from it lowers E by ~g²/λ ≲ 1e-10 Eh)
#: can never produce "unstable".
FOLLOWING_LOWERING = 1e-6
#: Above this max|∂E/∂κ| (Eh/rad) the code's solution is not near a stationary point, and
#: its orbital Hessian says nothing about which state it is: the check is then not
#: applicable (self-consistency reports the gradient). A code converged to 1e-4 in the
#: commutator is 10× inside it.
STATIONARY_GRADIENT_LIMIT = 1e-3

#: |⟨S²⟩ − ⟨S²⟩_ref| allowed for UHF. ⟨S²⟩ is not variational, so it is off to first order
#: in the orbital error δκ ≈ gradient / curvature; at the default convergence (1e-6,
#: checked at 10 × 1e-6) and curvatures ≳ 0.05 Eh/rad² δκ ≲ 2e-4 rad, and |∂⟨S²⟩/∂κ| ≲ 1
#: per rad, so 1e-3 passes every converged code while distinct UHF states of the shipped
#: cases differ by ≥ 0.01 (e.g. 0.76 vs 0.86 for C2H).
SPIN_SQUARED_UHF = 1e-3
#: |⟨S²⟩ − S(S+1)| allowed for ROHF (and for the RHF-like 0): exact for any ROHF
#: determinant, so only rounding (and density-consistency level noise) enters.
SPIN_SQUARED_ROUNDING = 1e-8

#: The energy-error estimate passes at or below this (Eh): the reference-energy tolerance,
#: so a code whose energy can still move by more than the agreement asked of it fails.
ENERGY_ERROR_BOUND = 1e-6
#: Above this max|g| (Eh/rad) the energy-error estimate is not applicable: its step
#: g/H would exceed ~1e-2 rad (H ≳ 1 Eh/rad² for a typical gap), where a quadratic model
#: of E stops being an estimate of anything; self-consistency reports such gradients.
#: Below it the estimate reaches ~1e-5 Eh, so it can fail its 1e-6 Eh tolerance.
ERROR_BOUND_GRADIENT_LIMIT = 1e-2
#: Curvatures of the diagonal model (Eh/rad²) below this are raised to it: a gap that small
#: (or inverted, at a non-aufbau point) makes the model meaningless; the floor keeps the
#: estimate finite and errs on the large side.
CURVATURE_FLOOR = 1e-2

#: ⟨S²⟩ above −this prints as 0 rather than a "−0.00" / "−0.0000" from rounding: half the
#: last printed digit at two decimals (messages, hints) and at four (the spin-squared check).
S2_ROUNDING_2 = 5e-3
S2_ROUNDING_4 = 5e-5

#: The analyses :func:`stability` runs (``harness.contract.defaults.STABILITY_MODES``).
MODES = STABILITY_MODES
CHECK_STABILITY = "stability"
CHECK_SPIN = "spin-squared"
CHECK_ERROR_BOUND = "energy-error-bound"


# --------------------------------------------------------------------------- stability


@dataclasses.dataclass(frozen=True)
class StabilityResult:
    """Outcome of :func:`stability` on one solution. Energies in Eh, λ in Eh/rad².

    ``eigenvalue``: the lowest orbital-Hessian eigenvalue λ (module docstring), of the
    analysis named by ``kind`` ("internal" or "external RHF→UHF": in mode "external" the
    lower of the two). ``stable``: False only if λ < −STABILITY_EIGENVALUE *and* following
    the mode lowers the energy by more than FOLLOWING_LOWERING. ``energy``: E[P] of the
    code's density evaluated by pyscf (not the code's reported number, so an energy bug is
    not mistaken for an instability; None unless an instability was followed).
    ``followed_energy``/``followed_s2``: pyscf's SCF
    rerun from the rotated orbitals and followed until stable (None when λ was not
    negative or the point is not stationary); ``lowering`` = energy − followed_energy.
    ``gradient``: max|∂E/∂κ| (Eh/rad) at the code's orbitals. ``seconds``: wall time.
    """

    eigenvalue: float
    stable: bool
    kind: str
    energy: float | None
    followed_energy: float | None
    followed_s2: float | None
    lowering: float | None
    gradient: float
    seconds: float
    mode: str = "internal"


def stability(problem, sol: Solution, ints, *, mode: str = "internal",
              threshold: float = STABILITY_EIGENVALUE,
              lowering: float = FOLLOWING_LOWERING) -> StabilityResult | None:
    """Is the code's solution a minimum of the energy (Eh) w.r.t. real orbital rotations?

    Builds a pyscf mean-field object from the code's orbitals (:func:`scf_object`), finds
    the lowest orbital-Hessian eigenvalue λ (:func:`internal_mode`; in mode "external" for
    RHF also :func:`external_mode`, RHF→UHF), and if λ < −threshold follows that mode: pyscf
    SCF from the rotated orbitals, again followed until stable
    (``harness.backend.reference_scf.follow``). Unstable = λ < −threshold and E[P_code] −
    E_followed > ``lowering``. Mode "off": returns None. UHF and ROHF in mode "external" get
    the internal analysis only (UHF→GHF and ROHF→UHF are not analysed).
    """
    if mode not in MODES:
        raise ValueError(f"mode must be one of {', '.join(MODES)}, got {mode!r}")
    if mode == "off":
        return None
    from harness.backend.reference_scf import follow

    start = time.perf_counter()
    mf = scf_object(problem, sol, ints)
    modes = [internal_mode(mf)]
    if mode == "external" and problem.method == "rhf":
        modes.append(external_mode(mf))
    gradient = modes[0].gradient
    softest = min(modes, key=lambda m: m.eigenvalue)
    followed = followed_s2 = drop = energy = None
    stable = True
    if softest.eigenvalue < -threshold and gradient <= STATIONARY_GRADIENT_LIMIT:
        energy = density_energy(mf)
        method = "uhf" if softest.kind != "internal" else problem.method
        followed, followed_s2 = follow(ints.mol, method, rotated_orbitals(mf, softest),
                                       _occupations_for(mf, softest))
        drop = energy - followed
        stable = not drop > lowering
    return StabilityResult(eigenvalue=softest.eigenvalue, stable=stable, kind=softest.kind,
                           energy=energy, followed_energy=followed, followed_s2=followed_s2,
                           lowering=drop, gradient=gradient,
                           seconds=time.perf_counter() - start, mode=mode)


def stability_check(problem, sol: Solution, ints, *, mode: str = "internal",
                    threshold: float = STABILITY_EIGENVALUE,
                    lowering: float = FOLLOWING_LOWERING,
                    result: StabilityResult | None = None) -> CheckResult:
    """CheckResult "stability" from :func:`stability` (or a precomputed ``result``).

    Not applicable in mode "off" and when max|∂E/∂κ| > STATIONARY_GRADIENT_LIMIT (the point
    is not stationary; self-consistency says so). ``value`` is λ (Eh/rad²), ``tolerance``
    the threshold magnitude (unstable when λ < −tolerance and following lowers E).
    """
    case = problem.name
    if mode == "off":
        return not_applicable(CHECK_STABILITY, "stability analysis switched off", case)
    r = result if result is not None else stability(problem, sol, ints, mode=mode,
                                                    threshold=threshold, lowering=lowering)
    if r.gradient > STATIONARY_GRADIENT_LIMIT:
        return not_applicable(CHECK_STABILITY, f"not a stationary point (max|∂E/∂κ| = "
                                               f"{r.gradient:.1e} Eh/rad > "
                                               f"{STATIONARY_GRADIENT_LIMIT:.0e})", case)
    head = f"{CHECK_STABILITY}: lowest orbital Hessian eigenvalue {_num(r.eigenvalue)}"
    if r.eigenvalue >= -threshold:
        return CheckResult(CHECK_STABILITY, Status.PASSED, r.eigenvalue, threshold,
                           f"{head} ≥ {_num(-threshold)} ({case}): stable ({r.kind})")
    where = (f"following lowers E by {r.lowering:.3e} Eh to {_num5(r.followed_energy)} Eh"
             + (f", ⟨S²⟩ {_s2(r.followed_s2)}" if r.followed_s2 is not None else ""))
    if r.stable:
        return CheckResult(CHECK_STABILITY, Status.PASSED, r.eigenvalue, threshold,
                           f"{head} < {_num(-threshold)} ({case}) but {where} ≤ "
                           f"{lowering:.1e} Eh: stable ({r.kind})")
    kind = "" if r.kind == "internal" else f" ({r.kind})"
    return CheckResult(CHECK_STABILITY, Status.FAILED, r.eigenvalue, threshold,
                       f"{head} < {_num(-threshold)} ({case}): unstable{kind}; {where}")


def _minus(text: str) -> str:
    """A leading '-' as the minus sign '−' (the exponent keeps its ASCII hyphen)."""
    return "−" + text[1:] if text.startswith("-") else text


def _num(x: float) -> str:
    return _minus(f"{x:.1e}")


def _num5(x: float) -> str:
    return _minus(fixed(x, 5))


def _s2(x: float) -> str:
    """⟨S²⟩ to two decimals, without a '−0.00' from rounding."""
    return fixed(max(x, 0.0) if x > -S2_ROUNDING_2 else x, 2)


# --------------------------------------------------------------------------- ⟨S²⟩


def spin_squared(d: np.ndarray, s: np.ndarray, n_alpha: int, n_beta: int) -> float:
    """⟨S²⟩ of a single determinant from its spin densities (2, nao, nao) and overlap S.

    ⟨S²⟩ = S_z(S_z + 1) + N_β − Σ_ij |(C_αᵀ S C_β)_ij|² (i occupied alpha, j occupied
    beta), with S_z = (N_α − N_β)/2; the sum equals Tr(Pα S Pβ S) for Pσ = Cσ Cσᵀ over the
    occupied orbitals, which is what is evaluated (dimensionless, units of ħ²).
    """
    sz = 0.5 * (n_alpha - n_beta)
    overlap = float(np.sum((d[0] @ s) * (d[1] @ s).T))  # Tr(Pα S Pβ S), two n³ products
    return sz * (sz + 1.0) + n_beta - overlap


def code_spin_squared(problem, sol: Solution, ints) -> float:
    """⟨S²⟩ of the code's solution: its reported density, else the one from its orbitals
    (as the core checks choose); RHF: Pα = Pβ = P/2."""
    c, occ = orbitals_by_spin(problem.method, sol.coefficients, sol.occupations)
    d = density_by_spin(problem.method, sol.density) if sol.density is not None \
        else density_from_orbitals(c, occ)
    if problem.method == "rhf":
        d = np.stack([0.5 * d[0], 0.5 * d[0]])
    return spin_squared(d, ints.s, problem.n_alpha, problem.n_beta)


def spin_check(problem, sol: Solution, ints, reference, *,
               tolerance: float | None = None) -> CheckResult:
    """CheckResult "spin-squared": the code's ⟨S²⟩ (:func:`code_spin_squared`).

    UHF: |⟨S²⟩ − ⟨S²⟩_ref| ≤ SPIN_SQUARED_UHF (n.a. without a reference). ROHF:
    |⟨S²⟩ − S(S+1)| ≤ SPIN_SQUARED_ROUNDING, exact for an ROHF determinant. RHF: not
    applicable (Pα = Pβ makes ⟨S²⟩ = N/2 − ¼Tr(PSPS), zero exactly when idempotency holds,
    which that check already measures).
    """
    case = problem.name
    if problem.method == "rhf":
        return not_applicable(CHECK_SPIN, "RHF: ⟨S²⟩ = 0 by construction (Pα = Pβ)", case)
    s2 = code_spin_squared(problem, sol, ints)
    if problem.method == "rohf":
        spin = 0.5 * (problem.multiplicity - 1)
        target, what, tol = spin * (spin + 1.0), "S(S+1)", SPIN_SQUARED_ROUNDING
    else:
        if reference is None:
            return not_applicable(CHECK_SPIN, "no reference", case)
        target, what, tol = float(reference.s_squared), "⟨S²⟩_ref", SPIN_SQUARED_UHF
    tol = tolerance if tolerance is not None else tol
    shown = max(s2, 0.0) if s2 > -S2_ROUNDING_4 else s2
    m = Measurement(abs(s2 - target), f"|⟨S²⟩ − {what}|",
                    f"⟨S²⟩ = {fixed(shown, 4)}, expected {fixed(target, 4)}")
    return judge(CHECK_SPIN, m, tol, case)


# --------------------------------------------------------------------------- error bound


def _semicanonical(f: np.ndarray, block: np.ndarray):
    """Eigen-decomposition of the block of f (MO basis) on the index set ``block``."""
    e, u = np.linalg.eigh(f[np.ix_(block, block)])
    return e, u


def _error_terms(problem, sol: Solution, fock: np.ndarray):
    """Per-spin-block (g²/(2H) per pair, (i, a) indices, block name, max|g|) lists."""
    method = problem.method
    c = np.asarray(sol.coefficients, dtype=float)
    occ = np.asarray(sol.occupations, dtype=float)
    f = np.asarray(fock, dtype=float)
    pairs = []
    if method == "uhf":
        for spin, name in ((0, "alpha"), (1, "beta")):
            fm = c[spin].T @ f[spin] @ c[spin]
            o, v = np.flatnonzero(occ[spin] > 0.5), np.flatnonzero(occ[spin] <= 0.5)
            if o.size and v.size:
                pairs.append(_pairs([fm], o, v, name, [fm]))
    else:
        fms = [c.T @ fs @ c for fs in f]
        if method == "rhf":
            o, v = np.flatnonzero(occ > 0.5), np.flatnonzero(occ <= 0.5)
            if o.size and v.size:  # one spatial rotation moves both spins: F counted twice
                pairs.append(_pairs([fms[0], fms[0]], o, v, "", [fms[0]]))
        else:
            closed = np.flatnonzero(occ > 1.5)
            open_ = np.flatnonzero((occ > 0.5) & (occ <= 1.5))
            virtual = np.flatnonzero(occ <= 0.5)
            fc = 0.5 * (fms[0] + fms[1])
            for a, b, spins, name in ((closed, virtual, fms, "closed–virtual"),
                                      (closed, open_, [fms[1]], "closed–open"),
                                      (open_, virtual, [fms[0]], "open–virtual")):
                if a.size and b.size:
                    pairs.append(_pairs(spins, a, b, name, [fc]))
    return pairs


def energy_error_bound(problem, sol: Solution, ints, d: np.ndarray,
                       fock: np.ndarray) -> Measurement:
    """Estimated energy still to be gained by converging: ΔE ≈ ½ gᵀ H⁻¹ g (Eh).

    g is the orbital gradient and H the *diagonal* approximation of the orbital Hessian,
    both from the Fock matrix rebuilt from the code's density (``fock``, per spin: RHF
    (1, nao, nao) F = H + J − ½K; UHF/ROHF (2, nao, nao) Fσ = H + J − Kσ) in the basis of
    the code's orbitals, made semicanonical within each occupation block (diagonalising
    the occupied–occupied and virtual–virtual blocks, per spin; ROHF: the closed, open
    and virtual blocks of ½(Fα + Fβ)). For a rotation between orbital i and a that changes
    the spins σ ∈ A (RHF: both, through one spatial rotation; UHF: that spin; ROHF
    closed→virtual both, closed→open β, open→virtual α):

        g = Σ_{σ∈A} 2 Fσ_ia,   H = Σ_{σ∈A} 2 (Fσ_aa − Fσ_ii)   (Eh/rad, Eh/rad²)

    H is raised to CURVATURE_FLOOR where smaller (or negative). The estimate is
    Σ g²/(2H): exact to second order for a Hessian that is diagonal in this basis, and
    quadratic in the gradient. ``d`` (the density the core checks use) is not needed for
    the formula; it is accepted for a uniform call from the checks.
    """
    return _bound_from_pairs(_error_terms(problem, sol, fock))


def _bound_from_pairs(pairs) -> Measurement:
    """:func:`energy_error_bound` from the per-block terms of :func:`_error_terms`."""
    quantity = "½ gᵀH⁻¹g (diagonal H)"
    if not pairs:
        return Measurement(0.0, quantity, "no occupied–virtual pairs")
    values = np.concatenate([p[0] for p in pairs])
    k = int(np.argmax(values))
    where = ""
    for contrib, (i, a), name, _ in pairs:
        if k < contrib.size:
            where = (f"largest term {contrib[k]:.1e} Eh: {name + ', ' if name else ''}"
                     f"semicanonical orbitals ({i[k]}, {a[k]})")
            break
        k -= contrib.size
    return Measurement(float(values.sum()), quantity, where)


def orbital_gradient(problem, sol: Solution, fock: np.ndarray) -> float:
    """max|g| (Eh/rad) of :func:`energy_error_bound`'s gradient, g = Σσ 2 Fσ_ia."""
    pairs = _error_terms(problem, sol, fock)
    return max((p[3] for p in pairs), default=0.0)


def _pairs(fms, occ_idx, vir_idx, name, block_fock):
    """Per-pair g²/(2H) for rotations occ_idx → vir_idx, semicanonical in ``block_fock``."""
    _, uo = _semicanonical(block_fock[0], occ_idx)
    _, uv = _semicanonical(block_fock[0], vir_idx)
    g = np.zeros((occ_idx.size, vir_idx.size))
    h = np.zeros_like(g)
    for fm in fms:
        foo = uo.T @ fm[np.ix_(occ_idx, occ_idx)] @ uo
        fvv = uv.T @ fm[np.ix_(vir_idx, vir_idx)] @ uv
        fov = uo.T @ fm[np.ix_(occ_idx, vir_idx)] @ uv
        g += 2.0 * fov
        h += 2.0 * (np.diag(fvv)[None, :] - np.diag(foo)[:, None])
    h = np.maximum(h, CURVATURE_FLOOR)
    contrib = (g * g / (2.0 * h)).ravel()
    ii, aa = np.meshgrid(np.arange(occ_idx.size), np.arange(vir_idx.size), indexing="ij")
    return contrib, (ii.ravel(), aa.ravel()), name, float(np.abs(g).max())


def energy_error_check(problem, sol: Solution, ints, d: np.ndarray, fock: np.ndarray, *,
                       tolerance: float = ENERGY_ERROR_BOUND) -> CheckResult:
    """CheckResult "energy-error-bound": :func:`energy_error_bound` ≤ ``tolerance`` (Eh).

    Not applicable when max|g| > ERROR_BOUND_GRADIENT_LIMIT: so far from a stationary point
    the quadratic model says nothing (self-consistency reports the gradient).
    """
    pairs = _error_terms(problem, sol, fock)  # once: the gradient and the bound share it
    gmax = max((p[3] for p in pairs), default=0.0)
    if gmax > ERROR_BOUND_GRADIENT_LIMIT:
        return not_applicable(CHECK_ERROR_BOUND,
                              f"not near a stationary point (max|g| = {gmax:.1e} Eh/rad > "
                              f"{ERROR_BOUND_GRADIENT_LIMIT:.0e}): the quadratic estimate "
                              f"does not apply", problem.name)
    return judge(CHECK_ERROR_BOUND, _bound_from_pairs(pairs), tolerance, problem.name)


# --------------------------------------------------------------------------- known states


def match_state(energy: float, s2: float | None, reference, *,
                tolerance: float) -> str | None:
    """Which known state of ``reference`` has this energy (Eh)? A hint, or None.

    None when the energy is the ground state's (state 0) within ``tolerance``. Otherwise
    never silent: the known state k within ``tolerance`` (the one with the closest ⟨S²⟩
    when several are), "your solution is the known state k, ΔE Eh above the ground state
    (⟨S²⟩ code vs state)"; below the ground state by more than ``tolerance``, "the
    reference missed a state, or the code is not variational"; else the nearest known
    state is named.
    """
    states = tuple(getattr(reference, "known_states", ()) or ())
    ground = float(reference.energy)
    if abs(energy - ground) <= tolerance:
        return None
    if energy < ground - tolerance:
        return (f"E is {ground - energy:.1e} Eh below the reference: the reference missed a "
                f"state, or the code is not variational")
    near = [(k, st) for k, st in enumerate(states) if abs(energy - st.energy) <= tolerance]
    if near:
        if s2 is not None:
            near.sort(key=lambda ks: abs(ks[1].s_squared - s2))
        k, st = near[0]
        spin = f" (⟨S²⟩ {_s2(s2)} vs {_s2(st.s_squared)})" if s2 is not None else ""
        kind = "" if st.stable else ", a saddle point"
        return (f"your solution is the known state {k}{kind}, {fixed(st.energy - ground, 4)} Eh "
                f"above the ground state{spin}")
    if states:
        k, st = min(enumerate(states), key=lambda ks: abs(ks[1].energy - energy))
        return (f"E is {energy - ground:.1e} Eh above the reference and matches no known "
                f"state (nearest: state {k}, {st.energy - energy:+.1e} Eh from yours)")
    return f"E is {energy - ground:.1e} Eh above the reference (no other states known)"


def state_hint(problem, sol: Solution, ints, reference, *, tolerance: float) -> str | None:
    """:func:`match_state` for the code's reported energy and ⟨S²⟩ (None without a
    reference); to attach to the reference-energy result as its hint."""
    if reference is None:
        return None
    s2 = None if problem.method == "rhf" else code_spin_squared(problem, sol, ints)
    return match_state(float(sol.energy), s2, reference, tolerance=tolerance)


# --------------------------------------------------------------------------- all three


def state_checks(problem, sol: Solution, reference=None, ints=None, *, mode: str = "internal",
                 d: np.ndarray | None = None, fock: np.ndarray | None = None
                 ) -> tuple[CheckResult, ...]:
    """("stability", "spin-squared", "energy-error-bound") for a *well-formed* extracted
    solution, in that order (energies in Eh). ``d``/``fock``: the density (leading spin
    axis) and the Fock matrix rebuilt from it, as ``harness.verdict.evaluate`` computes them;
    built here when not given (one J/K build)."""
    from harness.checks.energy import fock_from_terms
    from harness.backend.integrals import integrals_for

    ints = ints if ints is not None else integrals_for(problem)
    if d is None:
        c, occ = orbitals_by_spin(problem.method, sol.coefficients, sol.occupations)
        d = density_by_spin(problem.method, sol.density) if sol.density is not None \
            else density_from_orbitals(c, occ)
    if fock is None:
        vj, vk = ints.jk(d)
        fock = fock_from_terms(ints.h, vj, vk, len(d))
    return (stability_check(problem, sol, ints, mode=mode),
            spin_check(problem, sol, ints, reference),
            energy_error_check(problem, sol, ints, d, fock))
