"""One judge step: a problem, a solution and a reference become a ``CaseResult``.

``judge(problem, solution, reference, settings)`` is the single place the harness turns
an extracted solution (``harness.contract.solution.extract``) into a verdict. It wraps
``harness.verdict.evaluate.evaluate_case`` and adds what every caller needs: the case's
energies (Eh), the check time (s), the reference-energy failure when there is no
reference for a known reason, and the one-line "internal error in check …" error when
a check raises. The runner (after its child process), ``check-result``, certificate
recompute, the pytest plug-in and the self-test all call it. No I/O.
"""

from __future__ import annotations

import dataclasses
import time
import traceback
from pathlib import Path

from harness.contract.errors import innermost_frame
from harness.contract.results import CaseResult, failed
from harness.contract.solution import Solution

__all__ = ["JudgeSettings", "judge"]


@dataclasses.dataclass(frozen=True)
class JudgeSettings:
    """How to judge one solution.

    ``tolerances``: a ``harness.checks.tolerances.Tolerances`` (None: the defaults).
    ``ao_convention``: the code's named AO convention (``harness.verdict.conventions``),
    or None to detect it from a reported overlap. ``stability``: "internal", "external"
    or "off". ``reference_source``: where the reference came from ("stored",
    "computed", "written"), recorded in the result. ``reference_error``: one line, why
    there is no reference; reference-energy then fails with it. ``plugin_seconds``: the
    plug-in's own run time (s), recorded in the result. ``basis_source``: "pyscf"
    (named bases from pyscf's copies) or "bse" (from the basis_set_exchange library: the
    reference is then built and computed from its data, its version recorded).
    ``grid``: Kohn–Sham only,
    "own" when the code integrated on its own quadrature grid (XC tolerances then come
    from a measured grid sensitivity, ``harness.verdict.xc``); None/"pinned" otherwise.
    """

    tolerances: object = None
    ao_convention: str | None = None
    stability: str = "internal"
    reference_source: str | None = None
    reference_error: str | None = None
    plugin_seconds: float | None = None
    basis_source: str = "pyscf"
    grid: str | None = None


def _evaluate(problem, solution, reference, settings: JudgeSettings, integrals=None):
    """``harness.verdict.evaluate.evaluate_case``, imported when first needed (pyscf);
    in the code's own basis when it gave one (:func:`_in_own_basis`)."""
    from harness.verdict.evaluate import evaluate_case
    given = solution
    solution, reference, integrals, note = _in_own_basis(problem, solution, reference,
                                                         integrals, settings.basis_source)
    verdict = evaluate_case(problem, solution, reference, settings.tolerances, integrals,
                            ao_convention=settings.ao_convention, stability=settings.stability,
                            basis_note=note, grid=settings.grid)
    if note is None and not isinstance(given.basis, str) and settings.ao_convention is None:
        from harness.verdict.other_basis import in_other_source

        return in_other_source(problem, solution, reference, settings, integrals, verdict)
    return verdict, reference


def _in_own_basis(problem, solution: Solution, reference, integrals, source="pyscf"):
    """(solution, reference, integrals, note) to judge with. When the solution gives its
    ``basis`` (NWChem text), the reference molecule is built in exactly that basis
    (``harness.backend.mole.mole_in_basis``), its reference computed (or taken from the
    in-memory cache, ``harness.catalogue.references.reference_in_basis``) and the note
    says so for the basis check; text that does not parse for the case's elements
    becomes a Malformed ``basis`` (the well-formed check names it)."""
    from harness.backend.integrals import integrals_for
    from harness.catalogue.references import reference_in_basis
    from harness.contract.solution import Malformed

    text = solution.basis
    if not isinstance(text, str):
        if source != "bse":
            return solution, reference, integrals, None
        from harness.backend.basis_sources import bse_basis, bse_version

        version = bse_version()
        text = bse_basis(problem.basis, problem.numbers)
        label = f"{problem.basis} from basis_set_exchange {version}"
        own = integrals_for(problem, basis_text=text)
        own_ref = reference_in_basis(problem, text, label=label,
                                     provenance={"basis_set_exchange_version": version})
        return (solution, own_ref, own,
                f"{problem.basis!r} from basis_set_exchange {version} (--basis-source bse); "
                f"{len(own.labels)} functions")

    try:
        own = integrals_for(problem, basis_text=text)
    except Exception as exc:  # pyscf's parser and builder raise many kinds
        reason = str(exc).splitlines()[0] if isinstance(exc, ValueError) else \
            f"does not build a basis ({type(exc).__name__}: {exc})".splitlines()[0]
        return solution.replace(basis=Malformed(reason)), reference, integrals, None
    own_ref = reference_in_basis(problem, text)
    nao = len(own.labels)
    note = f"given as 'basis'; {nao} functions"
    named = integrals if integrals is not None else integrals_for(problem)
    if named.s.shape == own.s.shape:
        note += (f", differs from pyscf's {problem.basis!r} by "
                 f"{float(abs(named.s - own.s).max()):.1e} in the overlap")
    else:
        note += f", pyscf's {problem.basis!r} has {len(named.labels)}"
    if reference is not None and getattr(reference, "energy", None) is not None:
        note += f", {own_ref.energy - float(reference.energy):+.1e} Eh in the reference energy"
    return solution, own_ref, own, note


def reference_energy(reference) -> float | None:
    """The reference total energy in Eh (``energies["total"]``, or ``energy``), if any."""
    if reference is None:
        return None
    try:
        return float(reference.energies["total"])
    except (AttributeError, KeyError, TypeError):
        value = getattr(reference, "energy", None)
        return float(value) if isinstance(value, (int, float)) else None


_THIS_FILE = str(Path(__file__).resolve())


def _check_frame(tb) -> traceback.FrameSummary | None:
    """The innermost frame of the check code an exception came from: frames up to and
    including this module's own are dropped; of the rest, the innermost one outside the
    standard library and site-packages (so an error inside numpy names the check line
    that called numpy); if all are library frames, the outermost one; None if none."""
    return innermost_frame(tb, _THIS_FILE)


def judge(problem, solution: Solution, reference=None,
          settings: JudgeSettings | None = None, *, integrals=None) -> CaseResult:
    """The CaseResult of ``solution`` (an extracted plug-in return value) for ``problem``
    (bohr), judged against ``reference`` (a ``Reference`` or None; energies in Eh).

    Every check of ``harness.verdict.evaluate.evaluate_case`` runs with the settings'
    tolerances, AO convention and stability mode. With no reference and a
    ``settings.reference_error``, reference-energy fails with
    ``"reference-energy: no reference (<case>): <reason>"``; with no reference and no
    reason it is not applicable. An exception inside a check becomes the case's one-line
    error ``"internal error in check <function> (<file>:<line>): <ExcType>: <message>"``.
    ``integrals``: the problem's ``harness.backend.integrals.AOIntegrals`` if already built
    (a caller judging many solutions of one case); None builds them.
    """
    settings = settings if settings is not None else JudgeSettings()
    common = dict(name=problem.name, method=getattr(problem, "method", ""),
                  basis=getattr(problem, "basis", ""),
                  reference_energy=reference_energy(reference),
                  reference_source=settings.reference_source,
                  plugin_seconds=settings.plugin_seconds)
    energy = solution.energy if isinstance(solution.energy, float) else None
    start = time.perf_counter()
    try:
        verdict, used = _evaluate(problem, solution, reference, settings, integrals)
    except Exception as exc:
        frame = _check_frame(exc.__traceback__)  # innermost check-code frame
        where = f"{frame.name} ({frame.filename}:{frame.lineno})" if frame else "evaluate"
        return CaseResult(error=f"internal error in check {where}: "
                          f"{type(exc).__name__}: {exc}".splitlines()[0],
                          energy=energy, check_seconds=time.perf_counter() - start, **common)
    checks = verdict.checks
    if reference is None and settings.reference_error is not None:
        checks = tuple(
            failed("reference-energy", f"reference-energy: no reference ({problem.name}): "
                   f"{settings.reference_error}") if c.name == "reference-energy" else c
            for c in checks)
    if used is not reference and "judged_in_basis" in verdict.analysis:
        common["reference_energy"] = reference_energy(used)  # the basis it was judged in
    return CaseResult(checks=checks, energy=energy, check_seconds=time.perf_counter() - start,
                      analysis=verdict.analysis, **common)
