"""The convergence history a code reports: false convergence, oscillation, a late energy
rise, a stalled error.

Solution key ``history``: an (n, 2) array, one row per iteration: the energy (Eh) and the
code's own error measure (in whatever norm the code uses; NaN where not given). The
harness's own stationarity measurement is passed in, so a code cannot certify itself
with its own error measure. Energies in hartree (Eh).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from harness.contract.solution import Solution

import math

import numpy as np

from harness.contract.results import CheckResult, Status, failed, fixed, not_applicable

#: Oscillation: at least this many trailing energies must alternate (rise, fall, rise…)
#: to count as a two-state oscillation — 4 energies are 3 steps, enough to see the
#: energy come back to where it was twice.
OSCILLATION_ITERATIONS = 4

#: Oscillation: every step in the window must change the energy by more than this (Eh).
#: Near convergence energies change by ≪ 1e-8 Eh with either sign (rounding, DIIS); a
#: back-and-forth larger than a microhartree (the REFERENCE_ENERGY precision) means the
#: final energy is not determined to the precision the harness asks for.
OSCILLATION_AMPLITUDE = 1e-6

#: Oscillation: consecutive steps must keep this fraction of each other's size. A
#: converging alternating sequence shrinks by a factor ≪ 1 per step (DIIS: ~0.1); a
#: loop bouncing between two states keeps |ΔE| roughly constant.
OSCILLATION_PERSISTENCE = 0.5

#: Energy rise: a last step that raises the energy by more than this (Eh) while the code
#: claims convergence fails. At a converged SCF the energy error is quadratic in the
#: gradient (≪ 1e-8 Eh for the default convergence), so a last-step rise above a
#: microhartree means the last step did not start from a converged state.
ENERGY_RISE = 1e-6

#: Energy changes smaller than this (Eh) count as "no change" when counting the trailing
#: monotone steps for the passing message (rounding of a ~100 Eh total energy).
ENERGY_NOISE = 1e-10

#: Stalled error: over the last STALL_ITERATIONS iterations the code's error must shrink
#: by at least STALL_FACTOR unless it is already ≤ convergence. Even a slow linear loop
#: (damped, no DIIS, ~0.5–0.8 per iteration) shrinks its error ≥ 9× in 10 iterations; a
#: loop that has not halved it in 10 needs > 130 iterations per 1e-4 and is stuck.
STALL_ITERATIONS = 10
STALL_FACTOR = 2.0

#: The stationarity quantity named in the false-convergence message by default.
STATIONARITY_QUANTITY = "max|X(FPS − SPF)X|"


def trailing_monotone(energies: np.ndarray, noise: float = ENERGY_NOISE) -> int:
    """Number of trailing iterations over which E never rose by more than ``noise`` (Eh).

    Counts energies, so a run with a last rise gives 1; NaN energies end the run.
    """
    e = np.asarray(energies, dtype=float)
    k = 1 if e.size and np.isfinite(e[-1]) else 0
    while k < e.size and np.isfinite(e[-k - 1]) and e[-k] - e[-k - 1] <= noise:
        k += 1
    return k


def oscillation(energies: np.ndarray, *, iterations: int = OSCILLATION_ITERATIONS,
                amplitude: float = OSCILLATION_AMPLITUDE,
                persistence: float = OSCILLATION_PERSISTENCE) -> tuple[int, float] | None:
    """A two-state oscillation at the end of the energies, or None.

    With steps ΔE_k = E_{k+1} − E_k over the last ``iterations`` (or more) energies: the
    signs alternate, every |ΔE_k| > ``amplitude`` and |ΔE_{k+1}| ≥ persistence·|ΔE_k|
    (and vice versa). Returns (number of trailing energies involved, smallest |ΔE|).
    """
    e = np.asarray(energies, dtype=float)
    if e.size < iterations or not np.isfinite(e[-iterations:]).all():
        return None
    steps = np.diff(e)

    def fits(k):  # step k (from the end, negative index) continues the pattern
        a, b = steps[k], steps[k + 1]
        return (a * b < 0 and min(abs(a), abs(b)) > amplitude
                and min(abs(a), abs(b)) >= persistence * max(abs(a), abs(b)))

    m = 0  # number of trailing step pairs that fit
    while m + 2 <= steps.size and np.isfinite(steps[-m - 2]) and fits(-m - 2):
        m += 1
    count = m + 2  # energies involved
    if count < iterations or m == 0:
        return None
    return count, float(np.min(np.abs(steps[-(count - 1):])))


def stalled(errors: np.ndarray, convergence: float, *, iterations: int = STALL_ITERATIONS,
            factor: float = STALL_FACTOR) -> tuple[float, float] | None:
    """(error ``iterations`` ago, last error) when the error is stalled, else None.

    Stalled: the last error > ``convergence`` and error[−1 − iterations] / error[−1] <
    ``factor`` (it did not shrink by ``factor`` over the last ``iterations``). Only
    finite errors count; too short a history is not judged.
    """
    err = np.asarray(errors, dtype=float)
    err = err[np.isfinite(err)]
    if err.size < iterations + 1:
        return None
    first, last = float(err[-1 - iterations]), float(err[-1])
    if last > convergence and first < factor * last:
        return first, last
    return None


def _nan_or_missing(x: float) -> str:
    return "NaN (or missing)" if math.isnan(x) else f"{x}"


def non_finite(h: np.ndarray) -> tuple[int, str, float, int] | None:
    """The first record (0-based index, field, value, number of further bad records) whose
    value cannot belong to a converged run, or None.

    Every energy must be finite (a missing energy reads as NaN). An error may be NaN (not
    given) before the code's first finite error — iteration 0 of a ΔE or ΔD measure has
    none — or throughout (no error measure); an infinite error, or a NaN error after a
    finite one, is refused.
    """
    energies, errors = h[:, 0], h[:, 1]
    bad_energy = ~np.isfinite(energies)
    finite = np.isfinite(errors)
    started = np.cumsum(finite) > 0  # at or after the first finite error
    bad_error = np.isinf(errors) | (np.isnan(errors) & started)
    bad = np.column_stack([bad_energy, bad_error])
    hits = np.argwhere(bad)  # row-major: by record, energy before error
    if hits.size == 0:
        return None
    k, j = (int(i) for i in hits[0])
    more = int(np.count_nonzero(bad.any(axis=1))) - 1
    return k, ("energy", "error")[j], float(h[k, j]), more


def history_check(history, *, converged: bool | None, stationarity_value: float | None,
                  stationarity_tolerance: float | None, convergence: float, case: str,
                  stationarity_quantity: str = STATIONARITY_QUANTITY,
                  energy_step: float | None = None) -> CheckResult:
    """The "history" check: the reported iterations tell a consistent story.

    Fails (the first that applies names the failure; the others are listed after it):

    * non-finite value: ``converged`` is True but a record has a NaN/infinite energy or
      error (:func:`non_finite`), naming the first such record (0-based) and field;
    * false convergence: ``converged`` is True but the harness's ``stationarity_value``
      > ``stationarity_tolerance``;
    * oscillation: :func:`oscillation` of the energies;
    * energy rising at the end: converged is True and E_n − E_{n−1} > ENERGY_RISE;
    * stalled error: :func:`stalled` of the code's errors with ``convergence``.

    Not applicable when ``history`` is None. ``energy_step`` (Eh, ``--tol history=...``)
    replaces both OSCILLATION_AMPLITUDE and ENERGY_RISE when given. Energies in Eh.
    """
    name = "history"
    amplitude = OSCILLATION_AMPLITUDE if energy_step is None else energy_step
    rise_limit = ENERGY_RISE if energy_step is None else energy_step
    if history is None:
        return not_applicable(name, "no 'history' key", case)
    h = np.asarray(history, dtype=float).reshape(-1, 2)
    energies, errors = h[:, 0], h[:, 1]
    n = len(h)
    finite_errors = errors[np.isfinite(errors)]
    last_error = float(finite_errors[-1]) if finite_errors.size else math.nan
    own = (f"its own last error is {last_error:.1e}" if finite_errors.size
           else "it reports no error measure")

    findings: list[tuple[str, float | None, float | None]] = []  # (body, value, tolerance)
    bad = non_finite(h) if converged else None
    if bad is not None:
        k, field, x, more = bad
        findings.append((f"non-finite value: record {k} of {n} has '{field}' = "
                         f"{_nan_or_missing(x)} while the code claims convergence ({case})"
                         + (f"; {more} more record{'s' if more != 1 else ''} like it"
                            if more else ""), None, None))
    if (converged and stationarity_value is not None and stationarity_tolerance is not None
            and not stationarity_value <= stationarity_tolerance):
        findings.append((f"false convergence: the code claims convergence but "
                         f"{stationarity_quantity} = {stationarity_value:.1e} > "
                         f"{stationarity_tolerance:.1e} ({case}); {own} after {n} "
                         f"iteration{'s' if n != 1 else ''}",
                         float(stationarity_value), float(stationarity_tolerance)))
    osc = oscillation(energies, amplitude=amplitude)
    if osc is not None:
        count, step = osc
        tail = energies[-count:]
        findings.append((f"oscillation: the energy alternates between {fixed(tail[-2], 6)} and "
                         f"{fixed(tail[-1], 6)} Eh (steps ≥ {step:.1e} > {amplitude:.1e}) "
                         f"over the last {count} iterations ({case})",
                         step, amplitude))
    if converged and n >= 2 and np.isfinite(energies[-2:]).all():
        rise = float(energies[-1] - energies[-2])
        if rise > rise_limit:
            findings.append((f"energy rising at the end: the last step raises E by "
                             f"{rise:.1e} > {rise_limit:.1e} Eh while the code claims "
                             f"convergence ({case})", rise, rise_limit))
    stall = stalled(errors, convergence)
    if stall is not None:
        first, last = stall
        findings.append((f"stalled error: the code's error went from {first:.1e} to "
                         f"{last:.1e} over the last {STALL_ITERATIONS} iterations (less than "
                         f"{STALL_FACTOR:g}× smaller) and is still > {convergence:.1e} ({case})",
                         last, convergence))
    if findings:
        body, value, tolerance = findings[0]
        also = "; ".join(f.split(":")[0] for f, _, _ in findings[1:])
        return failed(name, f"{name}: {body}" + (f" (also: {also})" if also else ""),
                      value=value, tolerance=tolerance)

    k = trailing_monotone(energies)
    error_text = f"final error {last_error:.1e}" if finite_errors.size else "no error measure"
    energy_text = (f"energy monotone over the last {k}" if k >= 2 else
                   "no energies" if not np.isfinite(energies).any() else
                   "a single energy" if n < 2 else "energy not monotone in the last step")
    return CheckResult(name, Status.PASSED, None if math.isnan(last_error) else last_error,
                       None, f"{name}: {n} iteration{'s' if n != 1 else ''}, {error_text}, "
                       f"{energy_text} ({case})")


def history_from_results(sol: Solution, results: dict, *, convergence: float,
                         case: str, energy_step: float | None = None) -> CheckResult:
    """The "history" check wired to evaluate's results (for evaluate to call last).

    The harness's stationarity measurement is that of the code's own Fock matrix
    (``results["stationarity"]``) when the code reported one — so a code converged on a
    wrong Hamiltonian is not called falsely converged (the integral and self-consistency
    checks catch that) — else that of the Fock rebuilt from its density
    (``results["self-consistency"]``); value, tolerance and quantity are taken from it.
    ``energy_step``: as for :func:`history_check`.
    """
    value = tolerance = None
    quantity = STATIONARITY_QUANTITY
    for name in ("stationarity", "self-consistency"):
        ref = results.get(name)
        if ref is not None and ref.status in (Status.PASSED, Status.FAILED):
            value, tolerance = ref.value, ref.tolerance
            quantity = ref.message.split(":", 1)[1].split(" = ", 1)[0].strip() or quantity
            break
    return history_check(sol.history, converged=sol.converged,
                         stationarity_value=value, stationarity_tolerance=tolerance,
                         convergence=convergence, case=case, stationarity_quantity=quantity,
                         energy_step=energy_step)
