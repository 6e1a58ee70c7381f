"""The command-line options for external codes, result files and certificates, run as
a user runs them (``python -m harness`` in a scratch folder).

These describe the behaviour the CLI must have once it is wired (harness/ui/cli.py):

* ``certify --command TEMPLATE [--scratch DIR] [--keep-scratch] [--certificate FILE]``
  runs an external code per case (harness.run.external.CommandPlugin); PLUGIN and
  --command together are a usage error (exit 2).
* ``check-result FILE --geometry XYZ --basis B --method M [--charge Q]
  [--multiplicity M] [--cartesian] [--name N] [--energy-file F] [--convergence X]
  [--json FILE] [--tol CHECK=V] [--references DIR] [--certificate FILE]`` checks a
  solution file (harness.run.files.check_result); exit 0 passed, 1 failed (also for a
  malformed file: the case fails with its one-line reason), 2 for usage errors (a
  missing solution file or geometry, bad options).
* ``verify-certificate FILE [--recompute] [--markdown OUT]``: exit 0 when intact (and
  reproduced), 1 with one line per issue otherwise, 2 when FILE does not exist.

Until the lead wires these options the tests skip (see ``wired``).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
import solution_files as sf  # noqa: E402

REPO = Path(__file__).resolve().parents[2]
ERROR = "scf-harness: error: "
H2 = "h2-sto-3g-rhf"
PY = sys.executable


def _wired() -> bool:
    from harness.ui.cli import build_parser

    parser = build_parser()
    commands = parser._subparsers._group_actions[0].choices  # noqa: SLF001
    if not {"check-result", "verify-certificate"} <= set(commands):
        return False
    certify = commands["certify"]
    return {"--command", "--certificate"} <= set(certify._option_string_actions)  # noqa: SLF001


pytestmark = pytest.mark.skipif(not _wired(), reason="certify --command, check-result and "
                                "verify-certificate are not wired into harness/ui/cli.py yet")


def cli(*args: str, cwd: Path, timeout: float = 180) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PATH"] = os.pathsep.join(p for p in (str(Path(PY).parent), env.get("PATH")) if p)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), env.get("PYTHONPATH")) if p)
    env["NO_COLOR"] = "1"
    return subprocess.run([PY, "-m", "harness", *args], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=timeout)


def lab_command() -> str:
    return f"{PY} {sf.LAB_CODE} --in {{problem}} --out {{solution}}"


class TestCertifyCommand:
    def test_external_code_passes(self, tmp_path):
        run = cli("certify", "--command", lab_command(), "--case", H2, "--json", "r.json",
                  cwd=tmp_path)
        assert run.returncode == 0, run.stderr
        assert "1 passed, 0 failed" in run.stdout
        report = json.loads((tmp_path / "r.json").read_text())
        assert report["cases"][0]["name"] == H2 and report["cases"][0]["passed"] is True

    def test_failing_code_fails_the_case(self, tmp_path):
        run = cli("certify", "--command", f"{PY} {sf.BAD_CODE} exit3", "--case", H2,
                  cwd=tmp_path)
        assert run.returncode == 1
        assert "exited with status 3 | stderr: bad_code: exiting with status 3" in run.stdout
        assert "Traceback" not in run.stdout + run.stderr

    def test_keep_scratch(self, tmp_path):
        run = cli("certify", "--command", lab_command(), "--case", H2, "--scratch", "work",
                  "--keep-scratch", cwd=tmp_path)
        assert run.returncode == 0, run.stderr
        (folder,) = (tmp_path / "work").iterdir()
        assert (folder / "problem.json").is_file() and (folder / "solution.npz").is_file()

    def test_plugin_and_command_together(self, tmp_path):
        run = cli("certify", "harness.testing.example_scf:solve", "--command", lab_command(),
                  "--case", H2, cwd=tmp_path)
        assert run.returncode == 2
        assert run.stderr.startswith(ERROR) and run.stderr.count("\n") == 1

    def test_unknown_placeholder(self, tmp_path):
        run = cli("certify", "--command", "code --in {input}", "--case", H2, cwd=tmp_path)
        assert run.returncode == 2
        assert run.stderr == (f"{ERROR}--command: unknown placeholder {{input}} (known: "
                              "{problem}, {solution}, {geometry}, {basis}, {ao_order}, {dir})\n")


    def test_readme_example_relative_script(self, tmp_path):
        """README's own example, "python run_mine.py {problem}", run from the script's
        folder: the script is found (relative to where the harness started), writes
        solution.npz in its working directory (the scratch folder), and the case passes."""
        sf.write_npz(tmp_path / "prepared.npz", sf.solved(H2))
        (tmp_path / "run_mine.py").write_text(
            "import json, shutil, sys\n"
            "assert json.load(open(sys.argv[1]))['name'] == 'h2-sto-3g-rhf'\n"
            f"shutil.copy({str(tmp_path / 'prepared.npz')!r}, 'solution.npz')\n")
        run = cli("certify", "--command", "python run_mine.py {problem}", "--case", H2,
                  cwd=tmp_path)
        assert run.returncode == 0, run.stdout + run.stderr
        assert "1 passed, 0 failed" in run.stdout
        assert not (tmp_path / "solution.npz").exists()

    @pytest.mark.parametrize("template", ['""', "'' {problem}"])
    def test_command_without_program(self, tmp_path, template):
        run = cli("certify", "--command", template, "--case", H2, cwd=tmp_path)
        assert run.returncode == 2
        assert run.stderr == (f"{ERROR}--command: the command {template!r} names no program "
                              f"(its first word is empty)\n")

    def test_scratch_is_a_file(self, tmp_path):
        (tmp_path / "somefile").write_text("x")
        run = cli("certify", "--command", lab_command(), "--case", H2, "--scratch", "somefile",
                  cwd=tmp_path)
        assert run.returncode == 2
        assert run.stderr == (f"{ERROR}--scratch: {(tmp_path / 'somefile').resolve()} exists "
                              f"and is not a directory\n")

    def test_scratch_cannot_be_created(self, tmp_path):
        (tmp_path / "somefile").write_text("x")
        run = cli("certify", "--command", lab_command(), "--case", H2, "--scratch",
                  "somefile/sub", cwd=tmp_path)
        assert run.returncode == 2
        assert run.stderr == (f"{ERROR}--scratch: cannot create the directory "
                              f"{(tmp_path / 'somefile' / 'sub').resolve()} (Not a directory)\n")


class TestCheckResult:
    def water_xyz(self):
        from harness.catalogue.cases import load_catalogue

        return load_catalogue().case("water-sto-3g-rhf").geometry_file

    def test_passes(self, tmp_path):
        sf.write_npz(tmp_path / "s.npz", sf.solved("water-sto-3g-rhf"))
        run = cli("check-result", "s.npz", "--geometry", self.water_xyz(), "--basis", "sto-3g",
                  "--method", "rhf", "--json", "r.json", cwd=tmp_path)
        assert run.returncode == 0, run.stderr
        report = json.loads((tmp_path / "r.json").read_text())
        case = report["cases"][0]
        assert case["name"] == "water-crawford-sto-3g-rhf" and case["passed"] is True
        assert {c["name"]: c["passed"] for c in case["checks"]}["reference-energy"] is True

    def test_molden_with_energy_file(self, tmp_path):
        p = sf.problem("water-sto-3g-rhf")
        sf.write_molden(tmp_path / "orb.molden", p.to_pyscf(), sf.solved("water-sto-3g-rhf"))
        (tmp_path / "orb.json").rename(tmp_path / "energy.json")
        run = cli("check-result", "orb.molden", "--energy-file", "energy.json", "--geometry",
                  self.water_xyz(), "--basis", "sto-3g", "--method", "rhf", cwd=tmp_path)
        assert run.returncode == 0, run.stdout + run.stderr

    def test_malformed_file_fails_the_case(self, tmp_path):
        (tmp_path / "s.npz").write_text("not a zip")
        run = cli("check-result", "s.npz", "--geometry", self.water_xyz(), "--basis", "sto-3g",
                  "--method", "rhf", cwd=tmp_path)
        assert run.returncode == 1
        assert "s.npz: not a readable .npz archive, truncated or corrupt (BadZipFile)" in run.stdout

    def test_molden_without_energy_file(self, tmp_path):
        """The missing energy file is named with the CLI's option, not only the Python
        keyword."""
        p = sf.problem("water-sto-3g-rhf")
        sf.write_molden(tmp_path / "orb.molden", p.to_pyscf(), sf.solved("water-sto-3g-rhf"),
                        energy=False)
        run = cli("check-result", "orb.molden", "--geometry", self.water_xyz(), "--basis",
                  "sto-3g", "--method", "rhf", cwd=tmp_path)
        assert run.returncode == 1
        assert ("orb.molden: energy: needs its energy in a JSON file: orb.json not found (give "
                "the energy file: --energy-file, or energy_file= from Python)") in run.stdout

    def test_missing_file_is_a_usage_error(self, tmp_path):
        run = cli("check-result", "none.npz", "--geometry", self.water_xyz(), "--basis",
                  "sto-3g", "--method", "rhf", cwd=tmp_path)
        assert run.returncode == 2
        assert run.stderr == f"{ERROR}none.npz: file not found\n"


class TestCertificates:
    def test_write_verify_edit(self, tmp_path):
        run = cli("certify", "--case", H2, "--certificate", "cert.json", cwd=tmp_path)
        assert run.returncode == 0, run.stderr
        assert (tmp_path / "cert.solutions.npz").is_file()
        ok = cli("verify-certificate", "cert.json", "--markdown", "summary.md", cwd=tmp_path)
        assert ok.returncode == 0 and "intact" in ok.stdout
        assert "| h2-sto-3g-rhf | rhf/sto-3g |" in (tmp_path / "summary.md").read_text()
        again = cli("verify-certificate", "cert.json", "--recompute", cwd=tmp_path)
        assert again.returncode == 0 and "intact and reproduced" in again.stdout

        data = json.loads((tmp_path / "cert.json").read_text())
        data["cases"][0]["energy"] -= 1e-7
        (tmp_path / "cert.json").write_text(json.dumps(data))
        bad = cli("verify-certificate", "cert.json", cwd=tmp_path)
        assert bad.returncode == 1
        assert "cases/h2-sto-3g-rhf/energy: edited after the certificate was made" in bad.stdout

    def test_external_code_certificate(self, tmp_path):
        run = cli("certify", "--command", lab_command(), "--case", H2, "--certificate",
                  "cert.json", cwd=tmp_path)
        assert run.returncode == 0, run.stderr
        assert json.loads((tmp_path / "cert.json").read_text())["cases"][0]["passed"] is True

    def test_missing_certificate(self, tmp_path):
        run = cli("verify-certificate", "none.json", cwd=tmp_path)
        assert run.returncode == 2
        assert run.stderr.startswith(ERROR)
