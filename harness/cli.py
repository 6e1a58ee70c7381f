"""The ``scf-harness`` command line: certify a plug-in, manage references, list cases.

Exit status: 0 when every case passed, 1 when a case failed or the run was
interrupted (or ``references verify`` found a mismatch), 2 for usage and setup errors
(bad plug-in spec, unknown suite or case, bad tolerance, unreadable cases file),
reported as one line ``scf-harness: error: <message>`` on stderr, without traceback.
Atomic units throughout: bohr, hartree (Eh); times in seconds.
"""

from __future__ import annotations

import argparse
import contextlib
import math
import signal
import sys
from pathlib import Path
from typing import Sequence

from harness.errors import HarnessError
from harness.problem import DEFAULT_CONVERGENCE

PROG = "scf-harness"
DEFAULT_PLUGIN = "harness.example_scf:solve"
DEFAULT_SUITE = "smoke"
PARTIAL_SUFFIX = ".partial.jsonl"
REFERENCES_HELP = ("folder of stored reference files <case>.json (default: the bundled "
                   "references/data, or $SCF_HARNESS_REFERENCES/data)")


class UsageError(Exception):
    """A command-line problem: printed as one line, exit status 2."""


class _Parser(argparse.ArgumentParser):
    """argparse, but errors are one line (no usage block) and raise instead of exiting."""

    def error(self, message: str):
        raise UsageError(f"{message} (see '{self.prog} --help')")


def _positive_float(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}") from None
    if not (x > 0 and math.isfinite(x)):
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return x


def _convergence(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        x = float("nan")
    if not (0 < x < 1):
        raise argparse.ArgumentTypeError(f"expected a number in (0, 1), got {text!r}")
    return x


def _positive_int(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive integer, got {text!r}") from None
    if n < 1:
        raise argparse.ArgumentTypeError(f"expected a positive integer, got {text!r}")
    return n


def _add_selection(parser: argparse.ArgumentParser, default_text: str):
    group = parser.add_argument_group("which cases")
    group.add_argument("--suite", action="append", dest="suites", default=None, metavar="NAME",
                       help=f"a suite of the catalogue (repeatable; default: {default_text})")
    group.add_argument("--case", action="append", dest="case_names", default=None,
                       metavar="NAME", help="a single catalogue case (repeatable)")
    return group


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``scf-harness`` (subcommands certify, references, cases)."""
    from harness.report import harness_version

    parser = _Parser(prog=PROG, description="Check a Hartree-Fock SCF code: run it on a "
                     "suite of molecules, check every result with the harness's own "
                     "invariants and compare energies with stored pyscf references. "
                     "Atomic units throughout (bohr, hartree).")
    parser.add_argument("--version", action="version", version=f"{PROG} {harness_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    cert = sub.add_parser("certify", help="run an SCF plug-in on cases and check the results",
                          description="Run PLUGIN on each case in its own process, check "
                          "the result and print a verdict per case. Exit 0 if all cases "
                          "passed, 1 otherwise, 2 for usage errors.")
    cert.add_argument("plugin", nargs="?", default=DEFAULT_PLUGIN, metavar="PLUGIN",
                      help="MODULE:FUNCTION or path/to/file.py:FUNCTION; the function takes "
                      f"a Problem (bohr) and returns the solution mapping (Eh) "
                      f"(default: {DEFAULT_PLUGIN}, the bundled example SCF code)")
    which = _add_selection(cert, f"{DEFAULT_SUITE}, unless --case or --cases-file is given")
    which.add_argument("--cases-file", type=Path, metavar="FILE",
                      help="a TOML suite file of your own ([[case]] tables as in the catalogue; "
                      "geometry paths relative to the file)")
    run = cert.add_argument_group("how to run")
    run.add_argument("--convergence", type=_convergence, metavar="X",
                     help="stationarity asked of the plug-in: max|X^T (F P S - S P F) X| with "
                     "X = S^-1/2, dimensionless in Eh-based atomic units "
                     f"(default: {DEFAULT_CONVERGENCE:g})")
    run.add_argument("--tol", action="append", default=[], metavar="CHECK=VALUE",
                     help="override the tolerance of one check (repeatable), e.g. "
                     "reference-energy=1e-5 (Eh for energies; default: the documented "
                     "values in harness.tolerances)")
    run.add_argument("--timeout", type=_positive_float, default=600.0, metavar="S",
                     help="seconds allowed for the plug-in on one case (default: 600)")
    run.add_argument("--jobs", type=_positive_int, default=1, metavar="N",
                     help="cases run at once, each in its own process (default: 1)")
    out = cert.add_argument_group("output and references")
    out.add_argument("--json", type=Path, metavar="FILE",
                     help="write the results as JSON to FILE (results are also appended to "
                     f"FILE{PARTIAL_SUFFIX} while running; it is removed at the end)")
    out.add_argument("--references", type=Path, metavar="DIR",
                     help=REFERENCES_HELP)
    out.add_argument("--write-references", action="store_true",
                     help="store references computed during the run (default: do not)")
    out.add_argument("--quiet", action="store_true",
                     help="no progress lines and no table: only failures and the summary")

    refs = sub.add_parser("references", help="build or verify the stored pyscf references",
                          description="Build or verify the stored pyscf references.")
    rsub = refs.add_subparsers(dest="action", metavar="ACTION", parser_class=_Parser)
    build = rsub.add_parser("build", help="compute and store missing or outdated references",
                            description="Compute and store references (default: all cases).")
    _add_selection(build, "every catalogue case")
    build.add_argument("--force", action="store_true",
                       help="recompute even when a stored reference matches (default: no)")
    build.add_argument("--references", type=Path, metavar="DIR",
                       help=REFERENCES_HELP)
    verify = rsub.add_parser("verify", help="check that stored references match their cases",
                             description="Check the stored references (default: all cases). "
                             "Exit 1 if any does not match.")
    _add_selection(verify, "every catalogue case")
    verify.add_argument("--recompute", action="store_true",
                        help="also recompute each reference with pyscf and compare the total "
                        "energy (default: no; slow)")
    verify.add_argument("--references", type=Path, metavar="DIR",
                        help=REFERENCES_HELP)

    cases = sub.add_parser("cases", help="list the catalogue",
                           description="List the catalogue's cases (name, method, basis, "
                           "number of AOs, suites, note).")
    cases.add_argument("--suite", metavar="NAME", help="only this suite (default: all cases)")

    selftest = sub.add_parser("selftest", help="run the built-in planted-bug plug-ins and "
                              "check that each is caught by the checks meant to catch it",
                              description="Run every planted-bug plug-in (and correct variant) "
                              "of harness.planted on its case and compare the verdict with the "
                              "expected one. Exit 0 if all match, 1 otherwise, 2 for usage "
                              "errors.")
    selftest.add_argument("--only", metavar="SUBSTRING",
                          help="only the entries of the module SUBSTRING (core, hints, "
                          "conventions, integrals), or else those whose 'module:function @ "
                          "case' contains SUBSTRING, e.g. 'water' (default: all entries)")
    return parser


# ------------------------------------------------------------------------- selection


def select_cases(suites: Sequence[str] | None, case_names: Sequence[str] | None,
                 cases_file: Path | None = None, *, default_suite: str | None = DEFAULT_SUITE):
    """The cases named by the options, in order, without duplicates.

    Returns ``(cases, suite_names)``. With no suite, case or file given, the
    ``default_suite`` (or, if None, the whole catalogue) is used.
    """
    from harness.cases import load_catalogue, load_suite_file

    chosen = []
    suite_names = list(suites or [])
    if not suite_names and not case_names and cases_file is None:
        if default_suite is None:
            return list(load_catalogue().cases), []
        suite_names = [default_suite]
    catalogue = load_catalogue() if (suite_names or case_names) else None
    for name in suite_names:
        chosen.extend(catalogue.suite(name))
    for name in case_names or []:
        chosen.append(catalogue.case(name))
    if cases_file is not None:
        if not cases_file.is_file():
            raise UsageError(f"--cases-file: file not found: {cases_file}")
        chosen.extend(load_suite_file(cases_file))
    seen, unique = set(), []
    for case in chosen:
        if case.name not in seen:
            seen.add(case.name)
            unique.append(case)
    return unique, suite_names


# ------------------------------------------------------------------------- commands


@contextlib.contextmanager
def _sigterm_as_interrupt():
    """Treat SIGTERM (CI cancelling a job) like Ctrl-C, so finished cases are kept."""
    def handler(signum, frame):
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def _certify(args, console) -> int:
    from harness import report
    from harness.plugins import load_plugin
    from harness.runner import run_cases
    from harness.tolerances import Tolerances, parse_override

    overrides = dict(parse_override(text) for text in args.tol)
    tolerances = Tolerances(overrides=overrides)
    cases, suite_names = select_cases(args.suites, args.case_names, args.cases_file)
    if not cases:
        raise UsageError("no cases selected")
    load_plugin(args.plugin)
    if (args.references is not None and not args.references.is_dir()
            and not args.write_references):
        raise UsageError(f"--references: not a folder: {args.references}")

    convergence = args.convergence if args.convergence is not None else DEFAULT_CONVERGENCE
    partial = None
    if args.json is not None:
        args.json.parent.mkdir(parents=True, exist_ok=True)
        partial = Path(str(args.json) + PARTIAL_SUFFIX)
        partial.write_text("", encoding="utf-8")

    selection = ", ".join(suite_names) if suite_names else "selected cases"
    if not args.quiet:
        console.print(f"scf-harness: {args.plugin} on {len(cases)} case"
                      f"{'s' if len(cases) != 1 else ''} ({selection}), convergence "
                      f"{convergence:g}, timeout {args.timeout:g} s, jobs {args.jobs}",
                      markup=False, soft_wrap=True)
    on_result = None if args.quiet else (lambda r: report.print_progress(console, r))
    with _sigterm_as_interrupt():
        outcome = run_cases(cases, args.plugin, tolerances=tolerances,
                            convergence=args.convergence, timeout=args.timeout,
                            jobs=args.jobs, reference_dir=args.references,
                            write_references=args.write_references, results_path=partial,
                            on_result=on_result)
        if not args.quiet and outcome.cases:
            console.print()
        report.render(outcome, console, quiet=args.quiet)
        if args.json is not None:
            data = report.to_json(outcome, plugin=args.plugin, suite_names=suite_names,
                                  tolerances_table=tolerances.table(convergence),
                                  versions=report.collect_versions())
            data["convergence"] = convergence
            data["timeout_seconds"] = args.timeout
            if args.cases_file is not None:
                data["cases_file"] = str(args.cases_file)
            report.write_json(args.json, data)
            if partial is not None:
                partial.unlink(missing_ok=True)
    return 0 if outcome.passed else 1


def _references(args, console) -> int:
    from harness import references

    if args.action is None:
        raise UsageError("references needs an action: build or verify")
    cases, _ = select_cases(args.suites, args.case_names, default_suite=None)
    directory = args.references
    if args.action == "build":
        for name, what in references.build(cases, directory, force=args.force):
            console.print(f"{name}: {what}", markup=False, soft_wrap=True)
        return 0
    bad = 0
    rows = references.verify(cases, directory, recompute=args.recompute)
    for name, ok, detail in rows:
        bad += not ok
        console.print(f"{name}: {'ok' if ok else 'MISMATCH'}" + (f" ({detail})" if detail else ""),
                      markup=False, soft_wrap=True)
    console.print(f"{len(rows) - bad} ok, {bad} mismatched", markup=False)
    return 1 if bad else 0


def _nao(case) -> str:
    try:
        return str(case.mole().nao)
    except Exception:
        return "?"


def _cases(args, console) -> int:
    from rich import box
    from rich.table import Table

    from harness.cases import load_catalogue

    catalogue = load_catalogue()
    cases = catalogue.suite(args.suite) if args.suite else catalogue.cases
    table = Table(box=box.SIMPLE_HEAD, pad_edge=False, show_edge=False)
    for column in ("case", "method", "basis", "nao", "suites", "note"):
        table.add_column(column, no_wrap=column != "note",
                         justify="right" if column == "nao" else "left")
    for case in cases:
        basis = case.basis + (" (cartesian)" if case.cartesian else "")
        table.add_row(case.name, case.method, basis, _nao(case), ",".join(case.suites),
                      case.note)
    console.print(table)
    console.print(f"{len(cases)} cases; suites: {', '.join(catalogue.suites)}", markup=False)
    return 0


def _selftest(args, console) -> int:
    from harness import planted
    from harness.selftest import run_selftest, select

    if args.only is not None and not select(planted.catalogue(), args.only):
        raise UsageError(f"--only: no planted entry matches {args.only!r}")
    return run_selftest(console, only=args.only).exit_code


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line with ``argv`` (default ``sys.argv[1:]``); return the exit status."""
    from harness.report import make_console

    console = make_console(sys.stdout)
    try:
        parser = build_parser()
        try:
            args = parser.parse_args(list(sys.argv[1:] if argv is None else argv))
        except SystemExit as exc:  # --help and --version
            return int(exc.code or 0)
        if args.command is None:
            parser.print_help(sys.stderr)
            return 2
        if args.command == "certify":
            return _certify(args, console)
        if args.command == "references":
            return _references(args, console)
        if args.command == "selftest":
            return _selftest(args, console)
        return _cases(args, console)
    except (UsageError, HarnessError) as exc:
        _error(str(exc))
        return 2
    except OSError as exc:
        _error(f"{exc.strerror or exc}: {exc.filename}" if exc.filename else str(exc))
        return 2
    except KeyboardInterrupt:
        _error("interrupted")
        return 1


def _error(message: str) -> None:
    line = " ".join(str(message).split())  # one line, whatever the message held
    print(f"{PROG}: error: {line}", file=sys.stderr)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
