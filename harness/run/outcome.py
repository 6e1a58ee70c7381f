"""The outcome of a run: its finished cases and, per case, what was judged.

Apart from the runner so that a caller that starts no process (``check-result``) can
build one without importing ``harness.run.runner``.
"""

from __future__ import annotations

import dataclasses

from harness.contract.results import CaseResult


@dataclasses.dataclass(frozen=True)
class RunOutcome:
    """The finished cases (input order), whether the run was interrupted, wall time (s).

    For certificates (``harness.report.certificate.write_certificate``), keyed by case name:
    ``problems`` (the ``Problem`` each launched case was given, bohr), ``solutions``
    (the extracted solution, ``harness.contract.solution.extract``; None when the plug-in sent
    none) and ``references`` (the ``Reference`` used, or None when there was none).
    """

    cases: tuple[CaseResult, ...]
    interrupted: bool
    seconds: float
    problems: dict = dataclasses.field(default_factory=dict)
    solutions: dict = dataclasses.field(default_factory=dict)
    references: dict = dataclasses.field(default_factory=dict)

    @property
    def passed(self) -> bool:
        """True when the run finished and no case failed (an empty run does not pass).
        Unsupported cases (``CaseResult.unsupported``) are not failures; ``--require-all``
        turns them into failures before they get here."""
        return bool(self.cases) and not self.interrupted and not any(
            c.failed for c in self.cases)

    @property
    def counts(self) -> tuple[int, int]:
        """(passed, failed) among the finished cases (unsupported ones in neither)."""
        passed, failed, _ = self.tally
        return passed, failed

    @property
    def tally(self) -> tuple[int, int, int]:
        """(passed, failed, unsupported) among the finished cases."""
        statuses = [c.status for c in self.cases]
        return (statuses.count("passed"), statuses.count("failed"),
                statuses.count("unsupported"))
