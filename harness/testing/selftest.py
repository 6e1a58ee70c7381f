"""``scf-harness selftest``: run every planted-bug plug-in and check the harness's verdicts.

For each entry of :func:`harness.testing.planted.catalogue` the plug-in runs (in this process) on
its catalogue case, :func:`harness.verdict.judge.judge` judges the result against the stored
reference, and the verdict is compared with what the entry expects: exactly the checks in
``entry.fails`` fail, the expected hint is given (and none where none may be), and the
detected AO convention is the one planted. A harness whose checks stop catching what they
were built to catch — or start failing correct codes — fails its self-test.

Energies in Eh; the plug-ins get coordinates in bohr.
"""

from __future__ import annotations

import dataclasses
import traceback

from harness.testing import planted as _planted
from harness.contract.results import Status


@dataclasses.dataclass(frozen=True)
class EntryOutcome:
    """What became of one planted entry.

    ``failed``: the checks that failed; ``hints``: check name → hint text for the checks
    that carry one; ``mismatches``: how the verdict differs from the expectation (empty
    when it matches); ``error``: set when the plug-in or the evaluation raised.
    """

    entry: object
    failed: frozenset = frozenset()
    hints: dict = dataclasses.field(default_factory=dict)
    mismatches: tuple = ()
    error: str | None = None

    @property
    def matched(self) -> bool:
        return not self.mismatches and self.error is None


@dataclasses.dataclass(frozen=True)
class SelftestOutcome:
    """All entries' outcomes; ``exit_code`` is 0 when every entry matched, else 1."""

    entries: tuple

    @property
    def n_passed(self) -> int:
        return sum(o.matched for o in self.entries)

    @property
    def n_failed(self) -> int:
        return len(self.entries) - self.n_passed

    @property
    def passed(self) -> bool:
        return self.n_failed == 0

    @property
    def exit_code(self) -> int:
        return 0 if self.passed else 1


def select(entries, only: str | None):
    """The entries of module ``only`` when it names one of :data:`harness.testing.planted.MODULES`
    (``"core"``), else those whose ``"<module>:<function> @ <case>"`` contains ``only``;
    all entries when ``only`` is None or empty."""
    if not only:
        return tuple(entries)
    if only in _planted.MODULES:
        return tuple(e for e in entries
                     if e.solve.__module__ == f"{_planted.__name__}.{only}")
    return tuple(e for e in entries if only in f"{e.spec} @ {e.case}")


def compare(entry, results: dict) -> tuple[str, ...]:
    """How the results (check name → CheckResult) differ from what ``entry`` expects."""
    failed = {name for name, r in results.items() if r.status is Status.FAILED}
    expected = set(entry.fails)
    out = []
    extra, missing = sorted(failed - expected), sorted(expected - failed)
    if extra:
        out.append("also failed: " + ", ".join(extra))
    if missing:
        out.append("did not fail: " + ", ".join(missing))
    if entry.hint:
        r = results.get(entry.hint_check)
        if r is None:
            out.append(f"no {entry.hint_check} check to carry the hint")
        elif not r.hint or entry.hint not in r.hint:
            out.append(f"hint on {entry.hint_check}: expected '{entry.hint}', got "
                       + (f"'{r.hint}'" if r.hint else "none"))
    for name in sorted(entry.no_hint_on):
        r = results.get(name)
        if r is not None and r.hint is not None:
            out.append(f"unexpected hint on {name}: '{r.hint}'")
    if entry.convention:
        r = results.get("basis")
        if r is None:
            out.append("no basis check to report the AO convention")
        elif entry.convention not in r.message:
            out.append(f"basis: expected '{entry.convention}' in '{r.message}'")
    return tuple(out)


def run_entry(entry, catalogue=None) -> EntryOutcome:
    """Run one entry's plug-in on its case, evaluate it, and compare. Never raises."""
    from harness.catalogue.cases import load_catalogue
    from harness.catalogue.references import reference_for
    from harness.contract.solution import extract
    from harness.verdict.judge import JudgeSettings, judge

    try:
        case = (catalogue or load_catalogue()).case(entry.case)
        problem = case.problem()
        reference, source = reference_for(case)
        verdict = judge(problem, extract(entry.solve(problem)), reference,
                        JudgeSettings(reference_source=source))
    except Exception as exc:  # one broken entry must not stop the self-test
        where = traceback.extract_tb(exc.__traceback__)[-1]
        return EntryOutcome(entry, error=f"{type(exc).__name__}: {exc} "
                                         f"({where.filename.rsplit('/', 1)[-1]}:{where.lineno})")
    if verdict.error is not None:  # a check raised: judge's one-line error
        return EntryOutcome(entry, error=verdict.error)
    results = {r.name: r for r in verdict.checks}
    failed = frozenset(n for n, r in results.items() if r.status is Status.FAILED)
    hints = {n: r.hint for n, r in results.items() if r.hint}
    return EntryOutcome(entry, failed=failed, hints=hints, mismatches=compare(entry, results))


def check_summary(outcomes) -> list[str]:
    """Per check, how many of the planted bugs meant for it (``fails`` has it) it caught;
    per hinted check, how many of the expected hints were given. One line each."""
    from harness.checks.tolerances import CHECK_NAMES

    meant: dict[str, list] = {}
    for o in outcomes:
        for name in o.entry.fails:
            meant.setdefault(name, []).append(name in o.failed)
    order = [n for n in CHECK_NAMES if n in meant] + sorted(set(meant) - set(CHECK_NAMES))
    lines = [f"{name}: caught {sum(meant[name])} of {len(meant[name])} planted bug"
             f"{'s' if len(meant[name]) != 1 else ''} meant for it" for name in order]
    hinted: dict[str, list] = {}
    for o in outcomes:
        if o.entry.hint:
            given = o.hints.get(o.entry.hint_check) or ""
            hinted.setdefault(o.entry.hint_check, []).append(o.entry.hint in given)
    lines += [f"hint on {name}: given in {sum(v)} of {len(v)} planted bug"
              f"{'s' if len(v) != 1 else ''} meant for it" for name, v in sorted(hinted.items())]
    correct = [o for o in outcomes if o.entry.correct]
    if correct:
        lines.append(f"correct variants: {sum(o.matched for o in correct)} of {len(correct)} "
                     f"pass")
    return lines


def _marks(console) -> tuple[str, str]:
    encoding = (getattr(console, "encoding", "") or "").lower()
    return ("✓", "✗") if encoding.startswith("utf") else ("ok", "X")


def _verdict(outcome, marks) -> str:
    ok, bad = marks
    if outcome.error is not None:
        return f"{bad} error: {outcome.error}"
    if outcome.mismatches:
        return f"{bad} mismatch: " + "; ".join(outcome.mismatches)
    return f"{ok} passes" if outcome.entry.correct else f"{ok} caught"


def render(outcome: SelftestOutcome, console) -> None:
    """Print the entry table, the per-check summary and the closing line."""
    from rich import box
    from rich.table import Table

    marks = _marks(console)
    table = Table(box=box.SIMPLE_HEAD, pad_edge=False, show_edge=False)
    table.add_column("entry", no_wrap=True)
    table.add_column("what it plants")
    table.add_column("expected failing checks")
    table.add_column("verdict")
    for o in outcome.entries:
        e = o.entry
        table.add_row(f"{e.name} @ {e.case}", e.note, ", ".join(sorted(e.fails)) or "(none)",
                      _verdict(o, marks))
    console.print(table)
    console.print()
    for line in check_summary(outcome.entries):
        console.print(line, markup=False, soft_wrap=True)
    console.print()
    console.print(f"{outcome.n_passed} passed, {outcome.n_failed} failed", markup=False)


def run_selftest(console=None, *, only: str | None = None) -> SelftestOutcome:
    """Run the planted entries (those whose ``module:function @ case`` contains ``only``)
    and print the report on ``console`` (none printed when None). Exit code: ``.exit_code``.
    """
    from harness.catalogue.cases import load_catalogue

    entries = select(_planted.catalogue(), only)
    catalogue = load_catalogue() if entries else None
    outcome = SelftestOutcome(tuple(run_entry(e, catalogue) for e in entries))
    if console is not None:
        render(outcome, console)
    return outcome
