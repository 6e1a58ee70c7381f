"""The accelerator bench: your convergence accelerator side by side with the baselines.

For each case and each starting guess, the accelerator and every baseline run the same
harness SCF loop (:mod:`harness.bench.accelerators`) with the same criterion (measure ≤
``problem.convergence``) and the same budget (:data:`~harness.bench.accelerators.MAX_FOCK_BUILDS`
Fock builds). Each run records: converged or not, Fock builds, wall time, the final
energy against the case's reference energy (``harness.catalogue.references.reference_for``), and
which state it reached — "ground state" within :data:`GROUND_STATE_TOLERANCE` Eh of the
reference, else a known state of the reference (when references list them) or
"other state ΔE = …". Energies in hartree (Eh), times in seconds.

Starting guesses: guess 0 is the generalised Wolfsberg–Helmholz guess
(:func:`harness.bench.accelerators.core_guess`); guesses 1..N are random orbital rotations of
it, C ← C exp(κ) between orbitals of different occupation with largest rotation angle
:data:`GUESS_ANGLE` (UHF: alpha and beta rotated independently, so spin symmetry can
break), from ``numpy.random.default_rng([seed, crc32(case name)])`` — the same guesses for
every method, and for a case whatever suite it is run in.

Outputs: :class:`BenchOutcome` (records, per-method summaries overall and per case,
verdict lines, accelerator properties); with ``report_dir``: ``bench.jsonl`` (one line
per run, written as it finishes), ``bench.json``, PNG plots and ``index.html``.
"""

from __future__ import annotations

import dataclasses
import json
import math
import time
import zlib
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence

import numpy as np

from harness.bench import accelerators as acc
from harness.contract.errors import first_line
from harness.checks.tolerances import REFERENCE_ENERGY

#: Starting guesses perturbed from the default one (the default guess is always run).
DEFAULT_GUESSES = 4
#: Largest orbital rotation angle (rad) of a perturbed starting guess.
GUESS_ANGLE = 0.3
#: A converged run is in the ground state when |E − E_ref| ≤ this (Eh): the harness's
#: reference-energy tolerance.
GROUND_STATE_TOLERANCE = REFERENCE_ENERGY
#: A known state of the reference matches when |E − E_state| ≤ this (Eh).
STATE_MATCH_TOLERANCE = REFERENCE_ENERGY
#: The accelerator counts as slower on a case when its median Fock builds exceed the
#: best baseline's by more than this many builds (at equal convergence and ground-state
#: rates).
MEDIAN_SLACK = 1
#: Wording of a verdict about speed alone (it does not make the bench fail).
SLOWER_ONLY = "slower"
#: Baselines run by default (see harness.bench.accelerators).
DEFAULT_BASELINES = acc.BASELINE_NAMES
#: Seed of the random orthonormal basis used by the invariance property.
PROPERTY_SEED = 12345
#: Iterates of the accelerator's own run handed to it before the converged state in
#: the fixed-point property (a full DIIS subspace).
PROPERTY_HISTORY = 8
#: Rotation (Euler angles z-y-z, rad) of the molecule for the rotation-invariance property.
PROPERTY_ROTATION = (0.4, 1.1, -0.7)

JSONL_NAME = "bench.jsonl"
JSON_NAME = "bench.json"
HTML_NAME = "index.html"


# --------------------------------------------------------------------------- records


@dataclasses.dataclass(frozen=True)
class RunRecord:
    """One method on one case from one starting guess (guess 0: the default guess).

    status: "converged", "not converged" or "failed" (reason says why). energy: the last
    state measured (Eh); delta_e = energy − reference_energy; state: "ground state",
    "known state k, ΔE = …", "other state ΔE = …" or "—" when not converged.
    history: ((Fock builds, energy, measure), ...) per state measured.
    """

    case: str
    method: str
    guess: int
    status: str
    reason: str
    fock_builds: int
    seconds: float
    energy: float
    reference_energy: float
    delta_e: float
    state: str
    history: tuple = ()

    @property
    def converged(self) -> bool:
        return self.status == "converged"

    @property
    def ground(self) -> bool:
        return self.converged and self.state == "ground state"

    def to_json(self) -> dict[str, Any]:
        def num(x):
            return None if x is None or not math.isfinite(x) else float(x)

        return {"case": self.case, "method": self.method, "guess": self.guess,
                "status": self.status, "reason": self.reason,
                "fock_builds": self.fock_builds, "seconds": round(self.seconds, 4),
                "energy": num(self.energy), "reference_energy": num(self.reference_energy),
                "delta_e": num(self.delta_e), "state": self.state,
                "history": [[int(b), num(e), num(m)] for b, e, m in self.history]}


@dataclasses.dataclass(frozen=True)
class MethodSummary:
    """Runs of one method (over all cases, or one case): counts and Fock builds.

    median_builds and worst_builds are over the converged runs (None if none converged).
    """

    method: str
    runs: int
    converged: int
    ground: int
    median_builds: float | None
    worst_builds: int | None

    @property
    def convergence_rate(self) -> float:
        return self.converged / self.runs if self.runs else 0.0

    @property
    def ground_rate(self) -> float:
        return self.ground / self.runs if self.runs else 0.0

    def rank(self) -> tuple:
        """Better is larger: ground-state rate, then convergence rate, then fewer builds."""
        median = self.median_builds if self.median_builds is not None else math.inf
        return (self.ground, self.converged, -median)


@dataclasses.dataclass(frozen=True)
class CaseProperty:
    """An accelerator property measured on one case (passed None: not applicable)."""

    case: str
    name: str
    passed: bool | None
    value: float
    detail: str


@dataclasses.dataclass(frozen=True)
class BenchOutcome:
    """Everything a bench run produced (see module docstring)."""

    accelerator: str
    methods: tuple[str, ...]
    cases: tuple[str, ...]
    guesses: int
    seed: int
    records: tuple[RunRecord, ...]
    summary: tuple[MethodSummary, ...]
    per_case: dict
    verdicts: tuple[str, ...]
    properties: tuple[CaseProperty, ...]
    seconds: float
    files: tuple[str, ...] = ()
    convergence: dict = dataclasses.field(default_factory=dict)

    @property
    def properties_passed(self) -> bool:
        return all(p.passed is not False for p in self.properties)

    @property
    def worse(self) -> tuple[str, ...]:
        """Verdict lines where the accelerator reached the ground state or converged in
        fewer runs than the best baseline (not those where it is only slower)."""
        return tuple(v for v in self.verdicts if SLOWER_ONLY not in v)

    @property
    def exit_status(self) -> int:
        """0 when the accelerator converges to the ground state in as many runs as the
        best baseline on every case and every property holds, else 1 (being slower is
        reported in a verdict line, but does not fail)."""
        return 0 if not self.worse and self.properties_passed else 1

    def to_json(self) -> dict[str, Any]:
        return {
            "accelerator": self.accelerator, "methods": list(self.methods),
            "cases": list(self.cases), "guesses": self.guesses, "seed": self.seed,
            "guess_angle": GUESS_ANGLE, "max_fock_builds": acc.MAX_FOCK_BUILDS,
            "ground_state_tolerance": GROUND_STATE_TOLERANCE,
            "units": {"energy": "hartree (Eh)", "time": "s"},
            "summary": [dataclasses.asdict(s) for s in self.summary],
            "per_case": {c: [dataclasses.asdict(s) for s in rows]
                         for c, rows in self.per_case.items()},
            "verdicts": list(self.verdicts),
            "properties": [dataclasses.asdict(p) | {"value": _finite(p.value)}
                           for p in self.properties],
            "exit_status": self.exit_status,
            "runs": [r.to_json() for r in self.records],
        }


def _finite(x):
    return float(x) if x is not None and math.isfinite(x) else None


# --------------------------------------------------------------------------- pieces


def starting_guesses(ham: acc.Hamiltonian, case_name: str, guesses: int, seed: int
                     ) -> list[acc.Orbitals]:
    """The default guess followed by ``guesses`` perturbed ones (module docstring)."""
    base = acc.core_guess(ham)
    rng = np.random.default_rng([int(seed), zlib.crc32(case_name.encode())])
    return [base] + [acc.rotated(base, GUESS_ANGLE, rng) for _ in range(guesses)]


def classify_state(energy: float, reference, converged: bool) -> tuple[float, str]:
    """(ΔE = E − E_ref, state label) of a final energy (Eh) against a reference.

    Within GROUND_STATE_TOLERANCE: "ground state"; else a ``known_states`` entry of the
    reference within STATE_MATCH_TOLERANCE (entries with an ``energy`` attribute or key,
    ground state first): "known state k, ΔE = …"; else "other state ΔE = …" (negative:
    below the reference, which then missed a state). Not converged: "—".
    """
    e_ref = float(reference.energy)
    de = energy - e_ref if math.isfinite(energy) else float("nan")
    if not converged:
        return de, "—"
    if abs(de) <= GROUND_STATE_TOLERANCE:
        return de, "ground state"
    for k, st in enumerate(getattr(reference, "known_states", None) or ()):
        e = st.get("energy") if isinstance(st, dict) else getattr(st, "energy", None)
        if e is not None and abs(energy - float(e)) <= STATE_MATCH_TOLERANCE:
            if k == 0:
                return de, "ground state"
            label = st.get("label") if isinstance(st, dict) else getattr(st, "label", "")
            named = f" ({label})" if label else ""
            return de, f"known state {k}{named}, ΔE = {de:+.6f} Eh"
    return de, f"other state ΔE = {de:+.6f} Eh"


def summarise(records: Iterable[RunRecord], method: str) -> MethodSummary:
    """Counts and median/worst Fock builds (converged runs) of one method's records."""
    mine = [r for r in records if r.method == method]
    builds = [r.fock_builds for r in mine if r.converged]
    return MethodSummary(method=method, runs=len(mine), converged=len(builds),
                         ground=sum(r.ground for r in mine),
                         median_builds=float(np.median(builds)) if builds else None,
                         worst_builds=max(builds) if builds else None)


def verdict_lines(records: Sequence[RunRecord], accelerator: str,
                  baselines: Sequence[str]) -> tuple[str, ...]:
    """One line per case where the accelerator is worse than the best baseline there.

    Best baseline: most runs in the ground state, then most converged, then lowest median
    Fock builds. Worse: fewer ground-state or converged runs, or (equal counts) a median
    more than MEDIAN_SLACK builds above the best baseline's.
    """
    lines = []
    for case in dict.fromkeys(r.case for r in records):
        rows = [r for r in records if r.case == case]
        mine = summarise(rows, accelerator)
        others = [summarise(rows, b) for b in baselines]
        others = [o for o in others if o.runs]
        if not others or not mine.runs:
            continue
        best = max(others, key=MethodSummary.rank)
        why = []
        if mine.ground < best.ground:
            why.append(f"ground state {mine.ground}/{mine.runs} vs {best.ground}/{best.runs}")
        if mine.converged < best.converged:
            why.append(f"converged {mine.converged}/{mine.runs} vs "
                       f"{best.converged}/{best.runs}")
        if (not why and mine.median_builds is not None and best.median_builds is not None
                and mine.median_builds > best.median_builds + MEDIAN_SLACK):
            why.append(f"{SLOWER_ONLY}: median {mine.median_builds:g} Fock builds vs "
                       f"{best.median_builds:g}")
        if why:
            lines.append(f"{case}: {accelerator} is worse than {best.method}: "
                         + "; ".join(why))
    return tuple(lines)


def _fmt_rate(n: int, runs: int) -> str:
    return f"{n}/{runs} ({100.0 * n / runs:.0f}%)" if runs else "—"


def summary_table(summaries: Sequence[MethodSummary]) -> list[str]:
    """Plain-text rows: method, converged, ground state, median and worst Fock builds."""
    head = ("method", "converged", "ground state", "median builds", "worst builds")
    rows = [head] + [(s.method, _fmt_rate(s.converged, s.runs), _fmt_rate(s.ground, s.runs),
                      "—" if s.median_builds is None else f"{s.median_builds:g}",
                      "—" if s.worst_builds is None else str(s.worst_builds))
                     for s in summaries]
    widths = [max(len(r[i]) for r in rows) for i in range(len(head))]
    out = []
    for k, r in enumerate(rows):
        out.append("  ".join(c.ljust(w) if i == 0 else c.rjust(w)
                             for i, (c, w) in enumerate(zip(r, widths))).rstrip())
        if k == 0:
            out.append("  ".join("-" * w for w in widths))
    return out


def summary_lines(outcome: BenchOutcome) -> list[str]:
    """The text the command prints at the end: the table, properties, verdict lines."""
    lines = [f"accelerator bench: {outcome.accelerator} vs {', '.join(outcome.methods[1:])}",
             f"{len(outcome.cases)} cases × {outcome.guesses + 1} starting guesses "
             f"(seed {outcome.seed}), criterion: measure ≤ convergence, budget "
             f"{acc.MAX_FOCK_BUILDS} Fock builds; builds over converged runs", ""]
    lines += summary_table(outcome.summary)
    if outcome.properties:
        lines.append("")
        lines.append("properties of " + outcome.accelerator + ":")
        names = list(dict.fromkeys(p.name for p in outcome.properties))
        for name in names:
            mine = [p for p in outcome.properties if p.name == name]
            bad = [p for p in mine if p.passed is False]
            na = sum(p.passed is None for p in mine)
            if bad:
                lines.append(f"  ✗ {name}: fails on {len(bad)}/{len(mine)} cases; "
                             f"{bad[0].case}: {bad[0].detail}")
            elif na == len(mine):
                lines.append(f"  – {name}: not applicable on {na}/{len(mine)} cases; "
                             f"{mine[0].case}: {mine[0].detail}")
            else:
                extra = f" ({na} n.a.)" if na else ""
                lines.append(f"  ✓ {name}: holds on {len(mine) - na}/{len(mine)} cases{extra}")
    lines.append("")
    if outcome.verdicts:
        lines += outcome.verdicts
    else:
        lines.append(f"{outcome.accelerator} is nowhere worse than the best baseline")
    lines.append(f"bench {'passed' if outcome.exit_status == 0 else 'failed'} "
                 f"({outcome.seconds:.0f} s)")
    return lines


# --------------------------------------------------------------------------- properties


def _rotation_matrix(angles) -> np.ndarray:
    a, b, c = angles

    def rz(t):
        return np.array([[math.cos(t), -math.sin(t), 0], [math.sin(t), math.cos(t), 0],
                         [0, 0, 1]])

    def ry(t):
        return np.array([[math.cos(t), 0, math.sin(t)], [0, 1, 0],
                         [-math.sin(t), 0, math.cos(t)]])

    return rz(a) @ ry(b) @ rz(c)


def bare_core_guess(ham: acc.Hamiltonian) -> acc.Orbitals:
    """Eigenvectors of H C = S C ε, occupied by aufbau: a rotation-invariant start."""
    h = np.repeat(ham.h[None], ham.n_components, axis=0)
    orb, _ = acc.orbitals_from_fock(ham, h, acc.canonical_orthogonaliser(ham.s))
    return orb


def rotation_invariance(factory, problem, convergence: float,
                        angles=PROPERTY_ROTATION) -> acc.PropertyResult:
    """The molecule rotated rigidly (coordinates × R) gives the same Fock builds (±
    INVARIANCE_BUILDS) and energy (± INVARIANCE_ENERGY Eh); both runs start from the
    rotation-invariant core-Hamiltonian guess."""
    rot = problem.replace(coordinates=np.asarray(problem.coordinates) @ _rotation_matrix(angles).T)
    runs = []
    for p in (problem, rot):
        ham = acc.hamiltonian_for(p)
        runs.append(acc.run_fresh(factory, ham, bare_core_guess(ham),
                                  convergence=convergence, problem=p))
    return acc.compare_runs("rotation-invariance", "rotated molecule", *runs)


def random_orthonormal_basis(s: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """T = S^(−½) Q with Q a random orthogonal matrix: TᵀST = 1 (no linear dependence)."""
    low = acc.lowdin(s)
    q, r = np.linalg.qr(rng.standard_normal(s.shape))
    return low.x @ (q * np.sign(np.diag(r)))


def accelerator_properties(factory, problem, ham: acc.Hamiltonian, start: acc.Orbitals,
                           convergence: float) -> list[acc.PropertyResult]:
    """The named properties on one problem: fixed-point, determinism, invariance (a
    random orthonormal basis), rotation-invariance (the molecule rotated),
    no-nan-degenerate.

    Fixed point: the converged state handed over is the one the example commutator DIIS
    reaches from ``start`` at FIXED_POINT_CONVERGENCE (so the property does not depend
    on the accelerator converging by itself); the history before it is the accelerator's
    own first PROPERTY_HISTORY iterates from ``start``.
    """
    from harness.bench.example_accelerator import CommutatorDIIS

    rec: list = []
    acc.run_fresh(factory, ham, start, convergence=convergence, problem=problem, record=rec,
                  max_fock_builds=PROPERTY_HISTORY + 1)
    tight = min(convergence, acc.FIXED_POINT_CONVERGENCE)
    ref_run = acc.run_scf(ham, CommutatorDIIS(), start, convergence=tight, problem=problem)
    out = []
    final = acc.converged_iterate(ham, ref_run, tight) if ref_run.converged else None
    if final is not None:
        out.append(_guarded("fixed-point", lambda: acc.fixed_point(
            factory, problem, ham, [it for it, _ in rec] + [final])))
    else:
        out.append(acc.PropertyResult("fixed-point", None, float("nan"),
                                      f"n.a.: no state converged to {tight:.0e} to hand over "
                                      f"({ref_run.reason})"))
    out.append(_guarded("determinism", lambda: acc.determinism(factory, problem, ham, start,
                                                               convergence)))
    rng = np.random.default_rng(PROPERTY_SEED)
    if acc.lowdin(ham.s).n_dropped == 0:
        basis = random_orthonormal_basis(ham.s, rng)
        out.append(_guarded("invariance", lambda: acc.invariance(
            factory, problem, ham, start, basis, convergence, "random orthonormal basis")))
    out.append(_guarded("rotation-invariance",
                        lambda: rotation_invariance(factory, problem, convergence)))
    first = rec[0][0] if rec else final
    if first is not None:
        out.append(_guarded("no-nan-degenerate",
                            lambda: acc.degenerate_subspace(factory, problem, ham, first)))
    return out


def _guarded(name: str, compute: Callable[[], acc.PropertyResult]) -> acc.PropertyResult:
    """``compute()``, or a failed property saying what went wrong: what the accelerator
    raised (any exception, ``sys.exit``, a call over its time limit — everything but
    KeyboardInterrupt) or what was wrong with what it returned (ProtocolError)."""
    try:
        return compute()
    except KeyboardInterrupt:
        raise
    except acc.ProtocolError as exc:
        return acc.PropertyResult(name, False, float("nan"), str(exc))
    except BaseException as exc:  # the accelerator's own code
        return acc.PropertyResult(name, False, float("nan"),
                                  f"the accelerator raised {first_line(exc)}")


# --------------------------------------------------------------------------- the bench


def _method_runners(accelerator_name: str, factory, baselines: Sequence[str], cap: int):
    """(name, run(ham, start, problem) -> ScfRun) for the accelerator and each baseline."""
    def loop(make):
        return lambda ham, start, problem: acc.run_fresh(
            make, ham, start, convergence=problem.convergence, problem=problem,
            max_fock_builds=cap)

    runners = [(accelerator_name, loop(factory))]
    for name in baselines:
        if name in acc.LOOP_BASELINES:
            runners.append((name, loop(acc.LOOP_BASELINES[name])))
        elif name == "pyscf-newton":
            runners.append((name, lambda ham, start, problem: acc.run_newton(
                ham, start, convergence=problem.convergence, max_fock_builds=cap)))
        else:
            from harness.contract.errors import HarnessError
            raise HarnessError(f"unknown baseline {name!r} (known: "
                               f"{', '.join(acc.BASELINE_NAMES)})", field="baselines")
    return runners


def run_bench(accelerator, *, cases, guesses: int = DEFAULT_GUESSES, seed: int = 0,
              report_dir=None, baselines: Sequence[str] = DEFAULT_BASELINES,
              progress: Callable | None = None, references=None,
              write_references: bool = False, properties: bool = True,
              max_fock_builds: int = acc.MAX_FOCK_BUILDS,
              call_limit: float | None = acc.ACCELERATOR_CALL_LIMIT,
              plots: bool = True) -> BenchOutcome:
    """Bench ``accelerator`` against ``baselines`` on ``cases`` (module docstring).

    accelerator: ``"MODULE:NAME"`` / ``"path.py:NAME"`` (loaded and run in its own
    process, :mod:`harness.bench.isolated`) or an object (class or instance following
    the protocol of :mod:`harness.bench.accelerators`, called in this process). cases: ``Case`` objects.
    guesses: perturbed starting guesses per case (plus the default guess). baselines:
    names, each run once (a repeated name is dropped). report_dir: folder for
    ``bench.jsonl`` (incremental) and ``bench.json``, and with ``plots`` the PNGs and
    ``index.html`` (:func:`write_report`, after ``bench.json``, so that a plotting
    failure cannot lose it); created; None: nothing written. progress: called as
    ``progress(done, total, record)`` after every run. references / write_references:
    passed to ``reference_for`` (directory of stored references; store computed ones).
    call_limit: seconds each ``reset``/``step`` call of the accelerator may take
    (:func:`harness.bench.accelerators.time_limited`; None: no limit; at most
    ``MAX_CALL_LIMIT``); a slower call fails that run or property, and the bench goes on.
    Raises HarnessError (one line), before any run, for a bad accelerator, baseline
    name, call limit or report folder (:func:`check_report_dir`).
    """
    from harness.contract.errors import HarnessError

    t0 = time.perf_counter()
    if call_limit and not 0 < call_limit <= acc.MAX_CALL_LIMIT:
        raise HarnessError(f"expected seconds in (0, {acc.MAX_CALL_LIMIT:g}], got "
                           f"{call_limit!r}", field="call_limit")
    isolated = None
    if isinstance(accelerator, str):  # its own process, behind the closed channel
        from harness.bench.isolated import Isolated

        isolated = Isolated(accelerator, call_limit)
        name, factory = isolated.load(), isolated.factory
    else:  # an object already in this process: called here
        name, factory = acc.load_accelerator(accelerator)
        factory = acc.time_limited(factory, call_limit)
    try:
        return _bench(name, factory, isolated, cases=cases, guesses=guesses, seed=seed,
                      report_dir=report_dir, baselines=baselines, progress=progress,
                      references=references, write_references=write_references,
                      properties=properties, max_fock_builds=max_fock_builds,
                      plots=plots, t0=t0)
    finally:
        if isolated is not None:
            isolated.close()


def _bench(name, factory, isolated, *, cases, guesses, seed, report_dir, baselines,
           progress, references, write_references, properties, max_fock_builds, plots,
           t0) -> BenchOutcome:
    from harness.catalogue.references import reference_for

    baselines = tuple(dict.fromkeys(baselines))
    if name in baselines:
        name = f"{name} (yours)"
    cases = tuple(cases)
    runners = _method_runners(name, factory, baselines, max_fock_builds)
    methods = tuple(n for n, _ in runners)
    out_dir = Path(report_dir) if report_dir is not None else None
    jsonl = None
    if out_dir is not None:
        check_report_dir(out_dir, [c.name for c in cases])
        out_dir.mkdir(parents=True, exist_ok=True)
        jsonl = out_dir / JSONL_NAME
        jsonl.write_text("", encoding="utf-8")
    total = len(cases) * (guesses + 1) * len(runners)
    records: list[RunRecord] = []
    props: list[CaseProperty] = []
    for case in cases:
        problem = case.problem()
        reference, _ = reference_for(case, references, write=write_references)
        ham = acc.hamiltonian_for(problem)
        starts = starting_guesses(ham, case.name, guesses, seed)
        for g, start in enumerate(starts):
            for method, run in runners:
                result = run(ham, start, problem)
                de, state = classify_state(result.energy, reference, result.converged)
                rec = RunRecord(case=case.name, method=method, guess=g, status=result.status,
                                reason=result.reason, fock_builds=int(result.fock_builds),
                                seconds=result.seconds, energy=float(result.energy),
                                reference_energy=float(reference.energy), delta_e=de,
                                state=state,
                                history=tuple(tuple(row) for row in result.history.tolist()))
                records.append(rec)
                if jsonl is not None:
                    with open(jsonl, "a", encoding="utf-8") as fh:
                        fh.write(json.dumps(rec.to_json(), ensure_ascii=False) + "\n")
                if progress is not None:
                    progress(len(records), total, rec)
        if properties:
            for p in accelerator_properties(factory, problem, ham, starts[0],
                                            problem.convergence):
                props.append(CaseProperty(case.name, p.name, p.passed, p.value, p.detail))
        if isolated is not None:  # nothing the accelerator started outlives its case
            isolated.close()
    summary = tuple(summarise(records, m) for m in methods)
    per_case = {c.name: tuple(summarise([r for r in records if r.case == c.name], m)
                              for m in methods) for c in cases}
    outcome = BenchOutcome(accelerator=name, methods=methods,
                           cases=tuple(c.name for c in cases), guesses=guesses, seed=seed,
                           records=tuple(records), summary=summary, per_case=per_case,
                           verdicts=verdict_lines(records, name, methods[1:]),
                           properties=tuple(props), seconds=time.perf_counter() - t0,
                           convergence={c.name: c.problem().convergence for c in cases})
    if out_dir is not None:
        path = out_dir / JSON_NAME
        path.write_text(json.dumps(outcome.to_json(), indent=1, ensure_ascii=False) + "\n",
                        encoding="utf-8")
        outcome = dataclasses.replace(outcome, files=(str(jsonl), str(path)))
        if plots:
            outcome = write_report(outcome, out_dir)
    return outcome


def report_names(cases: Iterable[str]) -> list[str]:
    """The files a report folder receives for these case names (see :func:`run_bench`)."""
    return ([JSONL_NAME, JSON_NAME, HTML_NAME, "fock-builds.png"]
            + [f"convergence-{_safe(c)}.png" for c in cases])


def check_report_dir(directory, cases: Iterable[str]) -> Path:
    """``directory`` as a Path if a report can be written there: it is a folder or does
    not exist yet, and none of :func:`report_names` is there as anything but a regular
    file (it is replaced). Raises HarnessError (one line) otherwise."""
    from harness.contract.errors import HarnessError

    directory = Path(directory)
    if directory.exists() and not directory.is_dir():
        raise HarnessError(f"{directory} is not a folder (it is a file)", field="report folder")
    for name in report_names(cases):
        path = directory / name
        if path.exists() and not path.is_file():
            what = "a folder" if path.is_dir() else "not a regular file"
            raise HarnessError(f"{path} is {what}; remove it or give another folder",
                               field="report folder")
    return directory


def write_report(outcome: BenchOutcome, directory) -> BenchOutcome:
    """The plots (:func:`write_plots`) and ``index.html`` (:func:`write_html`) of
    ``outcome`` in ``directory``; returns ``outcome`` with them added to its files."""
    directory = Path(directory)
    images = write_plots(outcome, directory)
    html_path = write_html(outcome, directory, images)
    return dataclasses.replace(outcome, files=tuple(outcome.files) + tuple(
        str(p) for p in images) + (str(html_path),))


# --------------------------------------------------------------------------- plots


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _safe(name: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in name)


def write_plots(outcome: BenchOutcome, directory) -> list[Path]:
    """PNG files in ``directory``: ``convergence-<case>.png`` (log₁₀ measure vs Fock
    builds, one colour per method; the default guess solid, perturbed guesses thin) and
    ``fock-builds.png`` (median Fock builds per case and method; hatched bars: no run
    converged, drawn at the budget). Returns the paths."""
    plt = _pyplot()
    directory = Path(directory)
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    colour = {m: colours[i % len(colours)] for i, m in enumerate(outcome.methods)}
    paths = []
    for case in outcome.cases:
        fig, ax = plt.subplots(figsize=(7, 4.2))
        for method in outcome.methods:
            for r in (r for r in outcome.records if r.case == case and r.method == method):
                h = np.array(r.history, dtype=float).reshape(-1, 3)
                if not h.size:
                    continue
                y = np.log10(np.maximum(h[:, 2], 1e-16))
                mine = method == outcome.methods[0]  # the accelerator: dashed, on top
                ax.plot(h[:, 0], y, color=colour[method], ls="--" if mine else "-",
                        zorder=3 if mine else 2,
                        lw=1.8 if r.guess == 0 else 0.7, alpha=1.0 if r.guess == 0 else 0.45,
                        label=method if r.guess == 0 else None)
        if case in outcome.convergence:
            ax.axhline(math.log10(outcome.convergence[case]), color="grey", ls=":", lw=1)
        ax.set_xlabel("Fock builds")
        ax.set_ylabel("log₁₀ max|X(FPS − SPF)X|")
        ax.set_title(case)
        ax.legend(fontsize=7, ncol=2)
        fig.tight_layout()
        path = directory / f"convergence-{_safe(case)}.png"
        fig.savefig(path, dpi=90)
        plt.close(fig)
        paths.append(path)
    fig, ax = plt.subplots(figsize=(max(6, 1.1 * len(outcome.cases) + 2), 4.2))
    width = 0.8 / max(1, len(outcome.methods))
    for k, method in enumerate(outcome.methods):
        xs = np.arange(len(outcome.cases)) + (k - (len(outcome.methods) - 1) / 2) * width
        for x, case in zip(xs, outcome.cases):
            s = next(s for s in outcome.per_case[case] if s.method == method)
            value = s.median_builds if s.median_builds is not None else acc.MAX_FOCK_BUILDS
            ax.bar(x, value, width, color=colour[method],
                   hatch="//" if s.median_builds is None else None,
                   alpha=1.0 if s.median_builds is not None else 0.35)
    from matplotlib.patches import Patch

    handles = [Patch(color=colour[m], label=m) for m in outcome.methods]
    handles.append(Patch(facecolor="white", edgecolor="grey", hatch="//",
                         label="no run converged"))
    ax.set_xticks(np.arange(len(outcome.cases)))
    ax.set_xticklabels(outcome.cases, rotation=30, ha="right", fontsize=7)
    ax.set_ylabel("median Fock builds (converged runs)")
    ax.set_title("Fock builds to convergence")
    ax.legend(handles=handles, fontsize=7, ncol=2)
    fig.tight_layout()
    path = directory / "fock-builds.png"
    fig.savefig(path, dpi=90)
    plt.close(fig)
    paths.append(path)
    return paths


def write_html(outcome: BenchOutcome, directory, images: Sequence[Path]) -> Path:
    """``index.html``: a self-contained page (images embedded as base64) with the summary
    table, properties, verdict lines, one table per case and the plots."""
    import base64
    import html

    directory = Path(directory)
    esc = html.escape

    def table(rows: Sequence[MethodSummary]) -> str:
        head = ("method", "converged", "ground state", "median builds", "worst builds")
        body = "".join(
            "<tr>" + "".join(f"<td>{esc(c)}</td>" for c in (
                s.method, _fmt_rate(s.converged, s.runs), _fmt_rate(s.ground, s.runs),
                "—" if s.median_builds is None else f"{s.median_builds:g}",
                "—" if s.worst_builds is None else str(s.worst_builds))) + "</tr>"
            for s in rows)
        return ("<table><tr>" + "".join(f"<th>{h}</th>" for h in head) + "</tr>" + body
                + "</table>")

    def img(path: Path) -> str:
        data = base64.b64encode(Path(path).read_bytes()).decode("ascii")
        return f'<img alt="{esc(Path(path).name)}" src="data:image/png;base64,{data}">'

    parts = [f"<h1>Accelerator bench: {esc(outcome.accelerator)}</h1>",
             f"<p>{len(outcome.cases)} cases × {outcome.guesses + 1} starting guesses "
             f"(seed {outcome.seed}); criterion measure ≤ convergence; budget "
             f"{acc.MAX_FOCK_BUILDS} Fock builds; builds counted over converged runs. "
             f"Energies in hartree (Eh).</p>", "<h2>Summary</h2>", table(outcome.summary)]
    parts.append("<h2>Verdicts</h2><ul>" + ("".join(f"<li>{esc(v)}</li>"
                                                    for v in outcome.verdicts)
                 or f"<li>{esc(outcome.accelerator)} is nowhere worse than the best "
                    f"baseline</li>") + "</ul>")
    if outcome.properties:
        parts.append("<h2>Properties</h2><table><tr><th>case</th><th>property</th>"
                     "<th>holds</th><th>detail</th></tr>" + "".join(
                         f"<tr><td>{esc(p.case)}</td><td>{esc(p.name)}</td><td>"
                         f"{'n.a.' if p.passed is None else ('yes' if p.passed else 'NO')}"
                         f"</td><td>{esc(p.detail)}</td></tr>" for p in outcome.properties)
                     + "</table>")
    by_name = {Path(p).name: p for p in images}
    if "fock-builds.png" in by_name:
        parts.append(img(by_name["fock-builds.png"]))
    for case in outcome.cases:
        parts.append(f"<h2>{esc(case)}</h2>")
        parts.append(table(outcome.per_case[case]))
        states = {}
        for r in outcome.records:
            if r.case == case and r.converged and r.state != "ground state":
                states.setdefault(r.state, []).append(f"{r.method} (guess {r.guess})")
        if states:
            parts.append("<ul>" + "".join(f"<li>{esc(s)}: {esc(', '.join(v))}</li>"
                                          for s, v in states.items()) + "</ul>")
        png = by_name.get(f"convergence-{_safe(case)}.png")
        if png is not None:
            parts.append(img(png))
    page = ("<!DOCTYPE html><html><head><meta charset='utf-8'><title>accelerator bench"
            "</title><style>body{font-family:sans-serif;max-width:60em;margin:auto}"
            "table{border-collapse:collapse}td,th{border:1px solid #ccc;padding:2px 6px;"
            "text-align:right}td:first-child{text-align:left}img{max-width:100%}</style>"
            "</head><body>" + "\n".join(parts) + "</body></html>\n")
    path = directory / HTML_NAME
    path.write_text(page, encoding="utf-8")
    return path


# --------------------------------------------------------------------------- suites

#: The bench's own suite files, by name (paths relative to the reference directory),
#: and the folders holding their stored references.
BENCH_SUITES = {"hard": "suites/hard.toml"}
BENCH_REFERENCES = {"hard": "suites/hard-data"}


def bench_reference_dir(name: str, reference_dir=None) -> Path | None:
    """The folder of stored references of bench suite ``name`` (None: the catalogue's)."""
    from harness.catalogue.cases import default_reference_dir

    if name not in BENCH_REFERENCES:
        return None
    root = Path(reference_dir) if reference_dir is not None else default_reference_dir()
    return root / BENCH_REFERENCES[name]


def store_suite_references(name: str, reference_dir=None) -> list[tuple[str, str]]:
    """Compute (pyscf, harness.catalogue.references policy) and store the missing or stale
    references of bench suite ``name`` in :func:`bench_reference_dir`; returns
    ``harness.catalogue.references.build``'s (case, what happened) lines."""
    from harness.catalogue.references import build

    return build(bench_suite(name, reference_dir), bench_reference_dir(name, reference_dir))


def bench_suite(name: str, reference_dir=None):
    """Cases of a bench suite: ``hard`` (``references/suites/hard.toml``), else the
    catalogue suite of that name. Raises CaseError (one line) for an unknown name."""
    from harness.catalogue.cases import default_reference_dir, load_catalogue, load_suite_file

    root = Path(reference_dir) if reference_dir is not None else default_reference_dir()
    if name in BENCH_SUITES:
        return load_suite_file(root / BENCH_SUITES[name])
    return load_catalogue(root / "cases.toml").suite(name)
