"""The ``scf-harness`` command line: certify a plug-in or an external code, check a
solution file, write and verify certificates, bench an accelerator, manage references,
list cases.

Exit status: 0 when no case failed (unsupported cases, ``harness.Unsupported``, are
not failures unless ``--require-all``), 1 when a case failed or the run was
interrupted (or ``references verify`` / ``verify-certificate`` found a mismatch, or
the bench found the accelerator worse), 2 for usage and setup errors (bad plug-in
spec, unknown suite or case, bad tolerance, unreadable cases file, missing file),
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

from harness.contract.errors import HarnessError
from harness.contract.defaults import DEFAULT_CONVERGENCE, DEFAULT_TIMEOUT

PROG = "scf-harness"
DEFAULT_PLUGIN = "harness.testing.example_scf:solve"
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


def _output_file(text: str) -> Path:
    """An argparse type: a path to write a file to. It must not be empty and, if
    something is there already, must be a regular file (a folder, device or pipe would be
    replaced by the rename that makes the write atomic)."""
    if not text.strip():
        raise argparse.ArgumentTypeError("expected a file path, got ''")
    path = Path(text)
    if path.exists() and not path.is_file():
        what = "a folder" if path.is_dir() else "not a regular file"
        raise argparse.ArgumentTypeError(f"{text} is {what}; give the path of a file")
    for parent in path.parents:  # checked now, not after a long run has nowhere to go
        if parent.exists():
            if not parent.is_dir():
                raise argparse.ArgumentTypeError(f"{text}: its parent {parent} is not a "
                                                 f"folder")
            break
    return path


def _input_file(text: str) -> Path:
    """An argparse type: a path to read a file from; an empty one is refused (``Path('')``
    would be the current folder)."""
    if not text.strip():
        raise argparse.ArgumentTypeError("expected a file path, got ''")
    return Path(text)


def _not_a_file(path: Path) -> str:
    """Why ``path``, which is not a regular file, cannot be read as one."""
    if path.is_dir():
        return "a folder, not a file"
    if path.exists():
        return "not a regular file (a device or pipe); give the path of a file"
    return "file not found"


def _convergence(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        x = float("nan")
    if not (0 < x < 1):
        raise argparse.ArgumentTypeError(f"expected a number in (0, 1), got {text!r}")
    return x


def _int_at_least(minimum: int, words: str):
    """An argparse type: an integer ≥ ``minimum``; ``words`` says so in the error."""
    def parse(text: str) -> int:
        try:
            n = int(text)
        except ValueError:
            n = minimum - 1
        if n < minimum:
            raise argparse.ArgumentTypeError(f"expected {words}, got {text!r}")
        return n
    return parse


_positive_int = _int_at_least(1, "a positive integer")
_nonnegative_int = _int_at_least(0, "an integer >= 0")


def _baselines(text: str) -> tuple[str, ...]:
    from harness.bench.accelerators import BASELINE_NAMES

    names = tuple(n.strip() for n in text.split(",") if n.strip())
    if not names:
        raise argparse.ArgumentTypeError(f"expected a comma-separated list of baselines "
                                         f"(known: {', '.join(BASELINE_NAMES)}), got {text!r}")
    for name in names:
        if name not in BASELINE_NAMES:
            raise argparse.ArgumentTypeError(f"unknown baseline {name!r} (known: "
                                             f"{', '.join(BASELINE_NAMES)})")
    return names


def _add_checking(group) -> None:
    """Options shared by certify and check-result: tolerances, AO convention, stability."""
    from harness.checks.table import TOLERANCE_NAMES
    from harness.contract.defaults import DEFAULT_STABILITY, STABILITY_MODES
    from harness.verdict.conventions import NAMED

    group.add_argument("--tol", action="append", default=[], metavar="CHECK=VALUE",
                       help="override the tolerance of one check (repeatable), e.g. "
                       "reference-energy=1e-5 (Eh for energies); CHECK is one of "
                       f"{', '.join(TOLERANCE_NAMES)} (default: the documented values, "
                       "see docs/checks.md)")
    group.add_argument("--ao-convention", choices=NAMED, default=None, metavar="NAME",
                       help="the code's AO convention (order, signs, normalisation), "
                       f"one of {', '.join(NAMED)}; applied as given (default: detected "
                       "from the reported overlap matrix, else pyscf's order)")
    group.add_argument("--basis-source", choices=("pyscf", "bse"), default=None,
                       help="where named basis sets come from: pyscf's built-in copies "
                       "(default) or the basis_set_exchange library (pip install "
                       "'scf-harness[bse]'); with bse the reference is built and computed "
                       "from its data, not stored. Key: basis_source")
    group.add_argument("--grid", choices=("pinned", "own"), default=None,
                       help="Kohn–Sham only: 'own' when the code integrates the XC term on "
                       "its own quadrature grid, not the pinned grid the problem hands it "
                       "(XC-dependent tolerances then come from a measured grid "
                       "sensitivity of each case, stated in the message; "
                       "docs/kohn-sham.md). Default: pinned, unless the solution says "
                       "grid='own'. Key: grid")
    group.add_argument("--stability", choices=STABILITY_MODES, default=DEFAULT_STABILITY,
                       help="stability analysis of the converged state: internal (same "
                       "method), external (RHF also against UHF) or off (default: "
                       f"{DEFAULT_STABILITY})")


def _add_selection(parser: argparse.ArgumentParser, default_text: str, *,
                   cases_file: bool = False):
    group = parser.add_argument_group("which cases")
    group.add_argument("--suite", action="append", dest="suites", default=None, metavar="NAME",
                       help=f"a suite of the catalogue (repeatable; default: {default_text})")
    where = "the catalogue or --cases-file" if cases_file else "the catalogue"
    group.add_argument("--case", action="append", dest="case_names", default=None,
                       metavar="NAME", help=f"a case of {where}, or a shell-style pattern "
                       "of case names such as 'h2-*' or '*-cc-pvdz-?hf' (quote it; "
                       "repeatable)")
    group.add_argument("--basis", action="append", dest="bases", default=None,
                       metavar="NAME", help="keep only the selected cases in this basis "
                       "(case-insensitive, e.g. cc-pVDZ; repeatable; default: any basis)")
    group.add_argument("--method", action="append", dest="methods", default=None,
                       choices=("rhf", "uhf", "rohf", "rks", "uks", "roks"),
                       help="keep only the selected cases of this method (repeatable; "
                       "default: any method)")
    return group


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``scf-harness`` (subcommands certify, references, cases)."""
    from harness.report.terminal import harness_version

    parser = _Parser(prog=PROG, description="Check a Hartree-Fock SCF code: run it on a "
                     "suite of molecules, check every result with the harness's own "
                     "invariants and compare energies with stored pyscf references. "
                     "Atomic units throughout (bohr, hartree).")
    parser.add_argument("--version", action="version", version=f"{PROG} {harness_version()}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    cert = sub.add_parser("certify", help="run an SCF plug-in on cases and check the results",
                          description="Run PLUGIN on each case in its own process, check "
                          "the result and print a verdict per case. Exit 0 if no case "
                          "failed (unsupported cases do not fail unless --require-all), 1 "
                          "otherwise, 2 for usage errors.")
    cert.add_argument("plugin", nargs="?", default=None, metavar="PLUGIN",
                      help="MODULE:FUNCTION or path/to/file.py:FUNCTION; the function takes "
                      f"a Problem (bohr) and returns the solution mapping (Eh) "
                      f"(default: {DEFAULT_PLUGIN}, the bundled example SCF code; not "
                      "together with --command)")
    which = _add_selection(cert, f"{DEFAULT_SUITE}, unless --case or --cases-file is given",
                           cases_file=True)
    which.add_argument("--cases-file", type=Path, metavar="FILE",
                      help="a TOML suite file of your own ([[case]] tables as in the catalogue; "
                      "geometry paths relative to the file); all its cases run, or, with "
                      "--case, only the named ones")
    run = cert.add_argument_group("how to run")
    run.add_argument("--convergence", type=_convergence, metavar="X",
                     help="stationarity asked of the plug-in: max|X^T (F P S - S P F) X| with "
                     "X = S^-1/2, dimensionless in Eh-based atomic units "
                     f"(default: {DEFAULT_CONVERGENCE:g})")
    _add_checking(run)
    run.add_argument("--timeout", type=_positive_float, default=DEFAULT_TIMEOUT, metavar="S",
                     help="seconds allowed for the plug-in on one case "
                     f"(default: {DEFAULT_TIMEOUT:g})")
    run.add_argument("--jobs", type=_positive_int, default=1, metavar="N",
                     help="cases run at once, each in its own process; their checks also "
                     "run N at a time, in processes of their own (default: 1)")
    run.add_argument("--require-all", action="store_true",
                     help="a case the code reports unsupported (harness.Unsupported, "
                     "or a command's exit status 77 / unsupported.txt) fails (default: "
                     "it is counted as unsupported, neither passed nor failed)")
    run.add_argument("--scheduler", metavar="ADDRESS",
                     help="run each case as a task on a Dask cluster: tcp://HOST:PORT of a "
                     "running scheduler, or local:N to start N worker processes on this "
                     "machine; needs the cluster extra (pip install -e \".[cluster]\"); see "
                     "docs/cluster.md (default: none, cases run here)")
    run.add_argument("--reference-cache", type=Path, metavar="DIR",
                     help="with --scheduler: the shared folder where workers keep the "
                     "references they compute, by input hash (default: "
                     "$SCF_HARNESS_REFERENCE_CACHE or ~/.cache/scf-harness/references)")
    ext = cert.add_argument_group("an external code instead of PLUGIN")
    ext.add_argument("--command", dest="command_template", metavar="TEMPLATE",
                     help="run this command per case in a scratch folder, e.g. \"./my_scf "
                     "--in {problem} --out {solution}\"; placeholders {problem} (JSON, bohr), "
                     "{geometry} (XYZ, angstrom), {basis} (NWChem format), {ao_order}, {dir}, "
                     "{solution} (default file solution.npz; Eh); see harness.run.external "
                     "(default: none, PLUGIN is run)")
    ext.add_argument("--scratch", type=Path, metavar="DIR",
                     help="where the per-case scratch folders are made (default: the "
                     "system's temporary folder)")
    ext.add_argument("--keep-scratch", action="store_true",
                     help="keep the scratch folders (default: remove them after reading "
                     "the solution)")
    out = cert.add_argument_group("output and references")
    out.add_argument("--json", type=_output_file, metavar="FILE",
                     help="write the results as JSON to FILE (results are also appended to "
                     f"FILE{PARTIAL_SUFFIX} while running; it is removed at the end)")
    out.add_argument("--references", type=Path, metavar="DIR",
                     help=REFERENCES_HELP)
    out.add_argument("--write-references", action="store_true",
                     help="store references computed during the run (default: do not)")
    out.add_argument("--certificate", type=_output_file, metavar="FILE",
                     help="write a certificate of the verdicts to FILE (JSON) with the "
                     "solution arrays beside it in FILE's stem + .solutions.npz (default: "
                     "none)")
    out.add_argument("--quiet", action="store_true",
                     help="no progress lines and no table: only failures and the summary")

    chk = sub.add_parser("check-result", help="check a solution file written by any code",
                         description="Check a solution file (.npz, .json, .h5, or .molden "
                         "with an energy file; energies in Eh) for the molecule of an XYZ "
                         "file, with the same checks and the same report as certify. Exit "
                         "0 if the case passed, 1 if it failed (also for an unreadable "
                         "solution file), 2 for usage errors.")
    chk.add_argument("file", type=_input_file, metavar="FILE",
                     help="the solution file (.npz, .json, .h5/.hdf5, .molden)")
    mol = chk.add_argument_group("the case")
    mol.add_argument("--geometry", type=_input_file, required=True, metavar="XYZ",
                     help="XYZ file of the molecule (angstrom, or bohr with units=bohr on "
                     "its comment line; required)")
    mol.add_argument("--basis", required=True, metavar="NAME",
                     help="basis set name as pyscf knows it, e.g. sto-3g (required)")
    mol.add_argument("--method", required=True,
                     choices=("rhf", "uhf", "rohf", "rks", "uks", "roks"),
                     help="rhf, uhf, rohf, or Kohn–Sham rks, uks, roks (required)")
    mol.add_argument("--functional", metavar="XC", default=None,
                     help="Kohn–Sham only (required with rks/uks/roks): the exchange–"
                     "correlation functional the code was asked for, a libxc name as "
                     "pyscf spells it, e.g. 'lda,vwn', 'pbe', 'b3lyp'; the reference and "
                     "the pinned grid are those of this functional. A 'functional' key in "
                     "the file is the code's claim, checked against it")
    mol.add_argument("--charge", type=int, default=0, metavar="Q",
                     help="total charge in units of e (default: 0)")
    mol.add_argument("--multiplicity", type=_positive_int, default=1, metavar="M",
                     help="spin multiplicity 2S+1 (default: 1)")
    mol.add_argument("--cartesian", action="store_true",
                     help="cartesian d, f, ... functions (default: spherical)")
    mol.add_argument("--name", metavar="N",
                     help="the case's name (default: <xyz stem>-<basis>-<method>)")
    mol.add_argument("--energy-file", type=_input_file, metavar="F",
                     help="for a .molden file: the JSON file with the energy (Eh) "
                     "(default: the Molden file's name with .json)")
    how = chk.add_argument_group("how to check")
    how.add_argument("--convergence", type=_convergence, metavar="X",
                     help="stationarity the code was asked for: max|X^T (F P S - S P F) X| "
                     f"with X = S^-1/2, dimensionless (default: {DEFAULT_CONVERGENCE:g})")
    _add_checking(how)
    cout = chk.add_argument_group("output and references")
    cout.add_argument("--json", type=_output_file, metavar="FILE",
                      help="write the result as JSON to FILE (default: none)")
    cout.add_argument("--certificate", type=_output_file, metavar="FILE",
                      help="write a certificate of the verdict to FILE (default: none)")
    cout.add_argument("--references", type=Path, metavar="DIR", help=REFERENCES_HELP +
                      "; a case without a matching stored reference gets one computed")
    cout.add_argument("--quiet", action="store_true",
                      help="no table: only failures and the summary")

    ver = sub.add_parser("verify-certificate", help="check that a certificate is intact "
                         "(and, with --recompute, reproduce it)",
                         description="Check a certificate's hashes and its solution file; "
                         "with --recompute also re-run every check on the stored solutions. "
                         "Exit 0 if intact (and reproduced), 1 with one line per problem "
                         "otherwise, 2 if FILE does not exist.")
    ver.add_argument("certificate", type=Path, metavar="FILE", help="the certificate (JSON)")
    ver.add_argument("--recompute", action="store_true",
                     help="re-run the checks on the stored solutions and compare every "
                     "verdict and value (default: no; computes missing references)")
    ver.add_argument("--references", type=Path, metavar="DIR",
                     help=REFERENCES_HELP + "; used with --recompute")
    ver.add_argument("--markdown", type=_output_file, metavar="OUT",
                     help="also write a Markdown summary for a reviewer to OUT (default: "
                     "none)")

    from harness.bench import runs as _bench
    ben = sub.add_parser("bench", help="bench a convergence accelerator against baselines",
                         description="Run your accelerator and the baselines in the "
                         "harness's SCF loop from the same starting guesses, and compare "
                         "convergence, ground-state rate and Fock builds. Exit 0 when the "
                         "accelerator is nowhere worse than the best baseline and its "
                         "properties hold, 1 otherwise, 2 for usage errors. Energies in Eh, "
                         "times in s.")
    ben.add_argument("accelerator", metavar="MODULE:ACCELERATOR",
                     help="the accelerator class or instance, e.g. "
                     "harness.bench.example_accelerator:CommutatorDIIS (see harness.bench.accelerators)")
    ben.add_argument("--suite", default=DEFAULT_SUITE, metavar="NAME",
                     help=f"a catalogue suite or the bench suite 'hard' (default: "
                     f"{DEFAULT_SUITE})")
    ben.add_argument("--guesses", type=_nonnegative_int, default=_bench.DEFAULT_GUESSES,
                     metavar="N", help="perturbed starting guesses per case, besides the "
                     f"default guess (default: {_bench.DEFAULT_GUESSES})")
    ben.add_argument("--seed", type=_nonnegative_int, default=0, metavar="S",
                     help="seed of the perturbed guesses, an integer >= 0 (default: 0)")
    ben.add_argument("--report", type=Path, metavar="DIR",
                     help="write bench.jsonl, bench.json, plots and index.html to DIR "
                     "(default: none)")
    ben.add_argument("--baselines", type=_baselines, default=None, metavar="A,B,...",
                     help="the baselines to run, comma-separated, each once (default: all "
                     f"of {', '.join(_bench.DEFAULT_BASELINES)})")
    ben.add_argument("--call-timeout", type=_positive_float,
                     default=_bench.acc.ACCELERATOR_CALL_LIMIT, metavar="S",
                     help="seconds one reset or step call of the accelerator may take, at "
                     f"most {_bench.acc.MAX_CALL_LIMIT:g}; a slower call fails that run or "
                     "property and the bench goes on "
                     f"(default: {_bench.acc.ACCELERATOR_CALL_LIMIT:g})")

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

    rehash = rsub.add_parser("rehash", help="re-store the content hashes of stored "
                             "references (values untouched)",
                             description="Re-store the content hashes of the stored "
                             "references (default: all cases), leaving every value as "
                             "it is; a maintenance step: review the values' diff, since "
                             "re-hashing an edited file makes the edit pass.")
    _add_selection(rehash, "every catalogue case")
    rehash.add_argument("--references", type=Path, metavar="DIR", help=REFERENCES_HELP)

    cases = sub.add_parser("cases", help="list the catalogue (or a suite file's cases)",
                           description="List the catalogue's cases (name, method, basis, "
                           "number of AOs, suites, note): all of them, or the selection "
                           "--suite, --case, --basis and --method make, as certify would "
                           "run it; with --cases-file the cases of a suite file, its "
                           "[[matrix]] tables expanded, and their count.")
    listed = _add_selection(cases, "every catalogue case", cases_file=True)
    listed.add_argument("--cases-file", type=Path, metavar="FILE",
                        help="a TOML suite file of your own: list its cases, with every "
                        "[[matrix]] expanded (default: none)")

    selftest = sub.add_parser("selftest", help="run the built-in planted-bug plug-ins and "
                              "check that each is caught by the checks meant to catch it",
                              description="Run every planted-bug plug-in (and correct variant) "
                              "of harness.testing.planted on its case and compare the verdict with the "
                              "expected one. Exit 0 if all match, 1 otherwise, 2 for usage "
                              "errors.")
    selftest.add_argument("--only", metavar="SUBSTRING",
                          help="only the entries of the module SUBSTRING (core, hints, "
                          "conventions, integrals, states, orientation), or else those whose 'module:function @ "
                          "case' contains SUBSTRING, e.g. 'water' (default: all entries)")
    return parser


# ------------------------------------------------------------------------- selection


def select_cases(suites: Sequence[str] | None, case_names: Sequence[str] | None,
                 cases_file: Path | None = None, *, default_suite: str | None = DEFAULT_SUITE,
                 bases: Sequence[str] | None = None, methods: Sequence[str] | None = None):
    """The cases named by the options, in order, without duplicates.

    Returns ``(cases, suite_names)``. With no suite, case or file given, the
    ``default_suite`` (or, if None, the whole catalogue) is used. A ``cases_file``
    adds all its cases, unless case names are given: then each name is looked up in
    the file first, then in the catalogue, and only the named cases (and suites) run.
    A case name with ``*``, ``?`` or ``[...]`` is a shell-style pattern (``fnmatch``)
    matched against the file's cases and the catalogue's; one that matches nothing is
    a one-line CaseError naming it with the closest case names. ``bases`` (compared as
    ``harness.catalogue.cases.basis_key``) and ``methods`` then keep only the cases with
    one of those bases and methods; a filter that leaves nothing is a UsageError
    naming what the selection holds.
    """
    from harness.catalogue.cases import (filter_cases, is_pattern, load_catalogue,
                                         load_user_suite, matching, no_match)

    chosen = []
    suite_names = list(suites or [])
    if not suite_names and not case_names and cases_file is None:
        if default_suite is None:
            chosen = list(load_catalogue().cases)
        else:
            suite_names = [default_suite]
    own = {}
    if cases_file is not None:
        if not cases_file.is_file():
            what = "a folder, not a file" if cases_file.is_dir() else "file not found"
            raise UsageError(f"--cases-file: {what}: {cases_file}")
        own = {case.name: case for case in load_user_suite(cases_file)}
    catalogue = load_catalogue() if (suite_names or case_names) else None
    for name in suite_names:
        chosen.extend(catalogue.suite(name))
    for name in case_names or []:
        if isinstance(name, str) and is_pattern(name):
            found = matching(name, own.values()) + matching(name, catalogue.cases)
            if not found:
                raise no_match(name, list(own) + list(catalogue.names))
            chosen.extend(found)
        else:
            chosen.append(own[name] if name in own else catalogue.case(name))
    if not case_names:
        chosen.extend(own.values())
    seen, unique = set(), []
    for case in chosen:
        if case.name not in seen:
            seen.add(case.name)
            unique.append(case)
    if bases or methods:
        kept = filter_cases(unique, bases=bases, methods=methods)
        if unique and not kept:
            asked = [f"--basis {' / '.join(bases)}"] if bases else []
            asked += [f"--method {' / '.join(methods)}"] if methods else []
            held = sorted({f"{c.method}/{c.basis}" for c in unique})
            raise UsageError(f"{' and '.join(asked)}: no selected case has "
                             f"{'these' if len(asked) > 1 else 'this'} (the "
                             f"{len(unique)} selected have {', '.join(held)})")
        unique = kept
    return unique, suite_names


# ------------------------------------------------------------------------- commands


@contextlib.contextmanager
def _signals_as_interrupt():
    """Treat SIGTERM (CI cancelling a job) like Ctrl-C, so finished cases are kept.

    The handler also flags the run loop (``runner.request_interrupt``): the exception
    it raises is lost if the signal lands while Python runs a finaliser.
    """
    from harness.run.runner import request_interrupt

    def handler(signum, frame):
        request_interrupt()
        raise KeyboardInterrupt

    def unraisable(info):  # the lost KeyboardInterrupt: no "Exception ignored" traceback
        if not isinstance(info.exc_value, KeyboardInterrupt):
            hook_before(info)

    try:
        previous = {sig: signal.signal(sig, handler) for sig in (signal.SIGINT, signal.SIGTERM)}
    except ValueError:  # not the main thread
        yield
        return
    hook_before, sys.unraisablehook = sys.unraisablehook, unraisable
    try:
        yield
    finally:
        sys.unraisablehook = hook_before
        for sig, before in previous.items():
            signal.signal(sig, before)


def _distinct_outputs(args) -> None:
    """--json, its partial-results file, --certificate and the certificate's solutions
    file must be different files (one would silently replace another)."""
    from harness.report.certificate import sidecar_path

    named = []
    if getattr(args, "json", None) is not None:
        named.append(("--json", args.json))
        if args.command == "certify":
            named.append((f"--json's {PARTIAL_SUFFIX} file", Path(str(args.json) + PARTIAL_SUFFIX)))
    if getattr(args, "certificate", None) is not None:
        named += [("--certificate", args.certificate),
                  ("--certificate's solutions file", sidecar_path(args.certificate))]
    seen: dict[Path, str] = {}
    for option, path in named:
        key = path.resolve()
        if key in seen:
            raise UsageError(f"{seen[key]} and {option} name the same file: {path}")
        if path.exists() and not path.is_file():
            raise UsageError(f"{option}: {path} is not a regular file")
        seen[key] = option


def _scheduler(args) -> str | None:
    """``--scheduler``, checked (an address or local:N; dask.distributed installed), or
    None; ``--reference-cache`` only with it; not together with ``--jobs``."""
    if args.scheduler is None:
        if args.reference_cache is not None:
            raise UsageError("--reference-cache needs --scheduler")
        return None
    if args.jobs != 1:
        raise UsageError("give either --jobs or --scheduler, not both (a cluster runs as "
                         "many cases at once as it has workers)")
    from harness.run.cluster import parse_scheduler, require_dask

    scheduler = parse_scheduler(args.scheduler)
    require_dask()
    if args.reference_cache is not None and args.reference_cache.exists() \
            and not args.reference_cache.is_dir():
        raise UsageError(f"--reference-cache: not a folder: {args.reference_cache}")
    return scheduler


def _grid(args) -> str | None:
    """``--grid`` as ``JudgeSettings.grid``: "own", or None (pinned, the default)."""
    return "own" if getattr(args, "grid", None) == "own" else None


def _basis_source(args) -> str:
    """``--basis-source`` (default pyscf), checked: a one-line error saying how to install
    basis_set_exchange when bse is asked for without it."""
    from harness.backend.basis_sources import DEFAULT_BASIS_SOURCE, check_basis_source

    return check_basis_source(getattr(args, "basis_source", None) or DEFAULT_BASIS_SOURCE)


def _tolerances(args):
    from harness.checks.tolerances import Tolerances, parse_override

    return Tolerances(overrides=dict(parse_override(text) for text in args.tol))


def _plugin(args):
    """(what certify runs: a spec string or a CommandPlugin, the label reports name)."""
    if args.command_template is None:
        if args.scratch is not None or args.keep_scratch:
            raise UsageError("--scratch and --keep-scratch need --command")
        spec = args.plugin if args.plugin is not None else DEFAULT_PLUGIN
        return spec, spec
    if args.plugin is not None:
        raise UsageError(f"give either PLUGIN ({args.plugin}) or --command, not both")
    from harness.run.external import CommandPlugin

    scratch = args.scratch.resolve() if args.scratch is not None else None
    plugin = CommandPlugin(args.command_template, scratch_root=scratch,
                           keep=args.keep_scratch)
    return plugin, f"command: {args.command_template}"


def _write_certificate(path: Path, outcome, *, tolerances, plugin: str, console,
                       quiet: bool, ao_convention: str | None, stability: str,
                       require_all: bool = False, basis_source: str = "pyscf",
                       grid: str | None = None) -> None:
    """Write the certificate of the cases whose problem could be built (the others
    have no inputs to certify), recording the evaluation options (--ao-convention,
    --stability) that a recompute must use again."""
    from harness.report.certificate import sidecar_path, write_certificate

    results = [r for r in outcome.cases if r.name in outcome.problems]
    write_certificate(path, results, problems=outcome.problems, solutions=outcome.solutions,
                      references=outcome.references, tolerances=tolerances, plugin=plugin,
                      ao_convention=ao_convention, stability=stability,
                      require_all=require_all, basis_source=basis_source, grid=grid)
    if not quiet:
        console.print(f"certificate: {path} (solutions in {sidecar_path(path).name})",
                      markup=False, soft_wrap=True)


def _certify(args, console) -> int:
    from harness.report import terminal as report
    from harness.run.runner import check_plugin, run_cases, start_fork_server

    plugin, label = _plugin(args)
    tolerances = _tolerances(args)
    _basis_source(args)  # a missing basis_set_exchange is a usage error before any run
    if args.scheduler is None:  # local run: the plug-in processes' fork server starts now,
        start_fork_server()     # on the other core, while the cases are read
    cases, suite_names = select_cases(args.suites, args.case_names, args.cases_file,
                                      bases=args.bases, methods=args.methods)
    if not cases:
        raise UsageError("no cases selected")
    if (args.references is not None and not args.references.is_dir()
            and not args.write_references):
        raise UsageError(f"--references: not a folder: {args.references}")

    _distinct_outputs(args)
    scheduler = _scheduler(args)
    if scheduler is None:
        # loads the plug-in in a child process: what its import does cannot reach this one
        check_plugin(plugin, timeout=args.timeout)
    convergence = args.convergence if args.convergence is not None else DEFAULT_CONVERGENCE
    partial = None
    if args.json is not None:
        args.json.parent.mkdir(parents=True, exist_ok=True)
        partial = Path(str(args.json) + PARTIAL_SUFFIX)
        partial.write_text("", encoding="utf-8")

    selection = ", ".join(suite_names) if suite_names else "selected cases"
    if not args.quiet:
        console.print(f"scf-harness: {label} on {len(cases)} case"
                      f"{'s' if len(cases) != 1 else ''} ({selection}), convergence "
                      f"{convergence:g}, timeout {args.timeout:g} s, "
                      + (f"scheduler {scheduler}" if scheduler else f"jobs {args.jobs}"),
                      markup=False, soft_wrap=True)
    on_result = None if args.quiet else (lambda r: report.print_progress(console, r))
    with _signals_as_interrupt():
        if scheduler is not None:
            from harness.run.cluster import run_cases_on_cluster

            # the plug-in is loaded on every worker first (in a child process there)
            outcome = run_cases_on_cluster(
                cases, plugin, scheduler=scheduler, tolerances=tolerances,
                convergence=args.convergence, ao_convention=args.ao_convention,
                stability=args.stability, timeout=args.timeout,
                reference_dir=args.references, reference_cache=args.reference_cache,
                write_references=args.write_references, results_path=partial,
                on_result=on_result, plugin_checked=False, require_all=args.require_all,
                basis_source=_basis_source(args), grid=_grid(args))
        else:
            outcome = run_cases(cases, plugin, tolerances=tolerances,
                                convergence=args.convergence,
                                ao_convention=args.ao_convention, stability=args.stability,
                                timeout=args.timeout, jobs=args.jobs,
                                reference_dir=args.references,
                                write_references=args.write_references, results_path=partial,
                                on_result=on_result, plugin_checked=True,
                                require_all=args.require_all,
                                basis_source=_basis_source(args), grid=_grid(args))
        if not args.quiet and outcome.cases:
            console.print()
        report.render(outcome, console, quiet=args.quiet)
        if args.json is not None:
            data = report.to_json(outcome, plugin=label, suite_names=suite_names,
                                  tolerances_table=tolerances.table(convergence),
                                  versions=report.collect_versions(),
                                  require_all=args.require_all)
            data["convergence"] = convergence
            data["timeout_seconds"] = args.timeout
            if args.cases_file is not None:
                data["cases_file"] = str(args.cases_file)
            report.write_json(args.json, data)
            if partial is not None:
                partial.unlink(missing_ok=True)
        if args.certificate is not None:
            _write_certificate(args.certificate, outcome, tolerances=tolerances, plugin=label,
                               console=console, quiet=args.quiet,
                               ao_convention=args.ao_convention, stability=args.stability,
                               require_all=args.require_all,
                               basis_source=_basis_source(args), grid=_grid(args))
    return 0 if outcome.passed else 1


def _check_result(args, console) -> int:
    """``check-result``: one solution file judged like a certify case."""
    import time

    from harness.report import terminal as report
    from harness.run.files import SolutionFileError, read_solution, result_case
    from harness.catalogue.references import reference_for
    from harness.run.outcome import RunOutcome
    from harness.contract.results import CaseResult
    from harness.verdict.judge import JudgeSettings, judge
    from harness.contract.solution import extract

    started = time.perf_counter()
    tolerances = _tolerances(args)
    _basis_source(args)  # a missing basis_set_exchange is a usage error before any run
    _distinct_outputs(args)
    if not args.file.is_file():
        raise UsageError(f"{args.file}: {_not_a_file(args.file)}")
    if args.energy_file is not None and not args.energy_file.is_file():
        raise UsageError(f"--energy-file: {args.energy_file}: {_not_a_file(args.energy_file)}")
    if args.references is not None and not args.references.is_dir():
        raise UsageError(f"--references: not a folder: {args.references}")
    case = result_case(geometry=args.geometry, basis=args.basis, method=args.method,
                       charge=args.charge, multiplicity=args.multiplicity,
                       cartesian=args.cartesian, name=args.name,
                       functional=args.functional,
                       note=f"check-result of {args.file.name}")
    convergence = args.convergence if args.convergence is not None else DEFAULT_CONVERGENCE
    problem = case.problem(convergence)
    if not args.quiet:
        console.print(f"scf-harness: check-result {args.file} as case {case.name} "
                      f"({case.method}/{case.basis}), convergence {convergence:g}",
                      markup=False, soft_wrap=True)
    reference, source, reference_error = None, None, None
    try:
        reference, source = reference_for(case, args.references)
    except Exception as exc:
        from harness.catalogue.references import reference_error_text
        reference_error = reference_error_text(exc)
    extracted = None
    try:
        extracted = extract(read_solution(args.file, problem=problem,
                                          energy_file=args.energy_file))
    except SolutionFileError as exc:
        result = CaseResult(name=case.name, method=case.method, basis=case.basis,
                            error=str(exc), reference_energy=_energy_of(reference),
                            reference_source=source)
    else:
        result = judge(problem, extracted, reference, JudgeSettings(
            tolerances=tolerances, ao_convention=args.ao_convention, stability=args.stability,
            reference_source=source, reference_error=reference_error,
            basis_source=_basis_source(args), grid=_grid(args)))
    outcome = RunOutcome(cases=(result,), interrupted=False,
                         seconds=time.perf_counter() - started,
                         problems={case.name: problem}, solutions={case.name: extracted},
                         references={case.name: reference})
    if not args.quiet:
        console.print()
    report.render(outcome, console, quiet=args.quiet)
    label = f"file: {args.file}"
    if args.json is not None:
        data = report.to_json(outcome, plugin=label, suite_names=[],
                              tolerances_table=tolerances.table(convergence),
                              versions=report.collect_versions())
        data["convergence"] = convergence
        data["solution_file"] = str(args.file)
        data["geometry_file"] = str(args.geometry)
        report.write_json(args.json, data)
    if args.certificate is not None:
        _write_certificate(args.certificate, outcome, tolerances=tolerances, plugin=label,
                           console=console, quiet=args.quiet,
                           ao_convention=args.ao_convention, stability=args.stability,
                           basis_source=_basis_source(args), grid=_grid(args))
    return 0 if outcome.passed else 1


def _energy_of(reference) -> float | None:
    """The reference's total energy in Eh, if there is a reference."""
    return float(reference.energy) if reference is not None else None


def _verify_certificate(args, console) -> int:
    """``verify-certificate``: integrity (and, with --recompute, reproduction); each
    problem printed once, the list cut after MAX_LISTED_PROBLEMS."""
    from harness.report.certificate import (CertificateReadError, load_certificate,
                                     summary_markdown, verify_certificate)

    path = args.certificate
    if path.is_dir():
        raise UsageError(f"{path}: is a directory, not a certificate file")
    if not path.is_file():
        raise UsageError(f"{path}: file not found")
    result = verify_certificate(path, recompute=args.recompute,
                                reference_dir=args.references)
    for line in result.report_lines():
        console.print(line, markup=False, soft_wrap=True)
    if args.markdown is not None:
        try:
            cert = load_certificate(path)
        except CertificateReadError:
            cert = None
        if cert is not None:
            args.markdown.parent.mkdir(parents=True, exist_ok=True)
            args.markdown.write_text(summary_markdown(cert, result), encoding="utf-8")
            console.print(f"summary: {args.markdown}", markup=False, soft_wrap=True)
        else:
            console.print(f"summary: not written ({path} is not a readable certificate)",
                          markup=False, soft_wrap=True)
    return 0 if result.ok else 1


def _bench(args, console) -> int:
    """``bench``: the accelerator against the baselines (harness.bench.runs)."""
    from harness.bench import runs as bench
    if args.call_timeout > bench.acc.MAX_CALL_LIMIT:
        raise UsageError(f"argument --call-timeout: expected at most "
                         f"{bench.acc.MAX_CALL_LIMIT:g} s, got {args.call_timeout:g}")
    cases = bench.bench_suite(args.suite)
    if not cases:
        raise UsageError(f"--suite: suite {args.suite!r} has no cases")

    def progress(done, total, record):
        why = f" ({record.reason})" if record.status == "failed" and record.reason else ""
        console.print(f"[{done}/{total}] {record.case} guess {record.guess} "
                      f"{record.method}: {record.status}{why}, {record.fock_builds} Fock "
                      f"builds, {record.state}", markup=False, highlight=False, soft_wrap=True)

    options = {} if args.baselines is None else {"baselines": args.baselines}
    outcome = bench.run_bench(args.accelerator, cases=cases, guesses=args.guesses,
                              seed=args.seed, report_dir=args.report,
                              references=bench.bench_reference_dir(args.suite),
                              progress=progress, call_limit=args.call_timeout, plots=False,
                              **options)
    print("\n".join(bench.summary_lines(outcome)), flush=True)
    if args.report is not None:  # after the summary and bench.json: a failure loses neither
        try:
            bench.write_report(outcome, args.report)
        except Exception as exc:
            from harness.contract.errors import first_line

            raise UsageError(f"--report: the plots and {bench.HTML_NAME} could not be "
                             f"written ({first_line(exc)}); {bench.JSON_NAME} was") from None
    return outcome.exit_status


def _references(args, console) -> int:
    from harness.catalogue import references
    if args.action is None:
        raise UsageError("references needs an action: build, verify or rehash")
    cases, _ = select_cases(args.suites, args.case_names, default_suite=None,
                            bases=args.bases, methods=args.methods)
    directory = args.references
    if args.action in ("verify", "rehash") and directory is not None \
            and not directory.is_dir():
        raise UsageError(f"--references: not a folder: {directory}")
    if args.action == "build" and directory is not None and directory.exists() \
            and not directory.is_dir():
        raise UsageError(f"--references: not a folder: {directory}")
    if args.action == "build":
        for name, what in references.build(cases, directory, force=args.force):
            console.print(f"{name}: {what}", markup=False, soft_wrap=True)
        return 0
    if args.action == "rehash":
        rows = references.rehash(cases, directory)
        for name, what in rows:
            console.print(f"{name}: {what}", markup=False, soft_wrap=True)
        return 1 if any(what.startswith("not rehashed") for _, what in rows) else 0
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

    from harness.catalogue.cases import load_catalogue

    catalogue = load_catalogue()
    cases_file = args.cases_file
    cases, _ = select_cases(args.suites, args.case_names, cases_file,
                            default_suite=None, bases=args.bases, methods=args.methods)
    table = Table(box=box.SIMPLE_HEAD, pad_edge=False, show_edge=False)
    for column in ("case", "method", "basis", "nao", "suites", "note"):
        table.add_column(column, no_wrap=column != "note",
                         justify="right" if column == "nao" else "left")
    for case in cases:
        basis = case.basis + (" (cartesian)" if case.cartesian else "")
        table.add_row(case.name, case.method, basis, _nao(case), ",".join(case.suites),
                      case.note)
    console.print(table)
    if cases_file is not None and not args.suites:
        console.print(f"{len(cases)} case{'s' if len(cases) != 1 else ''} "
                      f"({_expansion_counts(cases_file, len(cases))})", markup=False,
                      soft_wrap=True)
        return 0
    console.print(f"{len(cases)} cases; suites: {', '.join(catalogue.suites)}", markup=False)
    return 0


def _expansion_counts(cases_file: Path, total: int) -> str:
    """``"<n> from [[case]] tables, <m> from [[matrix]] tables"`` of a suite file that
    expanded into ``total`` cases (already read without error by the caller)."""
    import tomllib

    with open(cases_file, "rb") as fh:
        data = tomllib.load(fh)
    n_single = len(data.get("case", []))
    return f"{n_single} from [[case]] tables, {total - n_single} from [[matrix]] tables"


def _selftest(args, console) -> int:
    from harness.testing import planted
    from harness.testing.selftest import run_selftest, select

    if args.only is not None and not select(planted.catalogue(), args.only):
        raise UsageError(f"--only: no planted entry matches {args.only!r}")
    return run_selftest(console, only=args.only).exit_code


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line with ``argv`` (default ``sys.argv[1:]``); return the exit status."""
    from harness.report.terminal import make_console

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
        if args.command == "check-result":
            return _check_result(args, console)
        if args.command == "verify-certificate":
            return _verify_certificate(args, console)
        if args.command == "bench":
            return _bench(args, console)
        if args.command == "references":
            return _references(args, console)
        if args.command == "selftest":
            return _selftest(args, console)
        return _cases(args, console)
    except (UsageError, HarnessError) as exc:
        _error(str(exc), getattr(exc, "problems", None))
        return 2
    except OSError as exc:
        _error(f"{exc.strerror or exc}: {exc.filename}" if exc.filename else str(exc))
        return 2
    except KeyboardInterrupt:
        _error("interrupted")
        return 1


def _error(message: str, problems: Sequence[str] | None = None) -> None:
    """``scf-harness: error: <message>`` on one line; with ``problems`` (a
    ``CaseListError``: bad entries found together) the first line of the message, then
    one indented line per problem."""
    if problems:
        head = " ".join(str(message).splitlines()[0].split())
        print(f"{PROG}: error: {head}", file=sys.stderr)
        for problem in problems:
            print("  " + " ".join(str(problem).split()), file=sys.stderr)
        return
    line = " ".join(str(message).split())  # one line, whatever the message held
    print(f"{PROG}: error: {line}", file=sys.stderr)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
