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
    plug-in's own run time (s), recorded in the result. ``grid``: Kohn–Sham only,
    "own" when the code integrated on its own quadrature grid (XC tolerances then come
    from a measured grid sensitivity, ``harness.verdict.xc``); None/"pinned" otherwise.
    """

    tolerances: object = None
    ao_convention: str | None = None
    stability: str = "internal"
    reference_source: str | None = None
    reference_error: str | None = None
    plugin_seconds: float | None = None
    grid: str | None = None


def _evaluate(problem, solution, reference, settings: JudgeSettings, integrals=None):
    """``harness.verdict.evaluate.evaluate_case``, imported when first needed (pyscf)."""
    from harness.verdict.evaluate import evaluate_case
    return evaluate_case(problem, solution, reference, settings.tolerances, integrals,
                         ao_convention=settings.ao_convention, stability=settings.stability,
                         grid=settings.grid)


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
        verdict = _evaluate(problem, solution, reference, settings, integrals)
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
    return CaseResult(checks=checks, energy=energy, check_seconds=time.perf_counter() - start,
                      analysis=verdict.analysis, **common)
