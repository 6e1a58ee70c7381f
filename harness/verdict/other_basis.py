"""The same basis name from the other source: a code that takes cc-pVDZ or STO-3G from
the basis-set exchange, run with the default ``--basis-source pyscf`` (issue 11).

When the basis check fails, or the overlap/integral checks fail after it matched, and
the ``basis_set_exchange`` library is installed, the exchange's basis of the same name
is built (``harness.backend.basis_sources``) and the code's overlap compared with it
(``harness.verdict.evaluate._basis``: the usual order/sign/norm conventions, at the
case's basis tolerance). If it is that basis and spans the same space of functions as
pyscf's (``harness.verdict.conventions.outside_space`` ≤ SAME_SPACE), the case is
judged in it (reference via ``harness.catalogue.references.reference_in_basis``,
cached) and the basis check, the JSON (``analysis["judged_in_basis"]``) and the
certificate say so. If it is that basis but a different space (Li cc-pVDZ), the basis
check fails truthfully with the reference-energy difference, the matrix checks skipped.
Energies in Eh.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.contract.results import Status, skipped

#: Checks whose failure after a matched basis may mean "the other source's data".
_INTEGRAL_CHECKS = ("overlap", "kinetic", "nuclear-attraction", "core-hamiltonian",
                    "two-electron")

#: The one-line suggestion added to a failed basis check when basis_set_exchange is
#: not installed.
NO_BSE_HINT = ("; basis_set_exchange is not installed: pip install 'scf-harness[bse]' "
               "and the harness also tries the exchange's {basis!r}")


#: Reference-energy differences below this (Eh) are the references' convergence noise
#: (both converged to harness.backend.reference_scf.CONV_TOL = 1e-10 Eh), stated
#: as agreement instead of a noise figure.
REFERENCE_NOISE = 1e-10


def _check(verdict, name):
    return next((c for c in verdict.checks if c.name == name), None)


def _replace(verdict, name, check):
    return dataclasses.replace(verdict, checks=tuple(
        check if c.name == name else c for c in verdict.checks))


def in_other_source(problem, solution, reference, settings, integrals, verdict):
    """(verdict, reference used) for a case judged in pyscf's named basis: unchanged
    unless the exchange's basis of the same name explains the code's overlap (see the
    module docstring)."""
    basis = _check(verdict, "basis")
    if basis is None or settings.basis_source != "pyscf":
        return verdict, reference
    basis_failed = basis.status is Status.FAILED
    if not basis_failed and not any(
            (c := _check(verdict, n)) is not None and c.status is Status.FAILED
            for n in _INTEGRAL_CHECKS):
        return verdict, reference
    s_code = solution.overlap
    if not isinstance(s_code, np.ndarray) or s_code.ndim != 2:
        return verdict, reference

    from harness.backend import basis_sources as bs

    if not bs.bse_installed():
        if basis_failed:
            verdict = _replace(verdict, "basis", dataclasses.replace(
                basis, message=basis.message + NO_BSE_HINT.format(basis=problem.basis)))
        return verdict, reference
    other = bs.other_source_basis(problem)
    if other is None:
        return verdict, reference
    text, label = other

    from harness.backend.integrals import integrals_for
    from harness.checks.tolerances import Tolerances
    from harness.verdict.conventions import SAME_SPACE, outside_space
    from harness.verdict.evaluate import _basis, evaluate_case

    tol = settings.tolerances or Tolerances()
    tolerance = tol.for_check("basis", problem.convergence)
    alt = integrals_for(problem, basis_text=text)
    named = integrals if integrals is not None else integrals_for(problem)
    if alt.s.shape == named.s.shape and float(np.max(np.abs(alt.s - named.s))) <= tolerance:
        return verdict, reference  # the exchange's copy is pyscf's: nothing else to try
    found, mapped, go_on = _basis(problem, solution, alt, None, tolerance)
    s_mapped = mapped.overlap
    if not go_on or not isinstance(s_mapped, np.ndarray) or s_mapped.shape != alt.s.shape \
            or float(np.max(np.abs(s_mapped - alt.s))) > tolerance:
        return verdict, reference  # the code's overlap is not the exchange's either

    distance = outside_space(named.s, alt.s, bs.cross_overlap(named.mol, alt.mol))
    version = bs.bse_version()
    from harness.catalogue.references import reference_in_basis

    alt_ref = reference_in_basis(problem, text, label=label,
                                 provenance={"basis_set_exchange_version": version})
    e_ref = getattr(reference, "energy", None)
    de = None if e_ref is None else float(alt_ref.energy) - float(e_ref)
    de_text = ("" if de is None else
               f"reference energies agree to {REFERENCE_NOISE:.0e} Eh" if abs(de) < REFERENCE_NOISE
               else f"reference energies differ by {de:+.1e} Eh")
    case = problem.name
    source = f"{problem.basis} as the basis-set exchange {version} gives it"
    record = {"basis": problem.basis, "source": "bse", "basis_set_exchange_version": version,
              "label": label, "outside_space": distance, "same_space": distance <= SAME_SPACE,
              "reference_energy_difference": de, "nao": len(alt.labels),
              "pyscf_nao": len(named.labels)}
    if distance > SAME_SPACE:
        if not basis_failed:
            return verdict, reference
        record["judged"] = False
        why = f"; {de_text}" if de_text else ""
        message = (f"basis: the basis differs: your overlap is {source}, another basis than pyscf's "
                   f"(its functions lie up to {distance:.1e} outside pyscf's{why}) ({case}); "
                   f"use --basis-source bse to be judged in it")
        verdict = _replace(verdict, "basis", dataclasses.replace(basis, message=message))
        if _check(verdict, "overlap") is not None:  # the same difference, reported once
            verdict = _replace(verdict, "overlap", skipped(
                "overlap", "the code's overlap is the exchange's basis, another one", case))
        return dataclasses.replace(verdict, analysis={**verdict.analysis,
                                                      "judged_in_basis": record}), reference

    cols_alt, cols_named = bs.contraction_columns(text), bs.contraction_columns(
        problem.basis_nwchem)
    kind = (" (general contraction)" if cols_alt > cols_named else
            " (segmented contraction)" if cols_alt < cols_named else "")
    if kind or alt.s.shape != named.s.shape:
        space = "the same space of functions, differently contracted: E must agree"
        record["contraction"] = kind.strip(" ()") or "other"
    else:
        off = float(np.max(np.abs(alt.s - named.s)))
        space = f"the same functions with other digits (overlaps differ by up to {off:.1e})"
        record["contraction"] = "same"
    if de_text:
        space += f" ({de_text})"
    judged = evaluate_case(problem, solution, alt_ref, settings.tolerances, alt,
                           ao_convention=None, stability=settings.stability,
                           basis_note=None, grid=settings.grid)
    new_basis = _check(judged, "basis")
    if new_basis is None or new_basis.status is Status.FAILED:
        return verdict, reference
    extra = new_basis.message.split(f"({case}): ", 1)[1] if f"({case}): " in \
        new_basis.message else ""
    message = (f"basis: your overlap is {source}{kind}, not pyscf's; judged in that basis "
               f"({case}); {space}; use --basis-source bse to say so"
               + (f"; {extra}" if extra else ""))
    record["judged"] = True
    judged = _replace(judged, "basis", dataclasses.replace(new_basis, status=Status.PASSED,
                                                           message=message))
    return dataclasses.replace(judged, analysis={**judged.analysis,
                                                 "judged_in_basis": record}), alt_ref


__all__ = ["in_other_source", "NO_BSE_HINT"]
