"""The command line run as a user runs it: ``python -m harness`` in a scratch folder.

Exit codes, the verbatim one-line errors and the JSON report are asserted. Plug-ins
come from tests/cli/plugins (copied into the scratch folder, so specs are relative)
or are written by the test. Cases: the smoke suite's tiny ones.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
PLUGINS = Path(__file__).resolve().parent / "plugins"
ERROR = "scf-harness: error: "
H2 = "h2-sto-3g-rhf"
WATER = "water-sto-3g-rhf"


def environment() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), env.get("PYTHONPATH")) if p)
    env["NO_COLOR"] = "1"
    env.pop("COLUMNS", None)
    return env


def cli(*args: str, cwd: Path, timeout: float = 120) -> subprocess.CompletedProcess:
    """Run ``python -m harness ARGS`` in ``cwd``; return the completed process."""
    return subprocess.run([sys.executable, "-m", "harness", *args], cwd=cwd, env=environment(),
                          capture_output=True, text=True, timeout=timeout)


def start(*args: str, cwd: Path) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "harness", *args], cwd=cwd,
                            env=environment(), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)


def line_of(text: str, path: Path) -> int:
    """The 1-based line of ``path`` containing ``text`` (no line number hard-coded)."""
    for number, line in enumerate(path.read_text().splitlines(), start=1):
        if text in line:
            return number
    raise AssertionError(f"{text!r} not in {path}")


@pytest.fixture
def work(tmp_path) -> Path:
    """A scratch folder holding a copy of the throw-away plug-ins."""
    shutil.copy(PLUGINS / "misbehaving.py", tmp_path / "misbehaving.py")
    (tmp_path / "broken.py").write_text("def solve(problem):\n    x = = 1\n")
    (tmp_path / "needs_missing.py").write_text(
        "import no_such_dependency_xyz\n\n\ndef solve(problem):\n    return {}\n")
    return tmp_path.resolve()


def only_error_line(result: subprocess.CompletedProcess) -> str:
    """The single stderr line of a usage error (asserting there is exactly one)."""
    lines = result.stderr.splitlines()
    assert len(lines) == 1, result.stderr
    assert "Traceback" not in result.stderr
    return lines[0]


def read_json(path: Path) -> dict:
    return json.loads(path.read_text())


class TestUsageErrors:
    @pytest.mark.parametrize("spec, message", [
        ("nocolon", "plug-in 'nocolon': no colon; expected MODULE:FUNCTION or "
                    "path/to/file.py:FUNCTION"),
        (":solve", "plug-in ':solve': nothing before the colon; expected MODULE:FUNCTION or "
                   "path/to/file.py:FUNCTION"),
        ("misbehaving:", "plug-in 'misbehaving:': no function after the colon; expected "
                         "MODULE:FUNCTION or path/to/file.py:FUNCTION"),
        ("no_such_module_xyz:solve", "plug-in 'no_such_module_xyz:solve': module "
                                     "'no_such_module_xyz' not found (searched the current "
                                     "directory and sys.path)"),
        ("missing.py:solve", "plug-in 'missing.py:solve': file not found: missing.py"),
        ("broken.py:solve", "plug-in 'broken.py:solve': importing broken.py failed: "
                            "SyntaxError: invalid syntax (broken.py, line 2)"),
        ("needs_missing.py:solve", "plug-in 'needs_missing.py:solve': importing "
                                   "needs_missing.py failed: ModuleNotFoundError: No module "
                                   "named 'no_such_dependency_xyz'"),
        ("needs_missing:solve", "plug-in 'needs_missing:solve': importing needs_missing "
                                "failed: ModuleNotFoundError: No module named "
                                "'no_such_dependency_xyz'"),
        ("misbehaving:nosuch", "plug-in 'misbehaving:nosuch': misbehaving has no attribute "
                               "'nosuch'"),
        ("misbehaving.py:NOT_CALLABLE", "plug-in 'misbehaving.py:NOT_CALLABLE': "
                                        "misbehaving.py:NOT_CALLABLE is not callable (it is "
                                        "int)"),
    ])
    def test_bad_plugin_spec(self, work, spec, message):
        """Each malformed or unloadable plug-in spec: exit 2 and one exact line."""
        result = cli("certify", spec, "--case", H2, cwd=work)
        assert result.returncode == 2
        assert only_error_line(result) == ERROR + message
        assert result.stdout == ""

    def test_unknown_suite(self, work):
        """An unknown suite: exit 2, one line naming the closest suite."""
        result = cli("certify", "--suite", "smok", cwd=work)
        assert result.returncode == 2
        assert only_error_line(result) == ERROR + "suite: unknown suite 'smok' (closest: smoke)"

    def test_unknown_case(self, work):
        """An unknown case: exit 2, one line starting with the case's name."""
        result = cli("certify", "--case", "no-such-case", cwd=work)
        assert result.returncode == 2
        assert only_error_line(result).startswith(ERROR + "case: unknown case 'no-such-case' (")

    @pytest.mark.parametrize("tol, message", [
        ("foo=1", "--tol: unknown check 'foo' (known: basis, well-formed, overlap, "
                  "orthonormality, idempotency, "
                  "electron-count, density-consistency, stationarity, self-consistency, "
                  "roothaan-hall, energy-consistency, reference-energy, aufbau, stability, "
                  "spin-squared, energy-error-bound, kinetic, "
                  "nuclear-attraction, core-hamiltonian, overlap-definite, kinetic-definite, "
                  "two-electron, two-electron-symmetry, two-electron-schwarz, "
                  "two-electron-definite, history)"),
        ("converged-flag=1", "--tol: check 'converged-flag' has no tolerance (a flag: "
                             "nothing to tolerate)"),
        ("stationarity", "--tol: expected NAME=VALUE, got 'stationarity'"),
        ("stationarity=abc", "--tol: tolerance for stationarity must be a number, got 'abc'"),
        ("stationarity=-1", "--tol: tolerance for stationarity must be positive and finite, "
                            "got '-1'"),
    ])
    def test_bad_tolerance(self, work, tol, message):
        """A bad --tol: exit 2 and one exact line."""
        result = cli("certify", "--case", H2, "--tol", tol, cwd=work)
        assert result.returncode == 2
        assert only_error_line(result) == ERROR + message

    @pytest.mark.parametrize("args, message", [
        (["--timeout", "-1"], "argument --timeout: expected a positive number, got '-1' "
                              "(see 'scf-harness certify --help')"),
        (["--jobs", "0"], "argument --jobs: expected a positive integer, got '0' "
                          "(see 'scf-harness certify --help')"),
        (["--convergence", "2"], "argument --convergence: expected a number in (0, 1), got "
                                 "'2' (see 'scf-harness certify --help')"),
        (["--bogus"], "unrecognized arguments: --bogus (see 'scf-harness --help')"),
        (["--cases-file", "nope.toml"], "--cases-file: file not found: nope.toml"),
    ])
    def test_bad_options(self, work, args, message):
        """Bad option values: exit 2 and one exact line, no usage block."""
        result = cli("certify", *args, cwd=work)
        assert result.returncode == 2
        assert only_error_line(result) == ERROR + message

    def test_unreadable_cases_file(self, work):
        """A cases file that is not TOML: exit 2 and one line naming the file."""
        (work / "mine.toml").write_text("[[case]\nname = \n")
        result = cli("certify", "--cases-file", "mine.toml", cwd=work)
        assert result.returncode == 2
        assert "mine.toml" in only_error_line(result)

    def test_no_command_shows_help(self, work):
        """No subcommand: help on stderr, exit 2."""
        result = cli(cwd=work)
        assert result.returncode == 2 and "certify" in result.stderr


class TestVersion:
    def test_version(self, work):
        """--version prints the harness's version, known from the project."""
        import tomllib

        version = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]["version"]
        result = cli("--version", cwd=work)
        assert result.returncode == 0
        assert result.stdout == f"scf-harness {version}\n"


class TestMisbehavingPlugins:
    def test_exception_fails_case_and_run_goes_on(self, work):
        """The plug-in raises on the first case: that case names the exception and line;
        the next case still runs, with its checks."""
        result = cli("certify", "misbehaving.py:raises_on_first", "--case", H2, "--case", WATER,
                     "--json", "out.json", cwd=work)
        assert result.returncode == 1, result.stderr
        data = read_json(work / "out.json")
        first, second = data["cases"]
        line = line_of("raise ValueError", work / "misbehaving.py")
        assert first["error"] == (f"ValueError: planted failure on {H2} "
                                  f"(at {work / 'misbehaving.py'}:{line} in raises_on_first)")
        assert first["passed"] is False
        assert second["name"] == WATER and second["error"] is None
        assert second["passed"] is True and len(second["checks"]) > 0
        assert f"✗ {H2}" in result.stdout and f"✓ {WATER}" in result.stdout
        assert result.stdout.splitlines()[-1] == "1 passed, 1 failed"

    def test_a_pickle_written_into_the_result_pipe_fails_the_case_unread(self, work):
        """A plug-in that writes its own pickled message into the result pipe and calls
        os._exit(0): the case fails with the reason, exit status 1, and the pickle's code
        (creating a file in the harness's folder) never ran."""
        shutil.copy(PLUGINS / "forges_channel.py", work / "forges_channel.py")
        result = cli("certify", "forges_channel.py:pickle_into_pipe", "--case", H2,
                     "--json", "out.json", cwd=work)
        assert result.returncode == 1, result.stdout + result.stderr
        assert read_json(work / "out.json")["cases"][0]["error"] == (
            "the plug-in's process sent a message the harness cannot read: a pickle, not "
            "the channel's plain-data format (nothing was unpickled)")
        assert not (work / "forged-pickle-ran.txt").exists()
        assert result.stdout.splitlines()[-1] == "0 passed, 1 failed"

    def test_timeout(self, work):
        """A plug-in sleeping past --timeout 2 fails 'timed out after 2.0 s', promptly."""
        begin = time.monotonic()
        result = cli("certify", "misbehaving:sleeps", "--case", H2, "--timeout", "2",
                     "--json", "out.json", cwd=work)
        took = time.monotonic() - begin
        assert result.returncode == 1
        assert read_json(work / "out.json")["cases"][0]["error"] == "timed out after 2.0 s"
        assert took < 20, took

    def test_segfault(self, work):
        """A plug-in killed by SIGSEGV fails its case, the signal named; the harness lives."""
        result = cli("certify", "misbehaving:segfaults", "--case", H2, "--json", "out.json",
                     cwd=work)
        assert result.returncode == 1
        case = read_json(work / "out.json")["cases"][0]
        assert case["error"] == "plug-in process died from SIGSEGV without sending a result"
        assert result.stdout.splitlines()[-1] == "0 passed, 1 failed"

    def test_sys_exit_does_not_set_the_harness_exit_code(self, work):
        """sys.exit(4) in a plug-in fails the case; the harness exits 1, not 4."""
        result = cli("certify", "misbehaving:calls_sys_exit", "--case", H2, "--json", "out.json",
                     cwd=work)
        assert result.returncode == 1
        error = read_json(work / "out.json")["cases"][0]["error"]
        assert error.startswith("SystemExit: 4 (at ") and error.endswith(" in calls_sys_exit)")

    def test_string_return(self, work):
        """A string return value fails the case with extract's TypeError message."""
        result = cli("certify", "misbehaving:returns_string", "--case", H2, "--json", "out.json",
                     cwd=work)
        assert result.returncode == 1
        assert read_json(work / "out.json")["cases"][0]["error"] == (
            "unreadable return value: the plug-in returned str, not a mapping with the keys "
            "energy, coefficients, occupations")

    def test_missing_keys(self, work):
        """A dict without the required keys fails well-formed; later checks are skipped."""
        result = cli("certify", "misbehaving:missing_keys", "--case", H2, "--json", "out.json",
                     cwd=work)
        assert result.returncode == 1
        case = read_json(work / "out.json")["cases"][0]
        assert case["error"] is None
        checks = {c["name"]: c for c in case["checks"]}
        assert checks["well-formed"]["passed"] is False
        assert "coefficients" in checks["well-formed"]["message"]
        # "basis" runs before well-formed: with no overlap reported it is not applicable.
        assert checks["basis"]["status"] == "not applicable"
        assert all(c["status"] == "skipped" for name, c in checks.items()
                   if name not in ("well-formed", "basis"))


class TestInterruption:
    def wait_for_lines(self, path: Path, n: int, proc: subprocess.Popen, limit: float = 60):
        deadline = time.monotonic() + limit
        while time.monotonic() < deadline:
            if path.exists() and len(path.read_text().splitlines()) >= n:
                return
            if proc.poll() is not None:
                raise AssertionError(f"harness exited early: {proc.communicate()}")
            time.sleep(0.1)
        proc.kill()
        raise AssertionError("no finished case appeared in the partial file")

    def test_lost_interrupt_prints_no_traceback_and_sets_the_flag(self, capsys):
        """A signal landing in a finaliser: its KeyboardInterrupt is dropped silently
        (other unraisable errors still reach the previous hook) and the run loop's
        flag is set."""
        from types import SimpleNamespace

        from harness.ui import cli

        from harness.run import runner
        seen = []

        def record(info):
            seen.append(info)

        before = sys.unraisablehook
        sys.unraisablehook = record
        try:
            with cli._signals_as_interrupt():
                sys.unraisablehook(SimpleNamespace(exc_value=KeyboardInterrupt()))
                other = SimpleNamespace(exc_value=ValueError("x"))
                sys.unraisablehook(other)
                with pytest.raises(KeyboardInterrupt):
                    signal.getsignal(signal.SIGTERM)(signal.SIGTERM, None)
                assert runner._interrupt.is_set()
            assert sys.unraisablehook is record
        finally:
            sys.unraisablehook = before
            runner._interrupt.clear()
        assert seen == [other]

    @pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
    def test_interrupt_writes_finished_cases(self, work, sig):
        """Ctrl-C (or SIGTERM) mid-run: exit 1, the JSON says interrupted and keeps the
        finished case; the partial file is then removed."""
        proc = start("certify", "misbehaving:sleeps_after_first", "--case", H2, "--case", WATER,
                     "--json", "out.json", cwd=work)
        partial = work / "out.json.partial.jsonl"
        self.wait_for_lines(partial, 1, proc)
        proc.send_signal(sig)
        out, err = proc.communicate(timeout=30)
        assert proc.returncode == 1, err
        data = read_json(work / "out.json")
        assert data["interrupted"] is True and data["passed"] is False
        assert [c["name"] for c in data["cases"]] == [H2]
        assert not partial.exists()
        assert out.splitlines()[-1] in ("1 passed, 0 failed", "0 passed, 1 failed")

    def test_killed_run_keeps_partial_file(self, work):
        """A run killed outright (SIGKILL) leaves the finished cases in the partial file."""
        proc = start("certify", "misbehaving:sleeps_after_first", "--case", H2, "--case", WATER,
                     "--json", "out.json", cwd=work)
        partial = work / "out.json.partial.jsonl"
        self.wait_for_lines(partial, 1, proc)
        proc.kill()
        proc.communicate(timeout=30)
        lines = [json.loads(x) for x in partial.read_text().splitlines()]
        assert [x["name"] for x in lines] == [H2]
        assert not (work / "out.json").exists()


class TestGoodRuns:
    def verdicts(self, data: dict):
        return [(c["name"], c["passed"], [(k["name"], k["status"]) for k in c["checks"]])
                for c in data["cases"]]

    def test_example_passes_smoke(self, work):
        """The bundled example code passes the smoke suite: exit 0, JSON says so."""
        result = cli("certify", "--json", "out.json", cwd=work)
        assert result.returncode == 0, result.stdout + result.stderr
        data = read_json(work / "out.json")
        assert data["passed"] is True and data["suites"] == ["smoke"]
        assert data["plugin"] == "harness.testing.example_scf:solve"
        assert data["units"] == {"energy": "hartree", "length": "bohr", "time": "second"}
        n = len(data["cases"])
        assert n >= 3 and result.stdout.splitlines()[-1] == f"{n} passed, 0 failed"
        assert all(c["reference_source"] == "stored" for c in data["cases"])
        assert not (work / "out.json.partial.jsonl").exists()

    @pytest.mark.slow  # 10 s measured (two cores shared with other jobs)
    def test_jobs_two_gives_the_same_verdicts(self, work):
        """--jobs 2 and --jobs 1 give the same verdict for every case and check."""
        one = cli("certify", "--jobs", "1", "--json", "one.json", cwd=work)
        two = cli("certify", "--jobs", "2", "--json", "two.json", cwd=work)
        assert one.returncode == two.returncode
        assert self.verdicts(read_json(work / "one.json")) == \
            self.verdicts(read_json(work / "two.json"))

    def test_tolerance_override_can_fail_a_case(self, work):
        """--tol orthonormality=1e-30 (below rounding) fails the case on that check."""
        result = cli("certify", "--case", H2, "--tol", "orthonormality=1e-30", "--json",
                     "out.json", cwd=work)
        case = read_json(work / "out.json")["cases"][0]
        checks = {c["name"]: c for c in case["checks"]}
        value = checks["orthonormality"]["value"]
        assert checks["orthonormality"]["tolerance"] == 1e-30
        assert (result.returncode == 1) == (value > 1e-30)
        assert checks["orthonormality"]["passed"] is (value <= 1e-30)

    def test_quiet(self, work):
        """--quiet prints only the summary for a passing run."""
        result = cli("certify", "--case", H2, "--quiet", cwd=work)
        assert result.stdout.splitlines() == ["1 passed, 0 failed"], result.stdout


class TestOtherCommands:
    def test_cases_lists_the_smoke_suite(self, work):
        """`cases --suite smoke` lists the smoke cases with method and basis."""
        result = cli("cases", "--suite", "smoke", cwd=work)
        assert result.returncode == 0
        rows = [line.split() for line in result.stdout.splitlines()]
        h2 = next(r for r in rows if r and r[0] == H2)
        assert h2[1:4] == ["rhf", "sto-3g", "2"]  # H2/STO-3G has two basis functions

    def test_cases_unknown_suite(self, work):
        """`cases --suite nope`: exit 2, one line."""
        result = cli("cases", "--suite", "nope", cwd=work)
        assert result.returncode == 2
        assert only_error_line(result).startswith(ERROR + "suite: unknown suite 'nope'")

    def test_references_verify_one_case(self, work):
        """`references verify --case h2-sto-3g-rhf`: the stored reference matches."""
        result = cli("references", "verify", "--case", H2, cwd=work)
        assert result.returncode == 0, result.stdout + result.stderr
        assert result.stdout.splitlines()[0].startswith(f"{H2}: ok")
        assert result.stdout.splitlines()[-1] == "1 ok, 0 mismatched"

    def test_references_verify_mismatch_exits_1(self, work, tmp_path_factory):
        """A tampered stored reference makes verify print MISMATCH and exit 1."""
        from harness.catalogue.cases import default_reference_dir

        copy = tmp_path_factory.mktemp("refs") / "data"
        shutil.copytree(default_reference_dir() / "data", copy)
        stored = copy / f"{H2}.json"
        data = json.loads(stored.read_text())
        data["input_hash"] = "sha256:" + "0" * 64
        stored.write_text(json.dumps(data))
        result = cli("references", "verify", "--case", H2, "--references", str(copy), cwd=work)
        assert result.returncode == 1, result.stdout + result.stderr
        assert result.stdout.splitlines()[0].startswith(f"{H2}: MISMATCH")
