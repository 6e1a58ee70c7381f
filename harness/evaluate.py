"""Run every check on one solution: the pure core of a verdict.

``evaluate(problem, extracted, reference, tolerances)`` takes the plug-in's extracted
return value (``harness.solution.extract``) and gives one ``CheckResult`` per check in
``harness.tolerances.CHECK_NAMES`` order. No I/O; pyscf is used only for integrals.
"""

from __future__ import annotations

import numpy as np

from harness.checks import frontier as _frontier
from harness.checks import density as _density
from harness.checks import energy as _energy
from harness.checks import orthonormal as _orth
from harness.checks import stationarity as _stat
from harness.checks.spin import density_by_spin, density_from_orbitals, fock_by_spin
from harness.checks.spin import occupation_scale, orbitals_by_spin
from harness.checks.wellformed import well_formed
from harness.integrals import AOIntegrals, integrals_for
from harness.problem import Problem
from harness.results import CheckResult, Status, failed, judge, not_applicable, skipped
from harness.tolerances import CHECK_NAMES, Tolerances


def evaluate(problem: Problem, extracted: dict, reference=None,
             tolerances: Tolerances | None = None,
             integrals: AOIntegrals | None = None) -> tuple[CheckResult, ...]:
    """All checks of one case. ``reference`` (a ``harness.references.Reference``) may be
    None, then reference-energy is not applicable. Energies in Eh."""
    tol = tolerances or Tolerances()
    case = problem.name
    method = problem.method

    def verdict(name, measurement):
        return judge(name, measurement, tol.for_check(name, problem.convergence), case)

    problems = well_formed(extracted, problem.nao, method, problem.n_alpha, problem.n_beta)
    if problems:
        more = f" (and {len(problems) - 1} more: {'; '.join(problems[1:])})" if len(problems) > 1 else ""
        head = failed("well-formed", f"well-formed: {problems[0]} ({case}){more}",
                      value=float(len(problems)))
        rest = [skipped(n, "the solution is malformed", case) for n in CHECK_NAMES[1:]]
        return (head, *rest)

    results: dict[str, CheckResult] = {
        "well-formed": CheckResult("well-formed", Status.PASSED, 0.0, None,
                                   f"well-formed: keys, shapes and occupations valid ({case})")}
    sol = extracted
    ints = integrals or integrals_for(problem)
    labels = ints.labels
    low = _orth.lowdin(ints.s)

    if "converged" in sol:
        ok = bool(sol["converged"])
        results["converged-flag"] = CheckResult(
            "converged-flag", Status.PASSED if ok else Status.FAILED, None, None,
            f"converged-flag: the code reports converged={ok} ({case})"
            + (f" after {sol['iterations']} iterations" if "iterations" in sol else ""))
    else:
        results["converged-flag"] = not_applicable("converged-flag", "no 'converged' key", case)

    if "overlap" in sol:
        results["overlap"] = verdict("overlap", _orth.matrix_difference(
            sol["overlap"], ints.s, "max|S − S_ref|", labels))
    else:
        results["overlap"] = not_applicable("overlap", "no 'overlap' key", case)

    c, occ = orbitals_by_spin(method, sol["coefficients"], sol["occupations"])
    results["orthonormality"] = verdict("orthonormality", _orth.orthonormality(c, ints.s))

    built = density_from_orbitals(c, occ)
    d = density_by_spin(method, sol["density"]) if "density" in sol else built
    results["idempotency"] = verdict("idempotency", _density.idempotency(
        d, ints.s, occupation_scale(method), labels))
    n = (problem.n_electrons,) if method == "rhf" else (problem.n_alpha, problem.n_beta)
    results["electron-count"] = verdict("electron-count", _density.electron_count(d, ints.s, n))
    if "density" in sol:
        results["density-consistency"] = verdict("density-consistency",
                                                 _density.density_consistency(d, built, labels))
    else:
        results["density-consistency"] = not_applicable("density-consistency",
                                                        "no 'density' key", case)

    vj, vk = ints.jk(d)
    rebuilt = _energy.fock_from_terms(ints.h, vj, vk, len(d))
    terms = _energy.energy_terms(d, ints.h, vj, vk, ints.e_nuc)

    def stationarity(f):
        if method == "rohf":
            return _stat.rohf_conditions(f, d, low, labels)
        return _stat.commutator(f, d, ints.s, low, labels)

    if "fock" in sol:
        results["stationarity"] = verdict("stationarity",
                                          stationarity(fock_by_spin(method, sol["fock"])))
    else:
        results["stationarity"] = not_applicable("stationarity", "no 'fock' key", case)
    results["self-consistency"] = verdict("self-consistency", stationarity(rebuilt))

    if method == "rohf":
        results["roothaan-hall"] = not_applicable(
            "roothaan-hall", "ROHF orbital energies depend on a canonicalisation convention", case)
    elif "orbital_energies" in sol:
        f = fock_by_spin(method, sol["fock"]) if "fock" in sol else rebuilt
        e = sol["orbital_energies"][None] if method == "rhf" else sol["orbital_energies"]
        results["roothaan-hall"] = verdict("roothaan-hall", _stat.roothaan_hall(f, c, e, low))
    else:
        results["roothaan-hall"] = not_applicable("roothaan-hall", "no 'orbital_energies' key",
                                                  case)

    results["energy-consistency"] = verdict("energy-consistency",
                                            _energy.energy_consistency(sol["energy"], terms))
    if reference is not None:
        results["reference-energy"] = verdict("reference-energy", _energy.reference_energy(
            sol["energy"], float(reference.energy)))
    else:
        results["reference-energy"] = not_applicable("reference-energy", "no reference", case)

    if method == "rohf":
        results["aufbau"] = not_applicable(
            "aufbau", "ROHF orbital energies depend on a canonicalisation convention", case)
    elif "orbital_energies" in sol:
        e = sol["orbital_energies"][None] if method == "rhf" else sol["orbital_energies"]
        m = _frontier.aufbau(e, occ)
        if m.value == -np.inf:
            results["aufbau"] = not_applicable("aufbau", "no empty orbitals", case)
        else:
            results["aufbau"] = verdict("aufbau", m)
    else:
        results["aufbau"] = not_applicable("aufbau", "no 'orbital_energies' key", case)

    return tuple(results[name] for name in CHECK_NAMES)
