"""The command-line wiring of the newer features: --ao-convention and --stability on
certify and check-result, --scratch without --command, check-result verdicts, certificates
from check-result and their verification, and ``bench``.

Commands without plug-in processes run in this process through ``harness.ui.cli.main``
(fast); certify runs as a user runs it (``python -m harness`` in a scratch folder).
Energies in hartree (Eh).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from harness.ui.cli import main

REPO = Path(__file__).resolve().parents[2]
ERROR = "scf-harness: error: "
H2 = "h2-sto-3g-rhf"
ACCELERATOR = "harness.bench.example_accelerator:CommutatorDIIS"
FAST_BASELINES = "roothaan,pyscf-cdiis"


def cli(*args: str, cwd: Path, timeout: float = 180) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), env.get("PYTHONPATH")) if p)
    env["NO_COLOR"] = "1"
    return subprocess.run([sys.executable, "-m", "harness", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout)


def run_main(capsys, *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    out = capsys.readouterr()
    return code, out.out, out.err


def checks_of(report_path: Path) -> dict:
    case = json.loads(report_path.read_text())["cases"][0]
    return {c["name"]: c for c in case["checks"]}


@pytest.fixture(scope="module")
def h2_case():
    from harness.catalogue.cases import load_catalogue

    return load_catalogue().case(H2)


@pytest.fixture(scope="module")
def h2_solution(h2_case) -> dict:
    """The example SCF code's solution of H2/STO-3G (arrays and scalars only)."""
    from harness.testing.example_scf import solve

    raw = solve(h2_case.problem())
    return {k: np.asarray(v) for k, v in raw.items()
            if isinstance(v, (np.ndarray, float, int, bool, list))}


def write_solution(path: Path, solution: dict, **changes) -> Path:
    data = dict(solution)
    data.update({k: np.asarray(v) for k, v in changes.items()})
    np.savez(path, **data)
    return path


def check_result_args(path: Path, h2_case, *extra: str) -> list[str]:
    return ["check-result", str(path), "--geometry", str(h2_case.geometry_file), "--basis",
            "sto-3g", "--method", "rhf", *extra]


class TestCertifyOptions:
    def test_ao_convention_and_stability_reach_the_checks(self, tmp_path):
        run = cli("certify", "--case", H2, "--ao-convention", "pyscf", "--stability", "off",
                  "--json", "r.json", cwd=tmp_path)
        assert run.returncode == 0, run.stdout + run.stderr
        checks = checks_of(tmp_path / "r.json")
        assert "AO convention 'pyscf' as given" in checks["basis"]["message"]
        assert checks["stability"]["status"] == "not applicable"
        assert "switched off" in checks["stability"]["message"]

    @pytest.mark.parametrize("args, fragment", [
        (["--stability", "sometimes"], "argument --stability: invalid choice: 'sometimes'"),
        (["--ao-convention", "nosuch"], "argument --ao-convention: invalid choice: 'nosuch'"),
        (["--scratch", "work"], "--scratch and --keep-scratch need --command"),
        (["--keep-scratch"], "--scratch and --keep-scratch need --command"),
    ])
    def test_bad_options_are_usage_errors(self, capsys, args, fragment):
        code, out, err = run_main(capsys, "certify", "--case", H2, *args)
        assert code == 2
        assert err.startswith(ERROR) and err.count("\n") == 1
        assert fragment in err


class TestCheckResult:
    def test_default_stability_runs_and_off_switches_it_off(self, capsys, tmp_path, h2_case,
                                                             h2_solution):
        path = write_solution(tmp_path / "s.npz", h2_solution)
        code, out, err = run_main(capsys, *check_result_args(path, h2_case, "--json",
                                                              str(tmp_path / "a.json")))
        assert code == 0, out + err
        assert checks_of(tmp_path / "a.json")["stability"]["status"] == "passed"
        code, out, err = run_main(capsys, *check_result_args(
            path, h2_case, "--stability", "off", "--json", str(tmp_path / "b.json")))
        assert code == 0, out + err
        assert checks_of(tmp_path / "b.json")["stability"]["status"] == "not applicable"

    def test_wrong_energy_fails_against_the_reference(self, capsys, tmp_path, h2_case,
                                                      h2_solution):
        """1 mEh added to the energy: energy-consistency and reference-energy fail."""
        energy = float(h2_solution["energy"]) + 1e-3
        path = write_solution(tmp_path / "s.npz", h2_solution, energy=energy)
        code, out, err = run_main(capsys, *check_result_args(path, h2_case, "--json",
                                                              str(tmp_path / "r.json")))
        assert code == 1
        checks = checks_of(tmp_path / "r.json")
        assert checks["reference-energy"]["passed"] is False
        assert checks["reference-energy"]["value"] == pytest.approx(1e-3, rel=1e-3)
        assert "1 passed, 0 failed" not in out and "0 passed, 1 failed" in out

    def test_starts_no_process_and_imports_no_runner(self, tmp_path, h2_case, h2_solution):
        """check-result judges in its own process: harness.run.runner is never imported."""
        path = write_solution(tmp_path / "s.npz", h2_solution)
        code = ("import sys; from harness.ui.cli import main; "
                f"code = main({check_result_args(path, h2_case, '--quiet')!r}); "
                "print(code, 'harness.run.runner' in sys.modules)")
        env = dict(os.environ)
        env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), env.get("PYTHONPATH")) if p)
        run = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, env=env,
                             capture_output=True, text=True, timeout=180)
        assert run.stdout.splitlines()[-1] == "0 False", run.stdout + run.stderr

    def test_name_and_tolerance_options(self, capsys, tmp_path, h2_case, h2_solution):
        """--name names the case; a loose --tol lets the 1 mEh error pass reference-energy."""
        energy = float(h2_solution["energy"]) + 1e-3
        path = write_solution(tmp_path / "s.npz", h2_solution, energy=energy)
        code, out, err = run_main(capsys, *check_result_args(
            path, h2_case, "--name", "my-h2", "--tol", "reference-energy=1e-2",
            "--json", str(tmp_path / "r.json")))
        report = json.loads((tmp_path / "r.json").read_text())
        assert report["cases"][0]["name"] == "my-h2"
        assert checks_of(tmp_path / "r.json")["reference-energy"]["passed"] is True
        assert report["tolerances"]["reference-energy"] == 1e-2

    def test_missing_geometry_is_a_usage_error(self, capsys, tmp_path, h2_solution):
        path = write_solution(tmp_path / "s.npz", h2_solution)
        code, out, err = run_main(capsys, "check-result", str(path), "--geometry",
                                  str(tmp_path / "none.xyz"), "--basis", "sto-3g",
                                  "--method", "rhf")
        assert code == 2
        assert err == f"{ERROR}{tmp_path / 'none.xyz'}: geometry file not found\n"

    def test_required_options(self, capsys, tmp_path, h2_solution):
        path = write_solution(tmp_path / "s.npz", h2_solution)
        code, out, err = run_main(capsys, "check-result", str(path), "--basis", "sto-3g",
                                  "--method", "rhf")
        assert code == 2
        assert "the following arguments are required: --geometry" in err


class TestCertificates:
    def test_check_result_certificate_verifies_and_detects_a_changed_sidecar(
            self, capsys, tmp_path, h2_case, h2_solution):
        path = write_solution(tmp_path / "s.npz", h2_solution)
        cert = tmp_path / "cert.json"
        code, out, err = run_main(capsys, *check_result_args(path, h2_case, "--certificate",
                                                              str(cert), "--name", H2))
        assert code == 0, out + err
        data = json.loads(cert.read_text())
        assert data["passed"] is True and data["cases"][0]["name"] == H2
        assert data["plugin"] == f"file: {path}"
        assert data["cases"][0]["energy"] == pytest.approx(float(h2_solution["energy"]),
                                                           abs=1e-12)
        code, out, err = run_main(capsys, "verify-certificate", str(cert), "--recompute",
                                  "--markdown", str(tmp_path / "s.md"))
        assert code == 0, out + err
        assert "intact and reproduced (1 case)" in out
        assert "| h2-sto-3g-rhf | rhf/sto-3g |" in (tmp_path / "s.md").read_text()

        sidecar = tmp_path / "cert.solutions.npz"
        with np.load(sidecar) as arrays:
            changed = {k: np.array(arrays[k]) for k in arrays.files}
        changed["h2-sto-3g-rhf/energy"] = changed["h2-sto-3g-rhf/energy"] + 1e-9
        np.savez(sidecar, **changed)
        code, out, err = run_main(capsys, "verify-certificate", str(cert))
        assert code == 1
        assert "sidecar: cert.solutions.npz was modified" in out
        assert "cases/h2-sto-3g-rhf/solution: the sidecar's arrays do not match" in out

    def test_failed_case_is_certified_as_failed(self, capsys, tmp_path, h2_case,
                                               h2_solution):
        path = write_solution(tmp_path / "s.npz", h2_solution,
                              energy=float(h2_solution["energy"]) + 1e-3)
        cert = tmp_path / "cert.json"
        code, _, _ = run_main(capsys, *check_result_args(path, h2_case, "--certificate",
                                                          str(cert)))
        assert code == 1
        data = json.loads(cert.read_text())
        assert data["passed"] is False
        ref = {c["name"]: c for c in data["cases"][0]["checks"]}["reference-energy"]
        assert ref["status"] == "failed"
        code, out, _ = run_main(capsys, "verify-certificate", str(cert))
        assert code == 0 and "intact" in out  # intact: it faithfully records a failure

    def test_missing_certificate_is_a_usage_error(self, capsys, tmp_path):
        code, out, err = run_main(capsys, "verify-certificate", str(tmp_path / "none.json"))
        assert code == 2
        assert err == f"{ERROR}{tmp_path / 'none.json'}: file not found\n"

    def test_not_a_certificate_fails(self, capsys, tmp_path):
        path = tmp_path / "x.json"
        path.write_text('{"format": "something-else"}')
        code, out, err = run_main(capsys, "verify-certificate", str(path), "--markdown",
                                  str(tmp_path / "x.md"))
        assert code == 1
        assert "format: 'something-else', expected 'scf-harness-certificate/1'" in out


class TestBench:
    def test_example_accelerator_on_the_smoke_suite(self, capsys, tmp_path):
        code, out, err = run_main(capsys, "bench", ACCELERATOR, "--guesses", "1", "--seed",
                                  "3", "--baselines", FAST_BASELINES, "--report",
                                  str(tmp_path / "rep"))
        assert code == 0, out + err
        assert "accelerator bench: example-diis vs roothaan, pyscf-cdiis" in out
        assert "bench passed" in out
        report = json.loads((tmp_path / "rep" / "bench.json").read_text())
        assert report["methods"] == ["example-diis", "roothaan", "pyscf-cdiis"]
        assert report["guesses"] == 1 and report["seed"] == 3
        assert report["cases"] == ["h2-sto-3g-rhf", "water-sto-3g-rhf", "oh-sto-3g-uhf",
                                   "nh2-sto-3g-rohf"]
        # 4 cases x 2 starting guesses x 3 methods, one progress line each
        assert len(report["runs"]) == 24
        assert out.count("[") >= 24 and "[24/24]" in out
        assert report["exit_status"] == 0

    def test_planted_accelerator_fails_the_bench(self, capsys):
        """An accelerator that never converges (harness.testing.planted.accelerators) exits 1."""
        code, out, err = run_main(capsys, "bench", "harness.testing.planted.accelerators:KickedDIIS",
                                  "--suite", "smoke", "--guesses", "0", "--baselines",
                                  "pyscf-cdiis")
        assert code == 1, out + err
        assert "fixed-point" in out

    def test_hanging_accelerator_is_stopped_by_call_timeout(self, capsys, tmp_path):
        """--call-timeout: a step that never returns fails its runs and properties;
        the bench finishes and exits 1."""
        (tmp_path / "stuck.py").write_text(
            "import time\n\n\nclass Stuck:\n    def reset(self, problem):\n"
            "        pass\n\n    def step(self, it):\n        while True:\n"
            "            time.sleep(0.01)\n", encoding="utf-8")
        code, out, err = run_main(capsys, "bench", f"{tmp_path / 'stuck.py'}:Stuck",
                                  "--suite", "smoke", "--guesses", "0",
                                  "--baselines", "roothaan", "--call-timeout", "0.2")
        assert code == 1, out + err
        assert "Traceback" not in out + err
        assert ("[3/8] water-sto-3g-rhf guess 0 Stuck: failed (step raised "
                "AcceleratorTimeout: step took longer than 0.2 s at Fock build 1), 1 Fock "
                "builds, —") in out.splitlines()
        assert ("  ✗ fixed-point: fails on 4/4 cases; h2-sto-3g-rhf: the accelerator raised "
                "AcceleratorTimeout: step took longer than 0.2 s") in out.splitlines()
        assert "bench failed" in out

    @pytest.mark.parametrize("args, fragment", [
        (["no_such_module_xyz:Thing"], "no_such_module_xyz"),
        ([ACCELERATOR, "--baselines", "roothaan,nosuch"], "unknown baseline 'nosuch'"),
        ([ACCELERATOR, "--suite", "nosuch"], "nosuch"),
        ([ACCELERATOR, "--guesses", "-1"], "expected an integer >= 0, got '-1'"),
    ])
    def test_usage_errors(self, capsys, args, fragment):
        code, out, err = run_main(capsys, "bench", *args)
        assert code == 2
        assert err.startswith(ERROR) and err.count("\n") == 1 and "Traceback" not in err
        assert fragment in err


class TestCaseSelection:
    """``--case`` with ``--cases-file``: names are looked up in the file, then in the
    catalogue; the whole file runs only when no case is named."""

    @pytest.fixture
    def own(self, tmp_path):
        (tmp_path / "h2.xyz").write_text("2\nH2\nH 0 0 0\nH 0 0 0.74\n", encoding="utf-8")
        path = tmp_path / "mine.toml"
        path.write_text("".join(
            f'[[case]]\nname = "{name}"\ngeometry = "h2.xyz"\nbasis = "{basis}"\n'
            'method = "rhf"\n\n' for name, basis in (("lab-h2-a", "sto-3g"),
                                                     ("lab-h2-b", "6-31g"))),
            encoding="utf-8")
        return path

    def names(self, *args, **kw):
        from harness.ui.cli import select_cases

        return [c.name for c in select_cases(*args, **kw)[0]]

    def test_the_file_alone_runs_all_its_cases(self, own):
        assert self.names(None, None, own) == ["lab-h2-a", "lab-h2-b"]

    def test_a_named_case_of_the_file_runs_alone(self, own):
        assert self.names(None, ["lab-h2-b"], own) == ["lab-h2-b"]

    def test_catalogue_names_still_work_beside_a_file(self, own):
        assert self.names(None, ["h2-sto-3g-rhf", "lab-h2-a"], own) == ["h2-sto-3g-rhf",
                                                                        "lab-h2-a"]

    def test_a_suite_and_the_file_run_together(self, own):
        from harness.catalogue.cases import load_catalogue

        smoke = [c.name for c in load_catalogue().suite("smoke")]
        assert self.names(["smoke"], None, own) == smoke + ["lab-h2-a", "lab-h2-b"]

    def test_certify_one_case_of_the_file(self, own, capsys):
        code, out, err = run_main(capsys, "certify", "--cases-file", str(own),
                                  "--case", "lab-h2-a", "--stability", "off")
        assert code == 0, err
        assert out.splitlines()[-1] == "1 passed, 0 failed"
