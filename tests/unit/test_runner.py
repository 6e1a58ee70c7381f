"""Tests of harness.run.runner: each case in its own process, failures kept to their case.

The checks and references are replaced by small fakes here (monkeypatched), so these
tests exercise only the isolation: exceptions, timeouts, crashes, garbage, ordering,
the JSON lines file and interruption. The plug-ins are in tests/cli/plugins.
"""

from __future__ import annotations

import dataclasses
import json
import multiprocessing
import os
import sys
import time
from pathlib import Path

import pytest

from harness.verdict.evaluate import Verdict

from harness.run import runner
from harness.verdict import judge as judge_module
from harness.verdict.judge import JudgeSettings
from harness.contract.errors import PluginLoadError
from harness.contract.problem import Problem
from harness.contract.results import CheckResult, Status
from harness.checks.tolerances import Tolerances

PLUGINS = Path(__file__).resolve().parents[1] / "cli" / "plugins" / "misbehaving.py"


def spec(function: str) -> str:
    return f"{PLUGINS}:{function}"


def line_of(text: str, path: Path = PLUGINS) -> int:
    """The 1-based line of ``path`` containing ``text`` (so no line number is hard-coded)."""
    for number, line in enumerate(path.read_text().splitlines(), start=1):
        if text in line:
            return number
    raise AssertionError(f"{text!r} not in {path}")


@dataclasses.dataclass(frozen=True)
class FakeCase:
    """Stands in for harness.catalogue.cases.Case: H2/STO-3G at R = 1.4 bohr under a given name."""

    name: str
    method: str = "rhf"
    basis: str = "sto-3g"

    def problem(self, convergence: float = 1e-6, initial_density=None) -> Problem:
        return Problem.create(name=self.name, numbers=[1, 1],
                              coordinates=[[0, 0, 0], [0, 0, 1.4]], basis=self.basis,
                              method=self.method, convergence=convergence)


@dataclasses.dataclass(frozen=True)
class FakeReference:
    energies: dict


def fake_evaluate(problem, extracted, reference, settings=None, integrals=None):
    """Passes when the plug-in sent an energy; reference-energy compares it if given.

    Returns (verdict, the reference it was judged against), as judge._evaluate does."""
    energy = extracted.energy
    ok = isinstance(energy, float)
    checks = [CheckResult("well-formed", Status.PASSED if ok else Status.FAILED, None, None,
                          f"well-formed: energy {'present' if ok else 'missing'}")]
    if reference is None:
        checks.append(CheckResult("reference-energy", Status.NOT_APPLICABLE, None, None,
                                  "reference-energy: not applicable"))
    else:
        diff = abs(energy - reference.energies["total"])
        checks.append(CheckResult("reference-energy",
                                  Status.PASSED if diff <= 1e-3 else Status.FAILED,
                                  diff, 1e-3, f"reference-energy: {diff:.1e}"))
    return Verdict(checks=tuple(checks), analysis={}), reference


@pytest.fixture(autouse=True)
def fakes(monkeypatch):
    """References and checks replaced by fakes; every reference 'stored' at -1.1167 Eh."""
    monkeypatch.setattr(judge_module, "_evaluate", fake_evaluate)
    monkeypatch.setattr(runner, "_reference",
                        lambda case, directory, write: (FakeReference({"total": -1.1167}),
                                                        "stored"))


def run(function: str, names=("h2-sto-3g-rhf",), **kw):
    kw.setdefault("timeout", 30.0)
    kw.setdefault("judge_workers", 0)  # the fakes are monkeypatched into this process
    return runner.run_cases([FakeCase(n) for n in names], spec(function),
                            tolerances=Tolerances(), **kw)


class TestRunCases:
    def test_good_plugin_passes_and_is_timed(self):
        """A well-behaved plug-in: case passed, energy and reference recorded."""
        out = run("constant")
        (case,) = out.cases
        assert case.passed and out.passed and not out.interrupted
        assert case.energy == pytest.approx(-1.1167)
        assert case.reference_energy == pytest.approx(-1.1167)
        assert case.reference_source == "stored"
        assert 0 <= case.plugin_seconds < 5 and case.check_seconds >= 0

    def test_exception_names_type_message_and_plugin_line(self):
        """An exception fails its case with type, message and the plug-in's own line."""
        out = run("raises_deep")
        (case,) = out.cases
        assert not case.passed and case.checks == ()
        line = line_of("return a / b")
        assert case.error == (f"ZeroDivisionError: float division by zero "
                              f"(at {PLUGINS}:{line} in _divide)")

    def test_run_goes_on_after_a_failing_case(self):
        """The first case raises; the second one (the example SCF code) runs and passes."""
        out = run("raises_on_first", names=("h2-sto-3g-rhf", "h2-copy"),
                  timeout=60)
        first, second = out.cases
        line = line_of("raise ValueError")
        assert first.error == (f"ValueError: planted failure on h2-sto-3g-rhf "
                               f"(at {PLUGINS}:{line} in raises_on_first)")
        assert second.name == "h2-copy" and second.error is None, second.error

    def test_timeout_kills_the_child(self):
        """A plug-in sleeping past the timeout fails with 'timed out after 1.0 s', promptly."""
        start = time.monotonic()
        out = run("sleeps", timeout=1.0)
        assert out.cases[0].error == "timed out after 1.0 s"
        assert time.monotonic() - start < 8
        assert multiprocessing.active_children() == []

    def test_segfault_is_named(self):
        """A child killed by SIGSEGV fails its case naming the signal."""
        out = run("segfaults")
        assert out.cases[0].error == "plug-in process died from SIGSEGV without sending a result"

    def test_exit_code_is_reported(self):
        """os._exit(3) in the plug-in: the exit code is reported."""
        out = run("hard_exit")
        assert out.cases[0].error == "plug-in process exited with code 3 without sending a result"

    def test_sys_exit_is_a_plugin_failure(self):
        """sys.exit(4) inside the plug-in fails the case as an exception, with its line."""
        out = run("calls_sys_exit")
        line = line_of("    sys.exit(4)")
        assert out.cases[0].error == f"SystemExit: 4 (at {PLUGINS}:{line} in calls_sys_exit)"

    def test_string_return_is_unreadable(self):
        """A string return value fails with extract's TypeError message."""
        out = run("returns_string")
        assert out.cases[0].error == ("unreadable return value: the plug-in returned str, not "
                                      "a mapping with the keys energy, coefficients, "
                                      "occupations")

    def test_missing_keys_reach_the_checks(self):
        """A dict without the required keys is handed to the checks, which judge it."""
        out = run("missing_keys")
        (case,) = out.cases
        assert case.error is None
        assert case.check("well-formed").status is Status.PASSED  # the fake only wants energy
        assert case.energy == -1.0
        assert case.check("reference-energy").status is Status.FAILED

    def test_bad_spec_raises_before_running(self):
        """An unloadable spec raises PluginLoadError and starts no child."""
        with pytest.raises(PluginLoadError) as info:
            runner.run_cases([FakeCase("x")], spec("nosuch"), tolerances=Tolerances())
        assert str(info.value) == f"plug-in '{spec('nosuch')}': {PLUGINS} has no attribute 'nosuch'"

    def test_internal_check_error_fails_case_and_run_goes_on(self, monkeypatch):
        """An exception in the harness's own checks fails that case only."""
        calls = []

        def flaky(problem, extracted, reference, settings, integrals=None):
            calls.append(problem.name)
            if problem.name == "first":
                raise RuntimeError("kernel broke")
            return fake_evaluate(problem, extracted, reference, settings)

        monkeypatch.setattr(judge_module, "_evaluate", flaky)
        out = run("constant", names=("first", "second"))
        first, second = out.cases
        assert first.error.startswith("internal error in check flaky (")
        assert first.error.endswith("RuntimeError: kernel broke")
        assert second.passed and calls == ["first", "second"]

    def test_reference_error_fails_reference_check_only(self, monkeypatch):
        """A reference that cannot be had fails reference-energy; other checks stand."""
        def broken(case, directory, write):
            raise ValueError("stored file is truncated")

        monkeypatch.setattr(runner, "_reference", broken)
        (case,) = run("constant").cases
        assert case.check("well-formed").status is Status.PASSED
        ref = case.check("reference-energy")
        assert ref.status is Status.FAILED
        assert ref.message == ("reference-energy: no reference (h2-sto-3g-rhf): "
                               "ValueError: stored file is truncated")

    def test_results_file_gets_one_line_per_case(self, tmp_path):
        """results_path receives one JSON line per finished case, in completion order."""
        path = tmp_path / "r.jsonl"
        out = run("raises_on_first", names=("h2-sto-3g-rhf", "b"), results_path=path)
        lines = [json.loads(x) for x in path.read_text().splitlines()]
        assert [x["name"] for x in lines] == ["h2-sto-3g-rhf", "b"]
        assert lines == [c.to_json() for c in out.cases]

    def test_jobs_run_in_parallel_and_keep_input_order(self):
        """Three 1.5 s plug-in calls with jobs=3 take well under 3 × 1.5 s; order kept."""
        names = ("c1", "c2", "c3")
        start = time.monotonic()
        out = run("sleeps_briefly", names=names, jobs=3)
        took = time.monotonic() - start
        assert [c.name for c in out.cases] == list(names)
        assert all(c.passed for c in out.cases)
        assert took < 3 * 1.5, took

    def test_callbacks_see_every_case(self):
        """on_start gets each name before on_result gets its result."""
        events = []
        run("constant", names=("a", "b"), on_start=lambda n: events.append(("start", n)),
            on_result=lambda r: events.append(("result", r.name)))
        assert events == [("start", "a"), ("result", "a"), ("start", "b"), ("result", "b")]

    def test_interrupt_keeps_finished_cases(self, tmp_path):
        """Ctrl-C after the first case: interrupted, first case kept, children gone."""
        path = tmp_path / "r.jsonl"

        def stop_after_first(result):
            if result.name == "h2-sto-3g-rhf":
                raise KeyboardInterrupt

        out = run("sleeps_after_first", names=("h2-sto-3g-rhf", "b", "c"), jobs=2,
                  results_path=path, on_result=stop_after_first)
        assert out.interrupted and not out.passed
        assert [c.name for c in out.cases] == ["h2-sto-3g-rhf"]
        assert [json.loads(x)["name"] for x in path.read_text().splitlines()] == ["h2-sto-3g-rhf"]
        assert multiprocessing.active_children() == []

    def test_interrupt_request_stops_the_run_without_an_exception(self):
        """A signal that lands in a finaliser loses its KeyboardInterrupt; the flag
        ``request_interrupt`` sets still stops the run while a child sleeps."""

        def request_after_first(result):
            if result.name == "h2-sto-3g-rhf":
                runner.request_interrupt()  # no exception: as if it had been swallowed

        started = time.monotonic()
        out = run("sleeps_after_first", names=("h2-sto-3g-rhf", "b"),
                  on_result=request_after_first)
        assert out.interrupted
        assert [c.name for c in out.cases] == ["h2-sto-3g-rhf"]
        assert time.monotonic() - started < 20.0  # the sleeping child sleeps far longer
        assert multiprocessing.active_children() == []

    def test_a_new_run_forgets_an_old_request(self):
        runner.request_interrupt()
        out = run("constant", names=("a",))
        assert not out.interrupted and [c.name for c in out.cases] == ["a"]


class TestCallablePluginsAndRecords:
    """A picklable callable in place of the spec; problems, solutions and references kept."""

    LAB = Path(__file__).resolve().parents[1] / "external" / "lab_code.py"

    def test_command_plugin_is_sent_to_the_child(self, tmp_path):
        """A CommandPlugin (a callable, not a spec) runs the external code per case."""
        import sys

        from harness.run.external import CommandPlugin

        plugin = CommandPlugin(f"{sys.executable} {self.LAB} --in {{problem}} "
                               f"--out {{solution}}", scratch_root=tmp_path, keep=True)
        out = runner.run_cases([FakeCase("h2-sto-3g-rhf")], plugin, tolerances=Tolerances(),
                               timeout=60.0)
        (case,) = out.cases
        assert case.error is None and case.passed
        # H2/STO-3G at R = 1.4 bohr, solved by the example SCF code in the external
        # process. Published E_total = -1.1167 Eh: Szabo & Ostlund, Modern Quantum
        # Chemistry (Dover, 1989), sec. 3.5.2 (from memory, as commonly quoted; see
        # tests/published/SOURCES.md item 3).
        assert case.energy == pytest.approx(-1.1167, abs=1e-3)
        (folder,) = tmp_path.iterdir()  # kept: the child really ran the command
        assert (folder / "solution.npz").is_file()
        assert out.solutions["h2-sto-3g-rhf"].energy == case.energy

    def test_unpicklable_callable_is_refused_before_running(self):
        with pytest.raises(PluginLoadError) as info:
            runner.run_cases([FakeCase("x")], lambda problem: {}, tolerances=Tolerances())
        assert "cannot be sent to the plug-in process (it does not pickle" in str(info.value)
        assert multiprocessing.active_children() == []

    def test_not_callable_is_refused(self):
        with pytest.raises(PluginLoadError, match="not callable"):
            runner.run_cases([FakeCase("x")], 42, tolerances=Tolerances())

    def test_outcome_holds_problems_solutions_references(self):
        """Passing case: its problem, extracted solution and reference; failing: None."""
        out = run("raises_on_first", names=("h2-sto-3g-rhf", "b"))
        first, second = out.cases
        assert first.error is not None and second.passed
        assert set(out.problems) == {"h2-sto-3g-rhf", "b"}
        assert out.problems["b"].name == "b" and out.problems["b"].nao == 2
        assert out.solutions["h2-sto-3g-rhf"] is None
        assert out.solutions["b"].energy == second.energy
        assert out.references["b"].energies["total"] == pytest.approx(-1.1167)

    def test_judge_matches_the_runner(self):
        """check-result's path (judge on the extracted solution) gives the runner's verdict."""
        out = run("constant")
        (case,) = out.cases
        again = judge_module.judge(out.problems["h2-sto-3g-rhf"], out.solutions["h2-sto-3g-rhf"],
                                   out.references["h2-sto-3g-rhf"],
                                   JudgeSettings(tolerances=Tolerances(),
                                                 reference_source="stored"))
        assert [c.to_json() for c in again.checks] == [c.to_json() for c in case.checks]
        assert again.energy == case.energy and again.reference_energy == case.reference_energy


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/status").read_text()
    except FileNotFoundError:
        return False
    return "State:\tZ" not in state


def _gone_soon(pid: int, seconds: float = 5.0) -> bool:
    deadline = time.monotonic() + seconds
    while _alive(pid) and time.monotonic() < deadline:
        time.sleep(0.05)
    return not _alive(pid)


class TestNothingOutlivesItsCase:
    def test_a_detached_grandchild_is_killed_with_the_case(self, tmp_path):
        """A plug-in that runs ``sleep 97 &`` through a shell: the case passes, and the
        sleep (in the child's own process group) is gone when run_cases returns."""
        import tempfile

        name = f"h2-grandchild-{os.getpid()}"
        pidfile = Path(tempfile.gettempdir()) / f"{name}.grandchild.pid"
        pidfile.unlink(missing_ok=True)
        out = run("leaves_a_grandchild", names=(name,))
        pid = int(pidfile.read_text())
        pidfile.unlink()
        try:
            assert out.cases[0].passed
            assert _gone_soon(pid), f"sleep 97 (pid {pid}) outlived its case"
        finally:
            if _alive(pid):
                os.kill(pid, 9)


class TestParentKilled:
    def test_a_plugin_that_kills_the_fork_server_is_named(self):
        """Was 'plug-in process exited with code 255 without sending a result'; the next
        case runs in a new fork server and passes."""
        out = run("kills_its_parent_on_first", names=("h2-sto-3g-rhf", "h2-again"))
        first, second = out.cases
        assert first.error == ("the plug-in's worker process lost its parent, the harness's "
                               "fork server (killed from inside the plug-in? os.getppid() is "
                               "not the harness): result unknown")
        assert second.passed


class TestDeathReason:
    def test_signal_and_code(self):
        """Negative exit codes are signals, named; positive ones are codes."""
        assert runner.death_reason(-9) == "plug-in process died from SIGKILL without sending a result"
        assert runner.death_reason(2) == "plug-in process exited with code 2 without sending a result"


class TestRunOutcome:
    def test_empty_or_interrupted_run_does_not_pass(self):
        """No cases, or an interrupted run, is not a pass."""
        assert not runner.RunOutcome(cases=(), interrupted=False, seconds=0.0).passed
        out = run("constant")
        assert out.passed
        assert not dataclasses.replace(out, interrupted=True).passed


FOLDER = PLUGINS.parent
UNPRINTABLE = FOLDER / "unprintable.py"


def imported_here(stem: str) -> bool:
    """True when the module file ``<stem>.py`` of tests/cli/plugins is loaded in this
    (the harness's) process."""
    path = str(FOLDER / f"{stem}.py")
    return any(getattr(m, "__file__", None) == path for m in list(sys.modules.values()))


def check_fails(stem: str, **kw) -> tuple[str, str]:
    """run_cases on ``<stem>.py:solve`` must raise PluginLoadError, start no case, leave
    this process's cwd alone and never import the module here; returns (error, spec)."""
    target = f"{FOLDER / stem}.py:solve"
    cwd = os.getcwd()
    kw.setdefault("timeout", 30.0)
    with pytest.raises(PluginLoadError) as info:
        runner.run_cases([FakeCase("h2-sto-3g-rhf")], target, tolerances=Tolerances(),
                         on_start=lambda name: pytest.fail(f"case {name} started"), **kw)
    assert os.getcwd() == cwd
    assert not imported_here(stem)
    assert multiprocessing.active_children() == []
    return str(info.value), target


class TestLoadCheckInAChild:
    """The early load check imports a spec in a child process, never in the harness's."""

    def test_os_exit_at_import_is_a_load_error(self, capsys):
        """os._exit(0) at import: one line naming the exit code; what it printed is shown
        on stderr (the harness itself goes on and raises)."""
        error, target = check_fails("import_exits")
        assert error == f"plug-in '{target}': importing it ended the process (exit code 0)"
        assert capsys.readouterr() == ("", "import_exits: leaving now\n")

    def test_signal_at_import_is_named(self):
        error, target = check_fails("import_killed")
        assert error == f"plug-in '{target}': importing it ended the process (signal SIGKILL)"

    def test_slow_import_is_bounded_by_the_timeout(self):
        """A module sleeping 1000 s at import: the run's timeout (1 s) applies."""
        start = time.monotonic()
        error, target = check_fails("import_sleeps", timeout=1.0)
        assert error == f"plug-in '{target}': importing it took longer than 1 s"
        assert time.monotonic() - start < 8

    def test_keyboard_interrupt_at_import_is_a_load_error(self):
        """KeyboardInterrupt raised at import is not an interrupted run."""
        error, target = check_fails("import_interrupts")
        assert error == f"plug-in '{target}': importing it raised KeyboardInterrupt"

    def test_chdir_at_import_moves_neither_the_harness_nor_the_children(self, monkeypatch):
        """A module calling os.chdir at import, given by a relative spec: the harness's
        cwd stays, and each case child re-imports the spec from it (both cases pass)."""
        monkeypatch.chdir(FOLDER)
        out = runner.run_cases([FakeCase("h2-sto-3g-rhf"), FakeCase("h2-again")],
                               "import_chdirs.py:solve", tolerances=Tolerances(),
                               timeout=60.0)
        assert os.getcwd() == str(FOLDER)
        assert [c.error for c in out.cases] == [None, None]
        assert all(c.passed for c in out.cases)
        assert not imported_here("import_chdirs")

    def test_output_at_import_is_not_printed_by_the_harness(self, capsys):
        """A module printing at import: the harness process prints nothing of it (the
        case child prints it once, on its own output); the case passes."""
        cwd = os.getcwd()
        out = runner.run_cases([FakeCase("h2-sto-3g-rhf")], f"{FOLDER}/import_prints.py:solve",
                               tolerances=Tolerances(), timeout=30.0)
        assert out.passed and os.getcwd() == cwd
        assert capsys.readouterr() == ("", "")
        assert not imported_here("import_prints")

    def test_ordinary_bad_specs_keep_their_messages(self):
        """Missing attribute, missing file, not callable: the load errors as before."""
        cwd = os.getcwd()
        for function, message in [
                ("nosuch", f"{PLUGINS} has no attribute 'nosuch'"),
                ("NOT_CALLABLE", f"{PLUGINS}:NOT_CALLABLE is not callable (it is int)")]:
            with pytest.raises(PluginLoadError) as info:
                runner.run_cases([FakeCase("x")], spec(function), tolerances=Tolerances())
            assert str(info.value) == f"plug-in '{spec(function)}': {message}"
        with pytest.raises(PluginLoadError) as info:
            runner.check_plugin("no/such/file.py:solve")
        assert str(info.value) == ("plug-in 'no/such/file.py:solve': file not found: "
                                   "no/such/file.py")
        assert os.getcwd() == cwd

    def test_check_plugin_then_run_without_a_second_check(self):
        """check_plugin passes a good spec; plugin_checked=True skips the check, and a
        load failure in the case child is that case's one-line error (no traceback)."""
        runner.check_plugin(spec("constant"), timeout=30.0)
        target = f"{FOLDER}/import_interrupts.py:solve"
        out = runner.run_cases([FakeCase("h2-sto-3g-rhf")], target, tolerances=Tolerances(),
                               timeout=30.0, plugin_checked=True)
        assert out.cases[0].error == (f"plug-in '{target}': importing it raised "
                                      f"KeyboardInterrupt")

    def test_interrupt_during_the_check_is_an_interrupted_run(self):
        """Ctrl-C (the interrupt request) while a slow import is checked: an empty,
        interrupted outcome, promptly, the check child gone."""
        import threading

        timer = threading.Timer(0.5, runner.request_interrupt)
        timer.start()
        start = time.monotonic()
        out = runner.run_cases([FakeCase("x")], f"{FOLDER}/import_sleeps.py:solve",
                               tolerances=Tolerances(), timeout=60.0)
        timer.join()
        assert out.interrupted and out.cases == ()
        assert time.monotonic() - start < 8
        assert multiprocessing.active_children() == []


class Unsendable:
    """Cannot be pickled: its ``__reduce__`` raises an exception that cannot be printed."""

    def __reduce__(self):
        sys.path.insert(0, str(FOLDER))
        try:
            from unprintable import Unprintable
        finally:
            sys.path.remove(str(FOLDER))
        raise Unprintable("hidden")


class TestUnprintableExceptions:
    """Plug-in exceptions whose __str__ raises are reported in one line, not a traceback."""

    def test_unprintable_exception_is_named_with_its_line(self):
        cwd = os.getcwd()
        out = runner.run_cases([FakeCase("h2-sto-3g-rhf")],
                               f"{UNPRINTABLE}:raises_unprintable", tolerances=Tolerances(),
                               timeout=30.0)
        line = line_of('raise Unprintable("hidden")', UNPRINTABLE)
        assert out.cases[0].error == (f"Unprintable: <unprintable message> "
                                      f"(at {UNPRINTABLE}:{line} in raises_unprintable)")
        assert os.getcwd() == cwd

    def test_unprintable_exception_reading_the_return_value(self):
        cwd = os.getcwd()
        out = runner.run_cases([FakeCase("h2-sto-3g-rhf")], f"{UNPRINTABLE}:returns_booby",
                               tolerances=Tolerances(), timeout=30.0)
        assert out.cases[0].error == ("unreadable return value: Unprintable: "
                                      "<unprintable message>")
        assert os.getcwd() == cwd

    def test_describe_exception_without_traceback(self):
        class Mute(Exception):
            def __str__(self):
                raise ValueError("no")

        assert runner.describe_exception(Mute()) == "Mute: <unprintable message>"
        assert runner.describe_exception(ValueError("a\nb")) == "ValueError: a"

    def test_send_falls_back_to_a_one_line_error(self):
        """A message that cannot cross the closed channel (not plain data) is replaced by
        an error naming why."""
        from harness.run import channel

        mine, theirs = multiprocessing.Pipe()
        runner._send(mine, {"solution": {"energy": Unsendable()}, "seconds": 0.5},
                     "cannot send the plug-in's result")
        assert channel.receive(theirs, "case") == {
            "error": "cannot send the plug-in's result: ChannelError: a Unsendable cannot "
                     "cross", "seconds": 0.5}
        mine.close()
        theirs.close()


FORGES = PLUGINS.parent / "forges_channel.py"


class TestForgedMessages:
    """A plug-in that writes its own pickle into the result pipe (issue 14): the harness
    reads only the closed channel's plain data, so the pickle's code never runs here and
    the case fails with the reason."""

    @pytest.mark.parametrize("function", ["pickle_into_pipe", "raw_pickle_into_fd"])
    def test_a_pickled_message_fails_the_case_unread(self, function, tmp_path, monkeypatch):
        monkeypatch.chdir(tmp_path)  # the child works here; the pickle would write here
        out = runner.run_cases([FakeCase("h2-sto-3g-rhf")], f"{FORGES}:{function}",
                               tolerances=Tolerances(), timeout=30.0)
        (case,) = out.cases
        assert case.error == ("the plug-in's process sent a message the harness cannot "
                              "read: a pickle, not the channel's plain-data format (nothing "
                              "was unpickled)")
        assert not case.passed and not out.passed
        assert not (tmp_path / "forged-pickle-ran.txt").exists()

    def test_a_pickle_written_at_import_fails_the_load_check_unread(self, tmp_path,
                                                                    monkeypatch):
        monkeypatch.chdir(tmp_path)
        spec_ = f"{PLUGINS.parent / 'import_forges.py'}:solve"
        with pytest.raises(PluginLoadError) as info:
            runner.check_plugin(spec_, timeout=30.0)
        assert str(info.value) == (
            f"plug-in {spec_!r}: the load check failed: the plug-in's process sent a message "
            f"the harness cannot read: a pickle, not the channel's plain-data format "
            f"(nothing was unpickled)")
        assert not (tmp_path / "forged-pickle-ran.txt").exists()


def test_fork_server_started_ahead_serves_the_next_children():
    """start_fork_server (the command line calls it before reading its cases) brings the
    plug-in processes' fork server up in the background; a second call and the children
    that follow use the same server."""
    from multiprocessing import forkserver

    runner.start_fork_server()
    runner.start_fork_server()
    deadline = time.monotonic() + 60
    while forkserver._forkserver._forkserver_pid is None and time.monotonic() < deadline:
        time.sleep(0.05)
    pid = forkserver._forkserver._forkserver_pid
    assert pid is not None
    os.kill(pid, 0)  # alive
    runner.check_plugin("harness.testing.example_scf:solve", timeout=60)
    assert forkserver._forkserver._forkserver_pid == pid
