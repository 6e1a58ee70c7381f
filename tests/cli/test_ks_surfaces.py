"""Kohn–Sham cases through every user surface: ``certify --grid own``, ``check-result`` of a
saved KS solution (npz, JSON, HDF5), certificates and ``verify-certificate --recompute``,
the ``--command`` route (problem.json + grid.npz) and the ``grid`` key of the
``[tool.scf-harness]`` table. Each run is one small case (water or H2, STO-3G, LDA)."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest

from harness.ui.cli import main

HERE = Path(__file__).resolve().parent
OWN = HERE / "plugins" / "own_grid.py"
WATER = "water-sto-3g-rks-lda"
H2 = "h2-sto-3g-rks-lda"
EXTERNAL = HERE.parent / "external"
GRID_TEXT = ("[tolerance from the grid sensitivity of this case: 10 × |ΔE_xc| = 5.3e-07 Eh "
             "between pyscf grid levels 3 and 5 at the code's density]")


def run_main(capsys, *args: str):
    code = main(list(args))
    out = capsys.readouterr()
    return code, out.out, out.err


def checks_of(path: Path) -> dict:
    return {c["name"]: c for c in json.loads(path.read_text())["cases"][0]["checks"]}


@pytest.fixture(scope="module")
def water():
    from harness.catalogue.cases import load_catalogue

    return load_catalogue().case(WATER)


@pytest.fixture(scope="module")
def water_solution(water) -> dict:
    from harness.testing.example_scf import solve

    return solve(water.problem())


def _xyz(tmp_path: Path, case) -> Path:
    from pyscf.data import elements

    lines = [str(len(case.numbers)), "units=bohr"]
    lines += [f"{elements.ELEMENTS[int(z)]} {x:.12f} {y:.12f} {w:.12f}"
              for z, (x, y, w) in zip(case.numbers, case.coordinates)]
    path = tmp_path / "water.xyz"
    path.write_text("\n".join(lines) + "\n")
    return path


class TestGridOwnFlag:
    @pytest.mark.slow  # ~5 s: the example code plus the grid-sensitivity measurement
    def test_correct_own_grid_code_passes_with_the_grid_derived_tolerance(self, capsys,
                                                                          tmp_path):
        report = tmp_path / "r.json"
        code, out, err = run_main(capsys, "certify", f"{OWN}:solve", "--case", WATER,
                                  "--grid", "own", "--json", str(report), "--quiet")
        assert code == 0, out + err
        checks = checks_of(report)
        assert checks["energy-consistency"]["message"].endswith(GRID_TEXT)
        assert checks["reference-energy"]["message"].endswith(GRID_TEXT)
        assert checks["orthonormality"]["tolerance"] == 1e-8  # grid-free: full strictness

    @pytest.mark.slow
    def test_without_the_flag_the_same_code_is_judged_on_the_pinned_grid(self, capsys,
                                                                        tmp_path):
        report = tmp_path / "r.json"
        code, _, _ = run_main(capsys, "certify", f"{OWN}:solve", "--case", WATER,
                              "--json", str(report), "--quiet")
        assert code == 1
        assert checks_of(report)["energy-consistency"]["status"] == "failed"

    @pytest.mark.slow
    def test_much_too_coarse_own_grid_fails_with_the_tolerance_stated(self, capsys,
                                                                       tmp_path):
        code, out, _ = run_main(capsys, "certify", f"{OWN}:coarse", "--case", WATER,
                                "--grid", "own", "--quiet")
        assert code == 1
        assert ("  energy-consistency: |E − E[P]| = 2.0e-02 > 5.3e-06 (water-sto-3g-rks-lda), "
                "E = -74.7531982767, E[P] = -74.7332720377 Eh " + GRID_TEXT) in out

    def test_bad_grid_value_is_a_usage_error(self, capsys):
        code, _, err = run_main(capsys, "certify", "--case", WATER, "--grid", "fine")
        assert code == 2
        assert "argument --grid: invalid choice: 'fine' (choose from 'pinned', 'own')" in err


@pytest.mark.slow  # ~15 s each: the reference of a check-result case is computed
class TestCheckResult:
    @pytest.mark.parametrize("suffix", [".npz", ".json", ".h5"])
    def test_saved_ks_solution_passes(self, capsys, tmp_path, water, water_solution, suffix):
        sys.path.insert(0, str(EXTERNAL))
        try:
            import solution_files as files
        finally:
            sys.path.remove(str(EXTERNAL))
        writer = {".npz": files.write_npz, ".json": files.write_json,
                  ".h5": files.write_h5}[suffix]
        path = writer(tmp_path / f"water{suffix}", water_solution)
        report = tmp_path / "r.json"
        code, out, err = run_main(capsys, "check-result", str(path), "--geometry",
                                  str(_xyz(tmp_path, water)), "--basis", "sto-3g",
                                  "--method", "rks", "--functional", "lda,vwn",
                                  "--json", str(report), "--quiet")
        assert code == 0, out + err
        checks = checks_of(report)
        assert checks["energy-consistency"]["status"] == "passed"
        assert checks["self-consistency"]["status"] == "passed"

    def test_claimed_other_functional_fails(self, capsys, tmp_path, water, water_solution):
        path = tmp_path / "water.npz"
        np.savez(path, **{k: np.asarray(v) for k, v in water_solution.items()},
                 functional=np.asarray("pbe"))
        code, out, _ = run_main(capsys, "check-result", str(path), "--geometry",
                                str(_xyz(tmp_path, water)), "--basis", "sto-3g",
                                "--method", "rks", "--functional", "lda,vwn", "--quiet")
        assert code == 1 and "pbe" in out and "lda,vwn" in out

    def test_ks_method_without_functional_is_a_one_line_usage_error(self, capsys, tmp_path,
                                                                     water, water_solution):
        path = tmp_path / "water.npz"
        np.savez(path, **{k: np.asarray(v) for k, v in water_solution.items()})
        code, out, err = run_main(capsys, "check-result", str(path), "--geometry",
                                  str(_xyz(tmp_path, water)), "--basis", "sto-3g",
                                  "--method", "rks")
        assert code == 2
        assert "rks needs an exchange–correlation functional" in err
        assert len(err.strip().splitlines()) == 1


@pytest.mark.slow  # 5–12 s: certify, then recompute with the grid measurement
class TestCertificate:
    def test_own_grid_certificate_recomputes(self, capsys, tmp_path):
        cert = tmp_path / "c.json"
        code, out, err = run_main(capsys, "certify", f"{OWN}:solve", "--case", WATER,
                                  "--grid", "own", "--certificate", str(cert), "--quiet")
        assert code == 0, out + err
        data = json.loads(cert.read_text())
        assert data["evaluation"]["grid"] == "own"
        code, out, err = run_main(capsys, "verify-certificate", str(cert), "--recompute")
        assert code == 0, out + err

    def test_pinned_ks_certificate_keeps_text_keys(self, capsys, tmp_path):
        from harness.testing import example_scf  # noqa: F401  (a grid="own" solution)

        cert = tmp_path / "c.json"
        code, out, err = run_main(capsys, "certify",
                                  "harness.testing.example_scf:solve_own_grid",
                                  "--case", H2, "--certificate", str(cert), "--quiet")
        assert code == 0, out + err
        side = np.load(cert.with_name("c.solutions.npz"))
        assert str(side[f"{H2}/grid"]) == "own"
        assert "grid" not in json.loads(cert.read_text())["evaluation"]
        code, out, err = run_main(capsys, "verify-certificate", str(cert), "--recompute")
        assert code == 0, out + err


@pytest.mark.slow  # ~6 s: the lab code as a separate process
def test_command_route_ks_round_trip(capsys):
    lab = EXTERNAL / "lab_code.py"
    code, out, err = run_main(capsys, "certify", "--command",
                              f"{sys.executable} {lab} --in {{problem}} --out {{solution}}",
                              "--case", WATER, "--quiet")
    assert code == 0, out + err
    assert "1 passed, 0 failed" in out
