"""Show a run's verdicts: progress lines, the case × check table, failures, JSON.

Terminal output uses rich and stays readable without a terminal (CI logs are 140
columns, no colour when ``NO_COLOR`` is set or the output is not a TTY). The last
line of :func:`render` is ``"N passed, M failed"`` alone on a line, which CI reads
(``"N passed, M failed, K unsupported"`` when some case is unsupported).
All energies in hartree (Eh), lengths in bohr, times in seconds.
"""

from __future__ import annotations

import json
import math
import os
import platform
import sys
from pathlib import Path
from typing import Any, Mapping, Sequence

from rich import box
from rich.console import Console
from rich.table import Table
from rich.text import Text

from harness.run.atomic import atomic_write
from harness.contract.results import CaseResult, CheckResult, Status
from harness.checks.table import COLUMNS as CHECK_COLUMNS
from harness.checks.tolerances import CHECK_NAMES

#: Width used when the output is not a terminal and COLUMNS is not set (CI logs).
PLAIN_WIDTH = 140

#: Column headers of the verdict table, by check: the ``column`` of each entry of the
#: declared table of checks (``harness.checks.table.CHECKS``).
SHORT_NAMES = dict(CHECK_COLUMNS)

#: Width of one check column in the verdict table (a ``.0e`` value and a mark).
COLUMN_WIDTH = 8


def make_console(file=None, *, width: int | None = None) -> Console:
    """A rich Console for the report: colour only on a TTY without NO_COLOR; outside a
    terminal (and without COLUMNS) the width is PLAIN_WIDTH."""
    file = sys.stdout if file is None else file
    is_tty = bool(getattr(file, "isatty", lambda: False)())
    if width is None and not is_tty and "COLUMNS" not in os.environ:
        width = PLAIN_WIDTH
    no_color = "NO_COLOR" in os.environ or not is_tty
    return Console(file=file, width=width, highlight=False, emoji=False,
                   no_color=no_color, color_system=None if no_color else "auto",
                   force_terminal=is_tty and not no_color, soft_wrap=False)


def _marks(console: Console) -> tuple[str, str]:
    encoding = (getattr(console, "encoding", "") or "").lower()
    return ("✓", "✗") if encoding.startswith("utf") else ("ok", "X")


#: The cell of an unsupported case in every check column of the verdict table.
UNSUPPORTED_CELL = "uns."


def _tally(cases: Sequence[CaseResult]) -> tuple[int, int, int]:
    statuses = [c.status for c in cases]
    return (statuses.count("passed"), statuses.count("failed"),
            statuses.count("unsupported"))


def summary_line(outcome) -> str:
    """``"12 passed, 1 failed"``: the counts of the finished cases, with
    ``", 3 unsupported"`` appended when some case is unsupported."""
    n_pass, n_fail, n_unsupported = _tally(outcome.cases)
    line = f"{n_pass} passed, {n_fail} failed"
    return line + (f", {n_unsupported} unsupported" if n_unsupported else "")


def first_failure(result: CaseResult) -> str | None:
    """The message that says first why a case failed (its error, or its first failing check)."""
    if result.error is not None:
        return result.error
    if result.status == "unsupported":
        return None
    fails = result.failures
    if fails:
        return fails[0].message
    if not result.passed:
        return "no check passed"
    return None


def progress_line(result: CaseResult, console: Console | None = None) -> Text:
    """``✓ water-sto-3g-rhf  1.2 s``, ``✗ ...  <first failing message>`` or
    ``– ...  unsupported: <reason>``."""
    ok_mark, bad_mark = _marks(console) if console is not None else ("✓", "✗")
    seconds = result.plugin_seconds
    took = f"{seconds:.1f} s" if isinstance(seconds, (int, float)) else "-"
    line = Text()
    unsupported = result.status == "unsupported"
    if result.passed:
        line.append(ok_mark, style="green")
    elif unsupported:
        line.append(_unsupported_mark(console), style="yellow")
    else:
        line.append(bad_mark, style="bold red")
    line.append(f" {result.name}  {took}")
    if result.reference_source == "computed":
        line.append("  (reference computed with pyscf now, not stored)", style="dim")
    elif result.reference_source == "written":
        line.append("  (reference computed with pyscf now and stored)", style="dim")
    why = first_failure(result)
    if why is not None:
        line.append(f"  {why}", style="red")
    elif unsupported:
        line.append(f"  unsupported: {result.unsupported}", style="yellow")
    return line


def _unsupported_mark(console: Console | None) -> str:
    encoding = (getattr(console, "encoding", "") or "utf").lower() if console else "utf"
    return "–" if encoding.startswith("utf") else "-"


def print_progress(console: Console, result: CaseResult) -> None:
    """Print one progress line for a finished case (no wrapping: one line per case)."""
    console.print(progress_line(result, console), soft_wrap=True)


def _cell(check: CheckResult | None, marks: tuple[str, str]) -> Text:
    if check is None:
        return Text("·", style="dim")
    if check.status is Status.NOT_APPLICABLE:
        return Text("n.a.", style="dim")
    if check.status is Status.SKIPPED:
        return Text("skip", style="dim")
    ok = check.status is Status.PASSED
    value = "" if check.value is None or check.name == "well-formed" else f"{check.value:.0e}"
    return Text(value + (marks[0] if ok else marks[1]), style="green" if ok else "bold red")


def verdict_tables(cases: Sequence[CaseResult], console: Console | None = None,
                   width: int = PLAIN_WIDTH) -> list[Table]:
    """The verdict table split into panels of check columns that fit ``width``."""
    names = shown_checks(cases)
    case_width = max([len("case")] + [len(r.name) for r in cases]) + 1
    per_panel = max(1, (width - case_width) // COLUMN_WIDTH)
    return [verdict_table(cases, console, names=names[i:i + per_panel])
            for i in range(0, len(names), per_panel)]


def verdict_table(cases: Sequence[CaseResult], console: Console | None = None,
                  names: Sequence[str] | None = None) -> Table:
    """Rows = cases, columns = the checks in CHECK_NAMES order; each cell the measured
    value (``.0e``) with ✓/✗, or ``n.a.`` / ``skip``; ``·`` when the check did not run;
    ``uns.`` across the row of an unsupported case."""
    marks = _marks(console) if console is not None else ("✓", "✗")
    table = Table(box=box.SIMPLE_HEAD, padding=(0, 1), pad_edge=False, show_edge=False,
                  collapse_padding=True)
    table.add_column("case", no_wrap=True, overflow="ellipsis")
    names = shown_checks(cases) if names is None else list(names)
    for name in names:
        table.add_column(SHORT_NAMES.get(name, name), justify="right", no_wrap=True)
    for result in cases:
        if result.status == "unsupported":
            table.add_row(Text(result.name, style="yellow"),
                          *(Text(UNSUPPORTED_CELL, style="yellow") for _ in names))
            continue
        by_name = {c.name: c for c in result.checks}
        name = Text(result.name, style=None if result.passed else "bold red")
        table.add_row(name, *(_cell(by_name.get(n), marks) for n in names))
    return table


def shown_checks(cases: Sequence[CaseResult]) -> list[str]:
    """The checks worth a column: those that ran (passed or failed) on some case; when no
    case ran any check (every plug-in failed), the core checks, so the table keeps its shape."""
    ran = {c.name for r in cases for c in r.checks
           if c.status in (Status.PASSED, Status.FAILED)}
    names = [n for n in CHECK_NAMES if n in ran]
    return names or [n for n in CHECK_NAMES if n in SHORT_NAMES]


def _legend_lines(width: int, names: Sequence[str] = CHECK_NAMES) -> list[str]:
    """``columns: form = well-formed, ...`` broken between entries to fit ``width``."""
    lines, line = [], "columns:"
    for name in names:
        entry = f" {SHORT_NAMES.get(name, name)} = {name},"
        if len(line) + len(entry) > width and line.strip():
            lines.append(line)
            line = "        "
        line += entry
    lines.append(line.rstrip(","))
    return lines


def render(outcome, console: Console, *, quiet: bool = False) -> None:
    """Print the final report: the verdict table (unless quiet), the failing checks'
    messages and hints per failed case, the unsupported cases with their reasons, then
    ``N passed, M failed`` (``, K unsupported``) alone on a line."""
    if outcome.cases and not quiet:
        for k, table in enumerate(verdict_tables(outcome.cases, console,
                                                 min(console.width, PLAIN_WIDTH))):
            if k:
                console.print()
            console.print(table)
        for line in _legend_lines(min(console.width, PLAIN_WIDTH), shown_checks(outcome.cases)):
            console.print(Text(line, style="dim"), soft_wrap=True)
        if any(c.status == "unsupported" for c in outcome.cases):
            console.print(Text(f"{UNSUPPORTED_CELL} = unsupported by the code (reasons "
                               f"below; --require-all makes that a failure)", style="dim"),
                          soft_wrap=True)
    failed_cases = [c for c in outcome.cases if c.failed]
    if failed_cases:
        if not quiet:
            console.print()
        console.print(Text("Failures", style="bold"))
    for result in failed_cases:
        console.print(Text(f"{result.name} ({result.method}/{result.basis})", style="bold red"),
                      soft_wrap=True)
        if result.error is not None:
            console.print(Text(f"  {result.error}"), soft_wrap=True)
        for check in result.failures:
            console.print(Text(f"  {check.message}"), soft_wrap=True)
            if check.hint:
                console.print(Text(f"    hint: {check.hint}", style="dim"), soft_wrap=True)
        if result.error is None and not result.failures:
            console.print(Text("  no check passed"), soft_wrap=True)
    unsupported = [c for c in outcome.cases if c.status == "unsupported"]
    if unsupported:
        if failed_cases or not quiet:
            console.print()
        console.print(Text("Unsupported", style="bold"))
    for result in unsupported:
        console.print(Text(f"{result.name} ({result.method}/{result.basis}): unsupported: "
                           f"{result.unsupported}", style="yellow"), soft_wrap=True)
    if outcome.interrupted:
        console.print(Text("interrupted: cases not finished are not counted", style="yellow"))
    console.print(summary_line(outcome), markup=False, highlight=False, style=None,
                  soft_wrap=True)


def collect_versions() -> dict[str, str]:
    """Versions of the harness, pyscf, numpy and Python for the JSON report."""
    import numpy

    try:
        from harness.backend.mole import pyscf_version as _pyscf_version
        pyscf_version = _pyscf_version()
    except Exception:  # pragma: no cover - pyscf is a dependency
        pyscf_version = "unavailable"
    return {"harness": harness_version(), "pyscf": pyscf_version, "numpy": numpy.__version__,
            "python": platform.python_version()}


def harness_version() -> str:
    """The harness's version: ``harness.__version__``, else the installed package's."""
    try:
        import harness
        version = getattr(harness, "__version__", None)
        if version:
            return str(version)
    except Exception:  # pragma: no cover
        pass
    try:
        from importlib.metadata import version as dist_version
        return dist_version("scf-harness")
    except Exception:
        pass
    try:  # a source checkout: the project's own pyproject.toml beside the package
        import tomllib
        project = Path(__file__).resolve().parents[2] / "pyproject.toml"
        return str(tomllib.loads(project.read_text("utf-8"))["project"]["version"])
    except Exception:
        return "unknown"


def to_json(outcome, *, plugin: str, suite_names: Sequence[str],
            tolerances_table: Mapping[str, float], versions: Mapping[str, str],
            require_all: bool = False) -> dict[str, Any]:
    """The machine-readable report (energies in Eh, lengths in bohr, times in s).

    Not-applicable and skipped checks have ``"passed": null``. Each case has a
    ``"status"``: ``"passed"``, ``"failed"`` or ``"unsupported"`` (then ``"unsupported"``
    holds the code's reason and ``"passed"`` is false); ``"counts"`` has the three
    numbers; ``"passed"`` at the top is true when no case failed.
    """
    n_pass, n_fail, n_unsupported = _tally(outcome.cases)
    return {
        "passed": bool(outcome.passed),
        "summary": summary_line(outcome),
        "counts": {"passed": n_pass, "failed": n_fail, "unsupported": n_unsupported},
        "require_all": bool(require_all),
        "cases": [c.to_json() for c in outcome.cases],
        "plugin": plugin,
        "suites": list(suite_names),
        "interrupted": bool(outcome.interrupted),
        "seconds": float(outcome.seconds),
        "versions": dict(versions),
        "units": {"energy": "hartree", "length": "bohr", "time": "second"},
        "tolerances": {k: float(v) for k, v in tolerances_table.items()},
    }


def strict_json(value):
    """``value`` with every NaN or infinite float replaced by None (JSON has no NaN; the
    check messages keep the numbers as text)."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, Mapping):
        return {k: strict_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [strict_json(v) for v in value]
    return value


def write_json(path, data: Mapping[str, Any]) -> Path:
    """Write ``data`` as strict JSON (:func:`strict_json`) to ``path`` atomically (a
    temporary file, then a rename)."""
    def write(tmp: str) -> None:
        with open(tmp, "w", encoding="utf-8") as fh:
            json.dump(strict_json(data), fh, indent=2, allow_nan=False)
            fh.write("\n")
            fh.flush()
            os.fsync(fh.fileno())

    return atomic_write(path, write)
