"""External codes through files (harness/run/external.py): the inputs written for them,
a Python and a C program run as separate processes, and the runner around them.
Coordinates in bohr (ångström in geometry.xyz), energies in Eh."""

from __future__ import annotations

import json
import os
import pickle
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
import commands  # noqa: E402
import solution_files as sf  # noqa: E402

from harness.contract.errors import HarnessError  # noqa: E402
from harness.verdict.judge import judge  # noqa: E402
from harness.run.external import (PROBLEM_FORMAT, CommandPlugin, CommandSetupError,  # noqa: E402
                              ExternalCodeError, stderr_excerpt, write_inputs)
from harness.contract.solution import extract  # noqa: E402

PY = sys.executable
LAB = f"{PY} {sf.LAB_CODE} --in {{problem}} --out {{solution}}"


def failed_checks(name, raw):
    from harness.catalogue.references import reference_for
    from harness.catalogue.cases import load_catalogue

    reference, _ = reference_for(load_catalogue().case(name))
    return [c.message for c in judge(sf.problem(name), extract(raw), reference).checks
            if c.passed is False]


class TestInputs:
    def test_problem_json(self, tmp_path):
        """problem.json carries the Problem's fields exactly (bohr, full precision)."""
        p = sf.problem("oh-sto-3g-uhf")
        paths = write_inputs(p, tmp_path)
        doc = json.loads(paths["problem"].read_text())
        assert doc["format"] == PROBLEM_FORMAT
        assert np.array_equal(doc["coordinates_bohr"], p.coordinates)
        assert (doc["n_alpha"], doc["n_beta"], doc["nao"]) == (5, 4, 6)
        assert doc["units"] == {"length": "bohr", "energy": "hartree"}
        assert doc["files"] == {"geometry": "geometry.xyz", "basis": "basis.nwchem",
                                "ao_order": "ao_order.txt", "solution": "solution.npz"}
        assert paths["ao_order"].read_text().splitlines() == doc["ao_labels"]
        assert doc["ao_labels"][1] == "0 O 2s"

    def test_geometry_xyz_in_angstrom(self, tmp_path):
        """geometry.xyz is standard XYZ in Å; read back it gives the bohr coordinates."""
        from harness.catalogue.cases import read_xyz

        p = sf.problem("water-sto-3g-rhf")
        numbers, coords, comment = read_xyz(write_inputs(p, tmp_path)["geometry"])
        assert numbers == (8, 1, 1)
        assert np.abs(coords - p.coordinates).max() < 1e-11
        assert comment.startswith("water-sto-3g-rhf units=angstrom")

    @pytest.mark.parametrize("name", ["water-cc-pvdz-rhf", "ammonia-6-31gd-rhf",
                                      "hydroxide-6-31+gd-rhf"])
    def test_basis_reads_back_to_the_same_overlap(self, tmp_path, name):
        """pyscf's NWChem parser reads basis.nwchem back to the reference's basis:
        same AO labels and an overlap equal to the last bit."""
        from pyscf import gto
        from pyscf.gto.basis import parse_nwchem

        p = sf.problem(name)
        path = write_inputs(p, tmp_path)["basis"]
        mol = p.to_pyscf()
        symbols = {mol.atom_symbol(i) for i in range(mol.natm)}
        basis = {s: parse_nwchem.load(str(path), s) for s in symbols}
        again = gto.M(atom=[(int(z), tuple(x)) for z, x in zip(p.numbers, p.coordinates)],
                      unit="Bohr", basis=basis, cart=p.cartesian, charge=p.charge,
                      spin=p.multiplicity - 1, verbose=0)
        assert again.ao_labels() == mol.ao_labels()
        assert np.array_equal(again.intor("int1e_ovlp"), mol.intor("int1e_ovlp"))


class TestCommandPlugin:
    @pytest.mark.parametrize("name", ["water-sto-3g-rhf", "oh-sto-3g-uhf", "nh2-sto-3g-rohf"])
    def test_lab_code_npz(self, name):
        """The example code run as a process through the files passes every check."""
        raw = CommandPlugin(LAB)(sf.problem(name))
        assert failed_checks(name, raw) == []
        assert raw["converged"] is True

    @pytest.mark.parametrize("out", ["solution.json", "solution.h5"])
    def test_solution_found_without_placeholder(self, tmp_path, out):
        """Without {solution}, the one solution.* file in the working directory is read."""
        result = sf.solved("h2-sto-3g-rhf")
        if out.endswith(".h5"):
            pytest.importorskip("h5py")
            prepared = sf.write_h5(tmp_path / out, result)
        else:
            prepared = sf.write_json(tmp_path / out, result)
        raw = CommandPlugin(f"{PY} {sf.BAD_CODE} copy --from {prepared} --out {out}")(
            sf.problem("h2-sto-3g-rhf"))
        assert failed_checks("h2-sto-3g-rhf", raw) == []

    def test_keep_and_scratch_root(self, tmp_path):
        prepared = sf.write_npz(tmp_path / "prepared.npz", sf.solved("h2-sto-3g-rhf"))
        plugin = CommandPlugin(f"{PY} {sf.BAD_CODE} copy --from {prepared} --out {{solution}}",
                               scratch_root=tmp_path / "scratch", keep=True)
        plugin(sf.problem("h2-sto-3g-rhf"))
        (folder,) = (tmp_path / "scratch").iterdir()
        assert folder.name.startswith("h2-sto-3g-rhf-")
        assert sorted(f.name for f in folder.iterdir()) == [
            "ao_order.txt", "basis.nwchem", "geometry.xyz", "problem.json", "solution.npz",
            "stderr.log", "stdout.log"]
        assert (folder / "stdout.log").read_text() == "copied prepared.npz\n"

    def test_scratch_removed_by_default(self, tmp_path):
        prepared = sf.write_npz(tmp_path / "prepared.npz", sf.solved("h2-sto-3g-rhf"))
        CommandPlugin(f"{PY} {sf.BAD_CODE} copy --from {prepared} --out {{solution}}",
                      scratch_root=tmp_path / "scratch")(sf.problem("h2-sto-3g-rhf"))
        assert list((tmp_path / "scratch").iterdir()) == []

    def test_relative_script_path(self, tmp_path, monkeypatch):
        """A relative path in the template names a file relative to where the harness
        started, although the command runs in the scratch directory."""
        prepared = sf.write_npz(tmp_path / "prepared.npz", sf.solved("h2-sto-3g-rhf"))
        monkeypatch.chdir(Path(__file__).resolve().parents[2])
        plugin = CommandPlugin(f"{PY} tests/external/bad_code.py copy --from {prepared} "
                               f"--out {{solution}}")
        assert plugin.words[1] == str(sf.BAD_CODE)
        assert failed_checks("h2-sto-3g-rhf", plugin(sf.problem("h2-sto-3g-rhf"))) == []

    @staticmethod
    def start_dir_with_script(tmp_path, monkeypatch):
        """A start directory holding run_mine.py (which checks that the problem.json it
        is given relatively is the scratch directory's, then copies a prepared h2
        solution to the path in its second argument); ``python`` on PATH is this venv's."""
        start = tmp_path / "start"
        start.mkdir()
        prepared = sf.write_npz(start / "prepared.npz", sf.solved("h2-sto-3g-rhf"))
        (start / "run_mine.py").write_text(
            "import json, shutil, sys\n"
            "doc = json.load(open(sys.argv[1]))\n"
            "assert doc['name'] == 'h2-sto-3g-rhf', doc['name']\n"
            f"shutil.copy({str(prepared)!r}, sys.argv[2])\n")
        monkeypatch.chdir(start)
        monkeypatch.setenv("PATH", os.pathsep.join([str(Path(PY).parent),
                                                    os.environ.get("PATH", "")]))
        return start

    def test_bare_script_name_relative_to_start_dir(self, tmp_path, monkeypatch):
        """"python run_mine.py {problem} {solution}" run from the script's directory: the
        script is found although the command runs in the scratch directory; "python"
        stays a bare name looked up on PATH."""
        start = self.start_dir_with_script(tmp_path, monkeypatch)
        plugin = CommandPlugin("python run_mine.py {problem} {solution}")
        assert plugin.words[:2] == ["python", str(start / "run_mine.py")]
        assert failed_checks("h2-sto-3g-rhf", plugin(sf.problem("h2-sto-3g-rhf"))) == []

    def test_scratch_file_names_stay_relative(self, tmp_path, monkeypatch):
        """problem.json and solution.npz in the template name the scratch directory's
        files even when files of those names lie in the start directory."""
        start = self.start_dir_with_script(tmp_path, monkeypatch)
        (start / "problem.json").write_text('{"name": "another-case"}')
        (start / "solution.npz").write_bytes(b"an old result")
        plugin = CommandPlugin("python run_mine.py problem.json solution.npz")
        assert plugin.words == ["python", str(start / "run_mine.py"), "problem.json",
                                "solution.npz"]
        assert failed_checks("h2-sto-3g-rhf", plugin(sf.problem("h2-sto-3g-rhf"))) == []
        assert (start / "solution.npz").read_bytes() == b"an old result"

    def test_program_in_start_dir_and_on_path(self, tmp_path, monkeypatch):
        """A bare program name that is a file in the start directory runs that file; one
        that is only a directory there (or absent) is looked up on PATH."""
        start = self.start_dir_with_script(tmp_path, monkeypatch)
        program = start / "my_scf"
        program.write_text(f"#!{PY}\n" + (start / "run_mine.py").read_text())
        program.chmod(0o755)
        plugin = CommandPlugin("my_scf {problem} {solution}")
        assert plugin.words[0] == str(program)
        assert failed_checks("h2-sto-3g-rhf", plugin(sf.problem("h2-sto-3g-rhf"))) == []
        (start / "python").mkdir()
        assert CommandPlugin("python run_mine.py").words[0] == "python"
        assert CommandPlugin("other_scf run_mine.py").words[0] == "other_scf"

    @pytest.mark.parametrize("template", ['"" {problem}', "'  ' {problem}"])
    def test_empty_program(self, template):
        """A template whose first word is empty is refused at construction (before,
        every case failed with "cannot start ''")."""
        with pytest.raises(CommandSetupError) as err:
            CommandPlugin(template)
        assert str(err.value) == (f"--command: the command {template!r} names no program "
                                  f"(its first word is empty)")
        assert isinstance(err.value, HarnessError) and err.value.field == "--command"

    def test_blank_command(self):
        with pytest.raises(CommandSetupError) as err:
            CommandPlugin("   ")
        assert str(err.value) == "--command: the command is empty"

    def test_scratch_root_not_a_directory(self, tmp_path):
        """A scratch root that is a file, or lies under one, is refused at construction."""
        (tmp_path / "somefile").write_text("x")
        with pytest.raises(CommandSetupError) as err:
            CommandPlugin(LAB, scratch_root=tmp_path / "somefile")
        assert str(err.value) == f"--scratch: {tmp_path / 'somefile'} exists and is not a directory"
        with pytest.raises(CommandSetupError) as err:
            CommandPlugin(LAB, scratch_root=tmp_path / "somefile" / "sub")
        assert str(err.value) == (f"--scratch: cannot create the directory "
                                  f"{tmp_path / 'somefile' / 'sub'} (Not a directory)")
        assert err.value.field == "--scratch"

    def test_scratch_root_made_at_construction(self, tmp_path):
        CommandPlugin(LAB, scratch_root=tmp_path / "a" / "b")
        assert (tmp_path / "a" / "b").is_dir()

    def test_scratch_root_gone_later(self, tmp_path):
        """A scratch root replaced by a file after construction fails the case in one
        line, not with a FileExistsError traceback."""
        plugin = CommandPlugin(LAB, scratch_root=tmp_path / "s")
        (tmp_path / "s").rmdir()
        (tmp_path / "s").write_text("x")
        with pytest.raises(ExternalCodeError) as err:
            plugin(sf.problem("h2-sto-3g-rhf"))
        assert str(err.value) == (f"cannot make a scratch directory in {tmp_path / 's'}: "
                                  f"File exists | stderr: (empty)")

    def test_pickles(self):
        """The plug-in survives the trip to the runner's child process (multiprocessing
        pickles it; this round trip is of our own object, never of a user's file)."""
        plugin = CommandPlugin(LAB, timeout=30)
        again = pickle.loads(pickle.dumps(plugin))  # our own bytes, not untrusted input
        assert again.words == plugin.words and again.timeout == 30.0

    def test_unknown_placeholder(self):
        with pytest.raises(HarnessError) as err:
            CommandPlugin("code --in {input}")
        assert str(err.value) == ("--command: unknown placeholder {input} (known: {problem}, "
                                  "{solution}, {geometry}, {basis}, {ao_order}, {dir})")

    def test_solution_name_outside_scratch(self):
        with pytest.raises(HarnessError) as err:
            CommandPlugin(LAB, solution="../x.npz")
        assert str(err.value).startswith("solution: the solution file '../x.npz' must be a "
                                         "plain name")

    def test_error_keeps_tails(self):
        with pytest.raises(ExternalCodeError) as err:
            CommandPlugin(f"{PY} {sf.BAD_CODE} chatty")(sf.problem("h2-sto-3g-rhf"))
        exc = err.value
        assert exc.returncode == 1 and exc.reason == "exited with status 1"
        assert exc.stderr_tail.splitlines()[-1] == "line 49"
        assert exc.stderr_tail.count("\n") == 50
        assert str(exc).endswith("line 49")
        assert len(str(exc).split(" | stderr: ")[1]) <= 200

    def test_stderr_excerpt(self):
        assert stderr_excerpt("") == "(empty)"
        assert stderr_excerpt("a\n\n  b   c \n") == "a / b c"
        long = stderr_excerpt("y" * 500)
        assert len(long) == 200 and long.startswith("…y")


@pytest.fixture(scope="session")
def c_program(tmp_path_factory):
    compiler = shutil.which("cc") or shutil.which("gcc")
    if compiler is None:
        pytest.skip("no C compiler (cc or gcc) on this machine")
    exe = tmp_path_factory.mktemp("c") / "rhf"
    subprocess.run([compiler, "-O2", "-o", str(exe), str(sf.C_SOURCE), "-lm"], check=True,
                   capture_output=True)
    return exe


class TestCompiledCode:
    @pytest.mark.parametrize("name", ["h2-sto-3g-rhf", "water-sto-3g-rhf"])
    def test_c_rhf_passes(self, c_program, name):
        """The C program (plain Roothaan iterations) passes every check, its energy
        agrees with the reference to 1e-9 Eh."""
        plugin = CommandPlugin(f"{PY} {sf.C_WRAPPER} --exe {c_program} --in {{problem}} "
                               f"--out {{solution}}", solution="solution.json")
        raw = plugin(sf.problem(name))
        assert failed_checks(name, raw) == []

    def test_c_code_refuses_open_shell(self, c_program):
        plugin = CommandPlugin(f"{PY} {sf.C_WRAPPER} --exe {c_program} --in {{problem}} "
                               f"--out {{solution}}", solution="solution.json")
        with pytest.raises(ExternalCodeError) as err:
            plugin(sf.problem("oh-sto-3g-uhf"))
        assert str(err.value) == ("exited with status 5 | stderr: c_wrapper: the C code does "
                                  "closed-shell RHF only, not uhf")


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/status").read_text()
    except FileNotFoundError:
        return False
    return "State:\tZ" not in state


@pytest.mark.parametrize("status", [0, 3])
def test_a_detached_grandchild_of_a_command_is_killed(tmp_path, status):
    """``sh -c 'sleep 97 & …'``: the shell exits (with a solution file or with status 3),
    the orphaned sleep stays in the command's process group and is killed with it."""
    prepared = sf.write_npz(tmp_path / "prepared.npz", sf.solved("h2-sto-3g-rhf"))
    pidfile = tmp_path / "sleep.pid"
    plugin = CommandPlugin(f"sh -c 'sleep 97 & echo $! > {pidfile}; cp {prepared} "
                           f"{{solution}}; exit {status}'")
    try:
        if status:
            with pytest.raises(ExternalCodeError, match="exited with status 3"):
                plugin(sf.problem("h2-sto-3g-rhf"))
        else:
            assert plugin(sf.problem("h2-sto-3g-rhf"))["energy"] < 0
        pid = int(pidfile.read_text())
        deadline = time.monotonic() + 5
        while _alive(pid) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not _alive(pid), f"sleep 97 (pid {pid}) outlived its command"
    finally:
        if pidfile.exists() and _alive(int(pidfile.read_text())):
            os.kill(int(pidfile.read_text()), 9)


class TestThroughTheRunner:
    SPEC = f"{Path(commands.__file__).resolve()}:{{}}"

    def outcome(self, function, timeout=60.0):
        from harness.catalogue.cases import load_catalogue
        from harness.run.runner import run_cases
        from harness.checks.tolerances import Tolerances

        cases = [load_catalogue().case("h2-sto-3g-rhf")]
        return run_cases(cases, self.SPEC.format(function), tolerances=Tolerances(),
                         timeout=timeout)

    def run(self, function, timeout=60.0):
        return self.outcome(function, timeout).cases[0]

    def test_passes(self):
        result = self.run("lab_code")
        assert result.passed and result.error is None

    @pytest.mark.parametrize("function, prefix", [
        ("exits_3", "ExternalCodeError: exited with status 3 | stderr: bad_code: exiting with "
                    "status 3"),
        ("segfaults", "ExternalCodeError: killed by signal SIGSEGV | stderr: "),
        ("writes_nothing", "ExternalCodeError: wrote no solution file (expected one of "
                           "solution.molden, solution.npz, solution.json, solution.h5, "
                           "solution.hdf5 in its working directory) | stderr: (empty)"),
    ])
    def test_failures_are_one_line_case_errors(self, function, prefix):
        result = self.run(function)
        assert not result.passed
        assert result.error.startswith(prefix)
        assert "\n" not in result.error
        assert "(at " not in result.error  # no harness frame: the message says what failed

    @staticmethod
    def forget_old_pidfiles():
        commands.SCRATCH.mkdir(parents=True, exist_ok=True)
        for old in commands.SCRATCH.glob("*.pid"):
            old.unlink()

    @staticmethod
    def assert_nothing_left():
        """The sleeper's program is gone and so is its scratch folder (``<dir>.pid``
        stands beside it)."""
        (pidfile,) = commands.SCRATCH.glob("h2-sto-3g-rhf-*.pid")
        pid = int(pidfile.read_text())
        deadline = time.monotonic() + 5
        while _alive(pid) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not _alive(pid)
        assert not pidfile.with_suffix("").exists()
        pidfile.unlink()

    def test_timeout_leaves_nothing_running(self):
        """The harness's per-case timeout stops the plug-in's process, which kills the
        external code and removes its scratch folder: nothing is left behind."""
        self.forget_old_pidfiles()
        result = self.run("sleeper", timeout=3.0)
        assert result.error == "timed out after 3.0 s"
        self.assert_nothing_left()

    def test_interrupted_run_leaves_nothing_running(self):
        """Ctrl-C while the external code runs: the run stops, the program is killed
        and its scratch folder removed."""
        import threading

        from harness.run import runner
        self.forget_old_pidfiles()

        def interrupt_once_started():
            deadline = time.monotonic() + 30
            while not list(commands.SCRATCH.glob("*.pid")) and time.monotonic() < deadline:
                time.sleep(0.05)
            runner.request_interrupt()

        threading.Thread(target=interrupt_once_started, daemon=True).start()
        outcome = self.outcome("sleeper", timeout=60.0)
        assert outcome.interrupted and outcome.cases == ()
        self.assert_nothing_left()
