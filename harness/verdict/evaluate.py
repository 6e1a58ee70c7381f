"""Run every check on one solution: the pure core of a verdict.

``evaluate(problem, extracted, reference, tolerances)`` takes the plug-in's extracted
return value (``harness.contract.solution.extract``) and gives one ``CheckResult`` per check in
``harness.checks.tolerances.CHECK_NAMES`` order. No I/O; pyscf is used only for integrals.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.checks import frontier as _frontier
from harness.checks import density as _density
from harness.checks import energy as _energy
from harness.checks import orthonormal as _orth
from harness.checks import stationarity as _stat
from harness.checks.spin import density_by_spin, density_from_orbitals, fock_by_spin
from harness.checks.spin import occupation_scale, orbitals_by_spin
from harness.checks.wellformed import well_formed
from harness.checks.history import history_from_results
from harness.checks.integrals import (ERI_MAX_NAO, density_for, energy_effects,
                                      explained_energy, integral_checks, overlap_check)
from harness.verdict import states as _stability
from harness.verdict.states import state_hint
from harness.verdict.diagnosis import diagnose
from harness.verdict.coulomb import coulomb_exchange
from harness.verdict import xc as _xc
from harness.verdict.conventions import CONVENTION_MATCH, BasisMismatch, detect_convention
from harness.verdict.conventions import named_convention, rescaling
from harness.contract.errors import HarnessError
from harness.backend.integrals import AOIntegrals, integrals_for
from harness.backend.threads import checks_threads
from harness.contract.problem import Problem
from harness.contract.solution import Solution
from harness.contract.results import CheckResult, Status, failed, judge, not_applicable, skipped
from harness.checks.tolerances import CHECK_NAMES, INTEGRAL_ENERGY_EFFECT, Tolerances
from harness.contract.defaults import DEFAULT_STABILITY, STABILITY_MODES


#: A reported overlap within this of pyscf's, element by element, is taken to be in
#: pyscf's AO order with less accurate integrals (the overlap check judges it): any
#: reordering, sign flip or renormalisation changes some element by far more (≥ 1e-2).
SAME_ORDER_INACCURATE_OVERLAP = 1e-3


def _basis(problem: Problem, sol: Solution, ints: AOIntegrals, ao_convention: str | None,
           tolerance: float = CONVENTION_MATCH):
    """The "basis" check: map the code's AO convention onto pyscf's.

    Returns (result, solution in pyscf's AO order, go_on). A user-named convention is
    applied as given; otherwise a reported overlap that differs from pyscf's is matched by
    per-shell signed permutations and scalings (``harness.verdict.conventions``). A basis that no
    such mapping explains fails; with a different number of functions nothing else can
    be checked. ``tolerance``: max|Mᵀ S_ref M − S_code| for a mapping to count
    (CONVENTION_MATCH unless overridden, ``--tol basis=...``).
    """
    case = problem.name
    if ao_convention is not None:
        conv = named_convention(ao_convention, ints.mol)
        return (CheckResult("basis", Status.PASSED, None, None,
                            f"basis: AO convention {ao_convention!r} as given ({case}): "
                            f"{conv.describe()}"), conv.solution_to_reference(sol), True)
    s_code = sol.overlap
    if not isinstance(s_code, np.ndarray) or s_code.ndim != 2 \
            or s_code.shape[0] != s_code.shape[1] or not np.all(np.isfinite(s_code)):
        return (not_applicable("basis", "no usable 'overlap' key; pyscf's AO order assumed",
                               case), sol, True)
    c = sol.coefficients
    if s_code.shape != ints.s.shape and not (
            isinstance(c, np.ndarray) and c.ndim >= 2 and c.shape[-2] == s_code.shape[0]):
        return (not_applicable("basis", "the overlap's size disagrees with the coefficients",
                               case), sol, True)
    if s_code.shape == ints.s.shape and np.max(np.abs(s_code - ints.s)) <= tolerance:
        return (CheckResult("basis", Status.PASSED, 0.0, None,
                            f"basis: the code's overlap is pyscf's, same AO order ({case})"),
                sol, True)
    if s_code.shape == ints.s.shape:
        conv = rescaling(s_code, ints.s, tolerance=tolerance, mol=ints.mol)
        if conv is not None:
            return (CheckResult("basis", Status.PASSED, None, None,
                                f"basis: AO convention detected ({case}): {conv.describe()}"),
                    conv.solution_to_reference(sol), True)
        off = float(np.max(np.abs(s_code - ints.s)))
        if off <= SAME_ORDER_INACCURATE_OVERLAP:
            return (CheckResult("basis", Status.PASSED, off, None,
                                f"basis: pyscf's AO order; the code's overlap differs from "
                                f"pyscf's by up to {off:.1e}, judged in the code's own "
                                f"metric (the overlap check weighs the difference) ({case})"),
                    sol, True)
    try:
        conv = detect_convention(s_code, ints.mol, s_ref=ints.s, tolerance=tolerance)
    except HarnessError as exc:
        return not_applicable("basis", str(exc), case), sol, True
    if isinstance(conv, BasisMismatch):
        return failed("basis", f"basis: {conv.reason} ({case}); if your code's basis "
                      f"data come from elsewhere, return them as 'basis' (NWChem text) or "
                      f"use --basis-source bse"), sol, False
    if conv.is_identity:
        return (CheckResult("basis", Status.PASSED, 0.0, None,
                            f"basis: the code's overlap is pyscf's, same AO order ({case})"),
                sol, True)
    return (CheckResult("basis", Status.PASSED, None, None,
                        f"basis: AO convention detected ({case}): {conv.describe()}"),
            conv.solution_to_reference(sol), True)


@dataclasses.dataclass(frozen=True)
class Verdict:
    """The checks of one case, in CHECK_NAMES order, and the same-density analysis
    (JSON-ready numbers from ``harness.verdict.diagnosis``; empty when nothing failed)."""

    checks: tuple[CheckResult, ...]
    analysis: dict



def evaluate(problem: Problem, extracted: Solution, reference=None,
             tolerances: Tolerances | None = None,
             integrals: AOIntegrals | None = None, *,
             ao_convention: str | None = None,
             stability: str = DEFAULT_STABILITY,
             basis_note: str | None = None,
             grid: str | None = None) -> tuple[CheckResult, ...]:
    """All checks of one case (see :func:`evaluate_case`); the checks only."""
    return evaluate_case(problem, extracted, reference, tolerances, integrals,
                         ao_convention=ao_convention, stability=stability,
                         basis_note=basis_note, grid=grid).checks


def evaluate_case(problem: Problem, extracted: Solution, reference=None,
                  tolerances: Tolerances | None = None,
                  integrals: AOIntegrals | None = None, *,
                  ao_convention: str | None = None,
                  stability: str = DEFAULT_STABILITY,
                  basis_note: str | None = None,
                  grid: str | None = None) -> Verdict:
    """All checks of one case, with hints on failures.

    ``reference`` (a ``harness.catalogue.references.Reference``) may be None, then
    reference-energy is not applicable. ``ao_convention`` names the code's AO convention
    (``harness.verdict.conventions.NAMED``) when it reports no overlap. ``stability``: "internal"
    (default), "external" (RHF→UHF too) or "off". ``basis_note``: set when the code's
    own basis is judged (``integrals`` and ``reference`` are then in it); the basis check
    says so. ``grid``: Kohn–Sham only, "own" when the code integrated on its own grid
    (also said by the solution's ``grid`` key; see ``harness.verdict.xc``), else the
    pinned grid is assumed. Energies in Eh.
    """
    if stability not in STABILITY_MODES:
        raise HarnessError(f"must be one of {', '.join(STABILITY_MODES)}, got {stability!r}",
                           field="stability")
    # A solution with overflowing or NaN entries is judged by the checks (they fail it);
    # numpy's RuntimeWarnings about the same values would only clutter the terminal.
    # One BLAS thread on small cases (harness.backend.threads: pyscf's spinning OpenMP
    # workers and a second BLAS thread would fight over the cores), this process only.
    with np.errstate(all="ignore"), checks_threads(problem.nao):
        checks, analysis = _evaluate(problem, extracted, reference, tolerances, integrals,
                                     ao_convention, stability, grid)
    if basis_note:
        checks = _noted_basis(checks, basis_note, problem.name)
    return Verdict(checks=checks, analysis=analysis)


def _evaluate(problem, extracted, reference, tolerances, integrals, ao_convention, stability,
              grid_mode=None):
    tol = tolerances or Tolerances()
    case = problem.name
    method = problem.shape_method  # rks/uks/roks have the shapes of rhf/uhf/rohf

    def verdict(name, measurement):
        return judge(name, measurement, tol.for_check(name, problem.convergence), case)

    ints = integrals or integrals_for(problem)
    basis, sol, go_on = _basis(problem, extracted, ints, ao_convention,
                              tol.for_check("basis", problem.convergence))
    if not go_on:
        return _geometry_hinted(problem, sol, _after_failed_basis(basis, sol, ints, tol, case))

    problems = well_formed(sol, len(ints.labels), method, problem.n_alpha, problem.n_beta,
                          symmetry=tol.for_check("well-formed", problem.convergence))
    problems = list(problems) + _xc.ks_contract_problems(problem, sol)
    if problems:
        more = f" (and {len(problems) - 1} more: {'; '.join(problems[1:])})" if len(problems) > 1 else ""
        head = failed("well-formed", f"well-formed: {problems[0]} ({case}){more}",
                      value=float(len(problems)))
        rest = [skipped(n, "the solution is malformed", case) for n in CHECK_NAMES
                if n not in ("basis", "well-formed")]
        return (basis, head, *rest), {}

    results: dict[str, CheckResult] = {
        "basis": basis,
        "well-formed": CheckResult("well-formed", Status.PASSED, 0.0, None,
                                   f"well-formed: keys, shapes and occupations valid ({case})")}
    labels = ints.labels
    c, occ = orbitals_by_spin(method, sol.coefficients, sol.occupations)
    metric = _metric(sol, ints, c)
    low = _orth.lowdin(metric)

    if sol.converged is not None:
        ok = bool(sol.converged)
        results["converged-flag"] = CheckResult(
            "converged-flag", Status.PASSED if ok else Status.FAILED, None, None,
            f"converged-flag: the code reports converged={ok} ({case})"
            + (f" after {sol.iterations} iterations" if sol.iterations is not None else ""))
    else:
        results["converged-flag"] = not_applicable("converged-flag", "no 'converged' key", case)

    results["orthonormality"] = verdict("orthonormality", _orth.orthonormality(c, metric))

    built = density_from_orbitals(c, occ)
    d = density_by_spin(method, sol.density) if sol.density is not None else built
    results["idempotency"] = verdict("idempotency", _density.idempotency(
        d, metric, occupation_scale(method), labels))
    n = (problem.n_electrons,) if method == "rhf" else (problem.n_alpha, problem.n_beta)
    results["electron-count"] = verdict("electron-count", _density.electron_count(d, metric, n))
    if sol.density is not None:
        results["density-consistency"] = verdict("density-consistency",
                                                 _density.density_consistency(d, built, labels))
    else:
        results["density-consistency"] = not_applicable("density-consistency",
                                                        "no 'density' key", case)

    # J/K of the code's density: built once here, shared by self-consistency,
    # energy-consistency, energy-error-bound and the diagnosis (harness.verdict.coulomb)
    jk = coulomb_exchange(problem, ints, d, reference, low.x,
                          fock_tolerance=tol.for_check("self-consistency", problem.convergence),
                          energy_tolerance=tol.for_check("energy-consistency",
                                                         problem.convergence))
    vj, vk = jk.j_total, jk.k
    if problem.is_kohn_sham:
        # F = H + J − c_x K (+ long range) + V_xc[P] on the pinned grid (harness.verdict.xc)
        rebuilt, terms, xc = _xc.fock_and_energy_terms(problem, d, ints, vj, vk)
        own_fock = rebuilt
    else:
        xc = None
        rebuilt = _energy.fock_from_terms(ints.h, vj, vk, len(d))
        if jk.route == "difference":
            ref_terms = _energy.energy_terms_from_difference(d, jk.d_ref, ints.h, jk.j_ref,
                                                             jk.k_ref, jk.j_diff, jk.k_diff,
                                                             ints.e_nuc)
        else:
            ref_terms = _energy.energy_terms(d, ints.h, vj, vk, ints.e_nuc)
        own_fock, terms = _energy_integrals(sol, ints, d, vj, vk, ref_terms)
    xc_tol = _xc_tolerances(problem, sol, ints, d, xc, tol, grid_mode, low, labels)

    def xc_verdict(name, measurement):
        """A check whose size depends on the XC quadrature: own-grid tolerance if any."""
        if name not in xc_tol:
            return verdict(name, measurement)
        tolerance, words = xc_tol[name]
        result = judge(name, measurement, tolerance, case)
        return dataclasses.replace(result, message=f"{result.message} [{words}]")

    def stationarity(f):
        if method == "rohf":
            return _stat.rohf_conditions(f, d, low, labels)
        return _stat.commutator(f, d, metric, low, labels)

    if sol.fock is not None:
        results["stationarity"] = verdict("stationarity",
                                          stationarity(fock_by_spin(method, sol.fock)))
    else:
        results["stationarity"] = not_applicable("stationarity", "no 'fock' key", case)
    results["self-consistency"] = xc_verdict("self-consistency", stationarity(own_fock))

    if method == "rohf":
        results["roothaan-hall"] = not_applicable(
            "roothaan-hall", "ROHF orbital energies depend on a canonicalisation convention", case)
    elif sol.orbital_energies is not None:
        f = fock_by_spin(method, sol.fock) if sol.fock is not None else own_fock
        e = sol.orbital_energies[None] if method == "rhf" else sol.orbital_energies
        results["roothaan-hall"] = verdict("roothaan-hall", _stat.roothaan_hall(f, c, e, low))
    else:
        results["roothaan-hall"] = not_applicable("roothaan-hall", "no 'orbital_energies' key",
                                                  case)

    results["energy-consistency"] = xc_verdict("energy-consistency",
                                               _energy.energy_consistency(sol.energy, terms))
    if reference is not None:
        results["reference-energy"] = xc_verdict("reference-energy", _energy.reference_energy(
            sol.energy, float(reference.energy)))
    else:
        results["reference-energy"] = not_applicable("reference-energy", "no reference", case)

    if method == "rohf":
        results["aufbau"] = not_applicable(
            "aufbau", "ROHF orbital energies depend on a canonicalisation convention", case)
    elif sol.orbital_energies is not None:
        e = sol.orbital_energies[None] if method == "rhf" else sol.orbital_energies
        m = _frontier.aufbau(e, occ)
        if m.value == -np.inf:
            results["aufbau"] = not_applicable("aufbau", "no empty orbitals", case)
        else:
            results["aufbau"] = verdict("aufbau", m)
    else:
        results["aufbau"] = not_applicable("aufbau", "no 'orbital_energies' key", case)

    at = density_for(sol, method, fock=own_fock)
    results["overlap"] = overlap_check(sol, ints, at, tol, case)
    results.update(integral_checks(sol, ints, tol, case, at=at))
    results.update(_state_checks(problem, sol, reference, ints, tol, stability, d, rebuilt))
    results["history"] = history_from_results(
        sol, results, convergence=problem.convergence, case=case,
        energy_step=tol.overrides.get("history"))

    analysis: dict = {}
    # the same-density analysis (Kohn–Sham: with the XC pieces, harness.verdict.xc_diagnosis)
    if any(r.status is Status.FAILED for r in results.values()):
        diagnosis = diagnose(problem, sol, ints, d, results, reference=reference,
                             jk=(jk.j, vk), xc=xc)
        analysis = dict(diagnosis.analysis)
        hints = dict(diagnosis.hints)
        ref_result = results.get("reference-energy")
        # Naming a state needs an energy that belongs to the density; above the reference
        # it also needs a stationary density (an unconverged code is above it anyway).
        below = reference is not None and sol.energy < float(reference.energy)
        consistent = results["energy-consistency"].status is Status.PASSED and (
            below or results["self-consistency"].status is Status.PASSED)
        if ref_result is not None and ref_result.status is Status.FAILED and consistent \
                and "reference-energy" not in hints:
            hint = state_hint(problem, sol, ints, reference,
                              tolerance=tol.for_check("reference-energy", problem.convergence))
            if hint:
                hints["reference-energy"] = hint
        split = _explained_hint(sol, ints, at, reference, results)
        if split:
            old = hints.get("reference-energy")
            hints["reference-energy"] = split + (f"; {old}" if old else "")
        for name, hint in hints.items():
            if name in results and results[name].status is Status.FAILED and hint:
                results[name] = dataclasses.replace(results[name], hint=hint)
    return tuple(results[name] for name in CHECK_NAMES if name in results), analysis


def _noted_basis(checks, note, case):
    """The basis check's line saying the code's own basis was judged (with the AO
    convention found in it, if any)."""
    out = []
    for c in checks:
        if c.name == "basis" and c.status is not Status.FAILED:
            extra = c.message.split(f"({case}): ", 1)[1] if f"({case}): " in c.message else ""
            c = dataclasses.replace(c, status=Status.PASSED, message=(
                f"basis: judged in the code's own basis ({note}) ({case})"
                + (f"; {extra}" if extra else "")))
        out.append(c)
    return tuple(out)


#: Checks that still run after a failed basis check: they judge the code's overlap by
#: itself (against pyscf's, and its definiteness), which is what the basis check read.
_OVERLAP_ONLY = ("overlap", "overlap-definite")


def _geometry_hinted(problem, sol, checks):
    """(checks, analysis) after a failed basis check, with the ångström hint
    (``harness.verdict.diagnosis.geometry_hints``) on the failed basis and overlap checks."""
    from harness.verdict.diagnosis import geometry_hints

    hints, numbers = geometry_hints(problem, sol, {c.name: c for c in checks})
    checks = tuple(dataclasses.replace(c, hint=hints[c.name]) if c.name in hints else c
                   for c in checks)
    return checks, ({"geometry": numbers} if numbers else {})


def _after_failed_basis(basis, sol, ints, tol, case):
    """The checks after a failed basis check: every matrix check skipped with the basis
    check's reason; the overlap's own checks run when it has pyscf's size."""
    from harness.checks.integrals import definiteness

    reason = "the code's basis differs from the case's"
    out = {"basis": basis}
    s = sol.overlap
    if isinstance(s, np.ndarray) and s.shape == ints.s.shape:
        out["overlap"] = judge("overlap", _orth.matrix_difference(
            s, ints.s, "max|S − S_ref|", ints.labels), tol.for_check("basis", 1.0), case)
        out["overlap-definite"] = judge("overlap-definite", definiteness(s, "S", ints.labels),
                                        tol.for_check("overlap-definite", 1.0), case)
    return tuple(out.get(n) or skipped(n, reason, case) for n in CHECK_NAMES)


def _metric(sol, ints, c):
    """The overlap the orbital checks use: the code's own S (in pyscf's AO order, after the
    basis check mapped it) when it reports a usable one and its orbitals ``c`` (leading
    spin axis) are at least as orthonormal in it as in pyscf's — that is the metric its
    SCF solved — else pyscf's. Whether the two agree is the overlap check's business
    alone, so a defect of S is reported once, there (a code reporting an S it did not use
    is judged in the S it used)."""
    s = sol.overlap
    if not (isinstance(s, np.ndarray) and s.shape == ints.s.shape and np.all(np.isfinite(s))):
        return ints.s
    s = 0.5 * (s + s.T)
    try:
        own = _orth.orthonormality(c, s).value
        ref = _orth.orthonormality(c, ints.s).value
    except (ValueError, TypeError):
        return ints.s
    return s if not ref < own else ints.s


def _own_integrals(sol, ints, d, vj, vk):
    """(H, J, K) for energy-consistency and self-consistency: the code's own H (its
    ``core_hamiltonian``, else ``kinetic`` + ``nuclear_attraction``) and J/K of its own
    ``two_electron`` (up to ERI_MAX_NAO AOs) where it reports them, else pyscf's."""
    h = ints.h
    if isinstance(sol.core_hamiltonian, np.ndarray) and sol.core_hamiltonian.shape == h.shape:
        h = sol.core_hamiltonian
    elif isinstance(sol.kinetic, np.ndarray) and isinstance(sol.nuclear_attraction, np.ndarray) \
            and sol.kinetic.shape == h.shape == sol.nuclear_attraction.shape:
        h = sol.kinetic + sol.nuclear_attraction
    g = sol.two_electron
    nao = h.shape[0]
    if isinstance(g, np.ndarray) and g.shape == (nao,) * 4 and nao <= ERI_MAX_NAO:
        vj = np.einsum("ijkl,kl->ij", g, d.sum(axis=0), optimize=True)
        vk = np.einsum("ikjl,skl->sij", g, d, optimize=True)
    return h, vj, vk


def _energy_integrals(sol, ints, d, vj, vk, ref_terms=None):
    """(Fock matrix rebuilt from the code's P, E[P] terms) for self-consistency and
    energy-consistency: with the code's own integrals (:func:`_own_integrals`) when it
    reports some and its energy belongs to them at least as well as to pyscf's — the
    integrals its SCF used — else with pyscf's. A defect of the reported integrals alone
    is then the integral checks' only; one the SCF used is not counted again here."""
    n = len(d)
    if ref_terms is None:  # else the E[P] terms with pyscf's integrals, already built
        ref_terms = _energy.energy_terms(d, ints.h, vj, vk, ints.e_nuc)
    ref_fock = _energy.fock_from_terms(ints.h, vj, vk, n)
    h, j, k = _own_integrals(sol, ints, d, vj, vk)
    if h is ints.h and j is vj:
        return ref_fock, ref_terms
    own_terms = _energy.energy_terms(d, h, j, k, ints.e_nuc)
    e = float(sol.energy)
    if abs(e - own_terms.total) <= abs(e - ref_terms.total):
        return _energy.fock_from_terms(h, j, k, n), own_terms
    return ref_fock, ref_terms


def _explained_hint(sol, ints, at, reference, results) -> str | None:
    """For a failed reference-energy: the part of E − E_ref the code's reported integrals
    explain at first order (their energy effects) and the rest."""
    r = results.get("reference-energy")
    if reference is None or at is None or r is None or r.status is not Status.FAILED:
        return None
    explained = explained_energy(energy_effects(sol, ints, at))
    # below the integral checks' own tolerance the integrals explain nothing worth naming
    if explained is None or abs(explained) <= INTEGRAL_ENERGY_EFFECT:
        return None
    gap = float(sol.energy) - float(reference.energy)
    return (f"of E − E_ref = {gap:+.1e} Eh your integrals explain {explained:+.1e} Eh "
            f"(first order at your density), the rest is {gap - explained:+.1e} Eh")
def _xc_tolerances(problem, sol, ints, d, xc, tol: Tolerances, grid_mode, low, labels
                   ) -> dict[str, tuple[float, str]]:
    """Own-grid mode (``grid="own"`` or the solution's ``grid`` key): {check: (tolerance,
    where it came from)} for the XC-dependent checks, max(named tolerance, GRID_SAFETY ×
    measured grid sensitivity) (``harness.verdict.xc``). Empty in pinned mode, for HF,
    and for a check whose tolerance the user overrode."""
    if not problem.is_kohn_sham or "own" not in (grid_mode, sol.grid):
        return {}
    conv = problem.convergence
    sens = _xc.grid_sensitivity(problem, ints, d, xc)
    if problem.shape_method == "rohf":
        dv = _stat.rohf_conditions(sens.potential, d, low, labels).value
    else:
        dv = _stat.commutator(sens.potential, d, ints.s, low, labels).value
    out = {}
    for name, size, what in (
            ("self-consistency", dv, f"max|X(ΔV_xc P S − S P ΔV_xc)X| = {dv:.1e}"),
            ("energy-consistency", sens.energy, f"|ΔE_xc| = {sens.energy:.1e} Eh"),
            ("reference-energy", sens.energy, f"|ΔE_xc| = {sens.energy:.1e} Eh")):
        if name in tol.overrides:
            continue
        named = tol.for_check(name, conv)
        derived = _xc.GRID_SAFETY * float(size)
        if derived > named:
            out[name] = (derived, sens.words(what))
        else:
            out[name] = (named, f"own grid: the named tolerance, larger than "
                                f"{_xc.GRID_SAFETY:g} × {what}")
    return out


def _state_checks(problem, sol, reference, ints, tol: Tolerances, mode: str, d, fock):
    """stability, spin-squared and energy-error-bound (``harness.verdict.states``), with any
    tolerance overrides applied."""
    conv = problem.convergence
    out = {}
    if problem.is_kohn_sham:
        # the orbital-Hessian analyses of harness.verdict.states are Hartree–Fock's
        why = "the orbital-Hessian analysis is built for Hartree–Fock only (not yet for " \
              "Kohn–Sham)"
        out["stability"] = not_applicable("stability", why, problem.name)
        shaped = dataclasses.replace(problem, method=problem.shape_method, functional=None,
                                     grid=None)
        out["spin-squared"] = _stability.spin_check(
            shaped, sol, ints, reference, tolerance=tol.overrides.get("spin-squared"))
        out["energy-error-bound"] = not_applicable("energy-error-bound", why, problem.name)
        return out
    out["stability"] = _stability.stability_check(
        problem, sol, ints, mode=mode, threshold=tol.for_check("stability", conv))
    # None unless overridden: spin_check picks the UHF or the ROHF bound itself
    out["spin-squared"] = _stability.spin_check(problem, sol, ints, reference,
                                                tolerance=tol.overrides.get("spin-squared"))
    out["energy-error-bound"] = _stability.energy_error_check(
        problem, sol, ints, d, fock, tolerance=tol.for_check("energy-error-bound", conv))
    return out
