"""pytest plug-in: run your SCF code through the harness's cases as ordinary test items.

Registered through the ``pytest11`` entry point ``scf_harness``, so it is loaded in every
pytest run of an environment where scf-harness is installed. Until it is asked to do
something it does nothing: it adds its options, a marker and three fixtures, reads the
``[tool.scf-harness]`` table of the project's pyproject.toml (pytest's ``inipath`` if that
is a pyproject.toml, else ``rootpath / "pyproject.toml"``; never the current directory),
and imports nothing heavy (no numpy, pyscf or rich).

With a plug-in configured (``--scf-plugin mypkg.scf:solve`` or ``plugin = "..."`` in the
table) it generates one test item per case of the chosen suites, named exactly by the
case (``water-sto-3g-rhf``; node id ``scf-harness::water-sto-3g-rhf``), marked
``scf_harness``. ``-k``, ``-m``, ``-x`` and ``--lf`` work on them as on any test; each
item is self-contained (no shared state, so xdist can distribute them). An item runs its
case through ``harness.run.runner.run_cases`` (the plug-in in a child process) and fails when
the case fails; the failure report starts with the failing checks' one-line messages and
hints, then the verdict table, then a ``reproduce: scf-harness certify ...`` line.

Options (group "scf-harness"; each also a key of ``[tool.scf-harness]``, the flag wins):
``--scf-plugin``, ``--scf-suite``, ``--scf-cases-file``, ``--scf-tol``, ``--scf-timeout``,
``--scf-convergence``, ``--scf-stability``, ``--scf-require-all``, ``--scf-scheduler``. A case
the plug-in reports unsupported (``harness.Unsupported``) is skipped with its reason, or fails
with ``--scf-require-all``. With ``--scf-scheduler`` the cases run as tasks on a Dask cluster
(``harness.run.cluster``: all selected items are submitted when the first one runs, and each
item waits for its own case). pytest's ``addini`` is not used: ini keys live in
``[tool.pytest.ini_options]``, and the harness's own table is read by
:mod:`harness.ui.config`, so that flag and key have one parser and one meaning.

Fixtures for your own tests: ``scf_case`` (``scf_case("water-sto-3g-rhf") -> Case``),
``scf_reference`` (``scf_reference(case) -> Reference``, the stored pyscf reference) and
``scf_check`` (``scf_check(solution, case)`` runs every check and raises a readable
AssertionError). Atomic units throughout: bohr, hartree (Eh).
"""

from __future__ import annotations

import io
from typing import Any

import pytest

from harness.checks import table as _table
from harness.ui import config as _config
from harness.contract.errors import CaseError, HarnessError, Unsupported

#: Node id (and name) of the collector that holds the generated case items.
SUITE_NODE = "scf-harness"
#: Marker put on every generated item (``-m scf_harness`` / ``-m "not scf_harness"``).
MARKER = "scf_harness"
#: Width (characters) the verdict table of a failure report may take: wide enough that
#: no column is cut (a table only takes the width it needs); CI logs do not wrap.
VERDICT_WIDTH = 400

_SETTINGS = pytest.StashKey[_config.Settings]()


# --------------------------------------------------------------------------- options


def pytest_addoption(parser: pytest.Parser) -> None:
    group = parser.getgroup("scf-harness", "scf-harness: run an SCF code on the harness's "
                            "cases (also settable in [tool.scf-harness] of pyproject.toml; "
                            "a flag wins over its key). Atomic units (bohr, Eh)")
    group.addoption("--scf-plugin", dest="scf_plugin", default=None,
                    metavar="MODULE:FUNCTION",
                    help="the SCF function to check (MODULE:FUNCTION or path/to/file.py:"
                    "FUNCTION); generates one test item per case. Key: plugin. "
                    "Default: none (no items)")
    group.addoption("--scf-suite", dest="scf_suite", action="append", default=None,
                    metavar="NAME",
                    help="catalogue suite to run (repeatable). Key: suite (a name or a list). "
                    f"Default: {_config.DEFAULT_SUITE}, or none with a cases file")
    group.addoption("--scf-cases-file", dest="scf_cases_file", default=None, metavar="FILE",
                    help="a TOML suite file of your own ([[case]] tables as in the catalogue, "
                    "geometry paths relative to it); its cases run too. Key: cases_file "
                    "(relative to the pyproject.toml). Default: none")
    group.addoption("--scf-tol", dest="scf_tol", action="append", default=None,
                    metavar="CHECK=VALUE",
                    help="absolute tolerance of one check, e.g. reference-energy=1e-5 (Eh for "
                    "energies; repeatable; replaces the key's value for that check only). "
                    f"Key: tolerances = {{check = value}}. CHECK is one of "
                    f"{', '.join(_table.TOLERANCE_NAMES)}. Default: the documented values "
                    "(docs/checks.md)")
    group.addoption("--scf-timeout", dest="scf_timeout", default=None, metavar="S",
                    help="seconds allowed for the plug-in on one case. Key: timeout. "
                    f"Default: {_config.DEFAULT_TIMEOUT:g}")
    group.addoption("--scf-convergence", dest="scf_convergence", default=None, metavar="X",
                    help="stationarity asked of the plug-in: max|X(FPS - SPF)X|, X = S^-1/2, "
                    "in (0, 1); the derived tolerances follow it. Key: convergence. "
                    f"Default: {_config.DEFAULT_CONVERGENCE:g}")
    group.addoption("--scf-require-all", dest="scf_require_all", action="store_true",
                    default=None,
                    help="a case the code reports unsupported (harness.Unsupported) fails "
                    "instead of being skipped; as certify --require-all. Key: require_all "
                    "(true/false). Default: skipped with the reason")
    group.addoption("--scf-basis-source", dest="scf_basis_source", default=None,
                    choices=("pyscf", "bse"),
                    help="where named basis sets come from: pyscf's copies (default) or "
                    "basis_set_exchange (pip install 'scf-harness[bse]'), as certify "
                    "--basis-source. Key: basis_source")
    group.addoption("--scf-grid", dest="scf_grid", default=None, choices=("pinned", "own"),
                    help="Kohn–Sham only: 'own' when the code integrates the XC term on its "
                    "own quadrature grid (XC tolerances from a measured grid sensitivity, "
                    "stated in the message), as certify --grid. Key: grid. Default: pinned "
                    "unless the solution says grid='own'")
    group.addoption("--scf-stability", dest="scf_stability", default=None,
                    metavar="|".join(_config.STABILITY_CHOICES),
                    help="orbital stability analysis of the code's solution, as certify "
                    "--stability: internal (within the method), external (RHF also against "
                    "UHF), off. Key: stability. "
                    f"Default: {_config.DEFAULT_STABILITY}")
    group.addoption("--scf-scheduler", dest="scf_scheduler", default=None,
                    metavar="ADDRESS",
                    help="run the cases as tasks on a Dask cluster: tcp://HOST:PORT of a "
                    "running scheduler, or local:N worker processes on this machine (needs "
                    "pip install -e \".[cluster]\"). Key: scheduler. Default: none (each "
                    "item runs its case here)")


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line("markers", f"{MARKER}: a case run through the SCF plug-in by "
                            "scf-harness (generated by --scf-plugin or [tool.scf-harness])")
    opt = config.option
    try:
        flags = _config.parse_flags(
            plugin=getattr(opt, "scf_plugin", None), suites=getattr(opt, "scf_suite", None),
            tolerances=getattr(opt, "scf_tol", None), timeout=getattr(opt, "scf_timeout", None),
            convergence=getattr(opt, "scf_convergence", None),
            stability=getattr(opt, "scf_stability", None),
            basis_source=getattr(opt, "scf_basis_source", None),
            grid=getattr(opt, "scf_grid", None),
            cases_file=getattr(opt, "scf_cases_file", None),
            require_all=getattr(opt, "scf_require_all", None),
            base=config.invocation_params.dir,
            scheduler=getattr(opt, "scf_scheduler", None))
        pyproject = _config.pyproject_for(config.rootpath, config.inipath)
        settings = _config.load_settings(pyproject, flags)
        if settings.active and settings.scheduler is not None:
            from harness.run.cluster import require_dask

            require_dask("--scf-scheduler" if "scheduler" in flags else "scheduler")
    except HarnessError as exc:
        raise pytest.UsageError(f"scf-harness: {exc}") from None
    if not settings.active:
        unused = [f"--scf-{name.replace('_', '-')}" for name in ("suite", "cases_file", "timeout")
                  if name in flags]
        if unused:
            raise pytest.UsageError(f"scf-harness: {', '.join(unused)} needs a plug-in "
                                    "(--scf-plugin, or plugin in [tool.scf-harness])")
    config.stash[_SETTINGS] = settings


def settings_of(config: pytest.Config) -> _config.Settings:
    """The resolved scf-harness settings of this pytest run (defaults if unconfigured)."""
    return config.stash.get(_SETTINGS, _config.Settings())


def pytest_report_header(config: pytest.Config) -> str | None:
    settings = settings_of(config)
    if not settings.active:
        return None
    source = f" (settings from {settings.source})" if settings.source else ""
    chosen = [f"suite {', '.join(settings.suites)}"] if settings.suites else []
    if settings.cases_file is not None:
        chosen.append(f"cases file {settings.cases_file}")
    return (f"scf-harness: {settings.plugin} on {' and '.join(chosen)}, "
            f"timeout {settings.timeout:g} s, stability {settings.stability}"
            f"{', require-all' if settings.require_all else ''}{source}")


# --------------------------------------------------------------------------- collection


@pytest.hookimpl(tryfirst=True)
def pytest_collection_modifyitems(session: pytest.Session, config: pytest.Config,
                                  items: list) -> None:
    """Append one item per case (before -k/-m deselection and --lf filtering run)."""
    if not settings_of(config).active:
        return
    suite = CaseSuite.from_parent(session, name=SUITE_NODE, nodeid=SUITE_NODE)
    generated = suite.collect()
    config.hook.pytest_collectreport(
        report=pytest.CollectReport(suite.nodeid, "passed", None, generated))
    items.extend(generated)


class CaseSuite(pytest.Collector):
    """The generated cases of the configured suites (catalogue order), then those of the
    cases file (its order); no duplicates."""

    def collect(self) -> list["CaseItem"]:
        from harness.catalogue.cases import load_catalogue, load_user_suite
        from harness.run.runner import check_plugin

        settings = settings_of(self.config)
        try:
            catalogue = load_catalogue()
            chosen = [case for suite in settings.suites for case in catalogue.suite(suite)]
            if settings.cases_file is not None:
                chosen.extend(load_user_suite(settings.cases_file, catalogue))
            cases, seen = [], set()
            for case in chosen:
                if case.name not in seen:
                    seen.add(case.name)
                    cases.append(case)
            # a bad spec is a usage error, reported once; loaded in a child process
            check_plugin(settings.plugin, timeout=settings.timeout)
        except HarnessError as exc:
            raise pytest.UsageError(f"scf-harness: {exc}") from None
        return [CaseItem.from_parent(self, name=case.name, case=case) for case in cases]


class CaseFailed(Exception):
    """Raised by a case item whose case failed; carries the CaseResult."""

    def __init__(self, result, reproduce: str):
        super().__init__(result.name)
        self.result = result
        self.reproduce = reproduce


class CaseItem(pytest.Item):
    """One catalogue case run through the configured plug-in (in a child process)."""

    def __init__(self, *, case, **kwargs):
        super().__init__(**kwargs)
        self.case = case
        self.add_marker(MARKER)

    def runtest(self) -> None:
        from harness.run.runner import run_cases
        from harness.checks.tolerances import Tolerances

        settings = settings_of(self.config)
        if settings.scheduler is not None:
            result = _cluster_result(self)
        else:
            outcome = run_cases([self.case], settings.plugin,
                                tolerances=Tolerances(overrides=dict(settings.tolerances)),
                                timeout=settings.timeout, convergence=settings.convergence,
                                stability=settings.stability, plugin_checked=True,
                                require_all=settings.require_all,
                                basis_source=settings.basis_source, grid=settings.grid)
            if outcome.interrupted or not outcome.cases:
                raise KeyboardInterrupt
            result = outcome.cases[0]
        self.user_properties.append(("scf-harness energy (Eh)", result.energy))
        if result.status == "unsupported":
            pytest.skip(f"unsupported: {result.unsupported}")
        if not result.passed:
            raise CaseFailed(result, settings.reproduce_command(self.case.name))

    def repr_failure(self, excinfo, style=None):
        if isinstance(excinfo.value, CaseFailed):
            return failure_report(excinfo.value.result, excinfo.value.reproduce)
        if isinstance(excinfo.value, HarnessError):
            return str(excinfo.value)
        return super().repr_failure(excinfo, style=style)

    def reportinfo(self):
        return self.path, None, f"scf-harness case {self.case.name}"


_CLUSTER = pytest.StashKey[Any]()


def _cluster_result(item: "CaseItem"):
    """The CaseResult of ``item``'s case from the cluster run of this session: the first
    item to ask starts it (``harness.run.cluster.ClusterRun``) and submits the cases of
    every selected CaseItem at once; each item then waits for its own."""
    from harness.checks.tolerances import Tolerances
    from harness.run.cluster import ClusterRun, task_options

    config = item.config
    state = config.stash.get(_CLUSTER, None)
    if state is None:
        settings = settings_of(config)
        items = [i for i in item.session.items if isinstance(i, CaseItem)]
        options = task_options(tolerances=Tolerances(overrides=dict(settings.tolerances)),
                               convergence=settings.convergence, stability=settings.stability,
                               timeout=settings.timeout, require_all=settings.require_all,
                               basis_source=settings.basis_source, grid=settings.grid)
        run = ClusterRun(settings.scheduler, settings.plugin, options)
        state = {"run": run, "index": {}}
        config.stash[_CLUSTER] = state
        run.submit([i.case for i in items])
        state["index"] = {id(i): n for n, i in enumerate(items)}
    return state["run"].wait_for(state["index"][id(item)])["result"]


def pytest_sessionfinish(session: pytest.Session) -> None:
    """Stop the cluster run of this session, if one was started."""
    state = session.config.stash.get(_CLUSTER, None)
    if state is not None:
        state["run"].close()
        del session.config.stash[_CLUSTER]


def failure_report(result, reproduce: str) -> str:
    """The text pytest shows for a failed case: the failing checks' one-line messages
    (and hints), a blank line, the verdict table, a blank line, ``reproduce: <command>``."""
    lines = []
    if result.error is not None:
        lines.append(result.error)
    for check in result.failures:
        lines.append(check.message)
        if check.hint:
            lines.append(f"  hint: {check.hint}")
    if not lines:
        lines.append(f"{result.name}: no check passed")
    lines += ["", verdict_text([result]), "", f"reproduce: {reproduce}"]
    return "\n".join(lines)


def verdict_text(results) -> str:
    """``harness.report.terminal.verdict_table`` rendered as plain text (no colour, no column cut)."""
    from rich.console import Console

    from harness.report.terminal import PLAIN_WIDTH, verdict_table

    buffer = io.StringIO()
    console = Console(file=buffer, width=max(PLAIN_WIDTH, VERDICT_WIDTH), no_color=True,
                      color_system=None, force_terminal=False, highlight=False, emoji=False)
    console.print(verdict_table(list(results), console))
    return "\n".join(line.rstrip() for line in buffer.getvalue().rstrip("\n").splitlines())


# --------------------------------------------------------------------------- fixtures


@pytest.fixture(scope="session")
def scf_case():
    """A loader of catalogue cases: ``scf_case("water-sto-3g-rhf") -> Case`` (bohr).

    An unknown name raises a one-line CaseError with the closest names.
    """
    loaded: dict[str, Any] = {}

    def load(name: str):
        __tracebackhide__ = True
        from harness.catalogue.cases import load_catalogue

        if "catalogue" not in loaded:
            loaded["catalogue"] = load_catalogue()
        return loaded["catalogue"].case(name)

    return load


@pytest.fixture(scope="session")
def scf_reference(scf_case):
    """``scf_reference(case) -> Reference``: the stored pyscf reference of a case (or of a
    case name); energies in Eh. Raises a one-line ReferenceDataError when none is stored
    or the stored one no longer matches the case."""

    def reference(case):
        __tracebackhide__ = True
        from harness.catalogue.cases import Case
        from harness.catalogue.references import load_reference

        case = scf_case(case) if isinstance(case, str) else case
        if not isinstance(case, Case):
            raise CaseError(f"expected a Case or a case name, got {type(case).__name__}",
                            field="scf_reference")
        return load_reference(case)

    return reference


@pytest.fixture
def scf_check(request, scf_case):
    """``scf_check(solution, case, *, reference=None, ao_convention=None)`` runs every
    harness check (``harness.verdict.judge.judge``, as ``certify`` does).

    ``solution`` is a plug-in return value (Eh), or the ``harness.Unsupported`` your code
    raised; ``case`` a Case, a case name or a Problem (bohr). An unsupported case is
    skipped (``pytest.skip("unsupported: <reason>")``), and so is a test using this
    fixture that raises ``harness.Unsupported`` itself; with ``--scf-require-all`` (key
    ``require_all``) either fails instead. The reference of a Case is found as ``certify`` finds it (the stored
    one when it matches, else computed by pyscf); when there is none, reference-energy
    fails with the reason. Pass ``reference=`` to give one; a Problem has none
    (reference-energy is then not applicable). ``ao_convention`` names the code's AO
    convention (as ``certify --ao-convention``). Tolerances and convergence and the
    stability mode come from ``--scf-tol`` / ``--scf-convergence`` / ``--scf-stability``
    or [tool.scf-harness].
    Returns the CheckResults when no check fails; otherwise raises AssertionError whose
    first line is the case's error or the first failing check's message, followed by
    the others.
    """
    settings = settings_of(request.config)

    def check(solution, case, *, reference=None, ao_convention=None):
        __tracebackhide__ = True
        from harness.contract.problem import Problem
        from harness.contract.solution import extract
        from harness.checks.tolerances import Tolerances
        from harness.verdict.judge import JudgeSettings, judge

        from harness.catalogue.cases import Case

        if isinstance(case, str):
            case = scf_case(case)
        if not isinstance(case, (Case, Problem)):
            raise CaseError(f"expected a Case, a case name or a Problem, got "
                            f"{type(case).__name__}", field="scf_check")
        if reference is not None and not hasattr(reference, "energy"):
            raise CaseError(f"reference: expected a Reference (from scf_reference), got "
                            f"{type(reference).__name__}", field="scf_check")
        if isinstance(solution, Unsupported):
            _unsupported(solution, settings)
        source, reference_error = None, None
        if isinstance(case, Problem):
            problem = case
        else:
            problem = (case.problem() if settings.convergence is None
                       else case.problem(convergence=settings.convergence))
            if reference is None:
                reference, source, reference_error = _reference_of(case)
        try:
            extracted = extract(solution)
        except (TypeError, HarnessError) as exc:
            raise AssertionError(f"the solution is not readable: {exc}") from None
        result = judge(problem, extracted, reference, JudgeSettings(
            tolerances=Tolerances(overrides=dict(settings.tolerances)),
            ao_convention=ao_convention, stability=settings.stability,
            reference_source=source, reference_error=reference_error,
            basis_source=settings.basis_source, grid=settings.grid))
        lines = [result.error] if result.error is not None else []
        for r in result.failures:
            lines.append(r.message)
            if r.hint:
                lines.append(f"  hint: {r.hint}")
        if lines:
            raise AssertionError("\n".join(lines))
        return result.checks

    return check


def _unsupported(exc: Unsupported, settings: _config.Settings):
    """Skip the test for an unsupported case, or fail it under require-all."""
    __tracebackhide__ = True
    reason = getattr(exc, "reason", None) or str(exc) or "no reason given"
    if settings.require_all:
        pytest.fail(f"unsupported: {reason} (require-all: every case must run)",
                    pytrace=False)
    pytest.skip(f"unsupported: {reason}")


@pytest.hookimpl(wrapper=True)
def pytest_pyfunc_call(pyfuncitem):
    """A test that uses ``scf_check`` and raises ``harness.Unsupported`` (its code cannot
    run the case) is skipped with the reason, or fails under require-all."""
    try:
        return (yield)
    except Unsupported as exc:
        if "scf_check" not in getattr(pyfuncitem, "fixturenames", ()):
            raise
        _unsupported(exc, settings_of(pyfuncitem.config))


def _reference_of(case):
    """``(reference, source, None)`` as the runner finds it
    (``harness.catalogue.references.reference_for``: stored, else computed), or
    ``(None, None, one-line reason)`` when there is none."""
    from harness.catalogue.references import reference_error_text, reference_for

    try:
        reference, source = reference_for(case)
    except Exception as exc:
        return None, None, reference_error_text(exc)
    return reference, source, None
