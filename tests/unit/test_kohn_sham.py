"""Kohn–Sham contract, verdict and own-grid mode (harness.contract.grid, harness.backend.grid,
harness.verdict.xc), on H2 and LiH/STO-3G with LDA (the example code's solutions are made
once per module)."""

from __future__ import annotations

import numpy as np
import pytest

from harness.contract.errors import CaseError
from harness.contract.problem import Problem
from harness.contract.results import Status
from harness.contract.solution import Malformed, extract
from harness.testing import example_scf
from harness.verdict.judge import JudgeSettings, judge

H2 = dict(name="h2-ks", numbers=[1, 1], coordinates=[[0, 0, 0], [0, 0, 1.4]], basis="sto-3g")
LIH = dict(name="lih-ks", numbers=[3, 1], coordinates=[[0, 0, 0], [0, 0, 3.015]],
           basis="sto-3g")


@pytest.fixture(scope="module")
def h2_lda():
    return Problem.create(**H2, method="rks", functional="lda,vwn")


@pytest.fixture(scope="module")
def h2_solution(h2_lda):
    return example_scf.solve(h2_lda)


@pytest.fixture(scope="module")
def lih_lda():
    return Problem.create(**LIH, method="rks", functional="lda,vwn")


@pytest.fixture(scope="module")
def lih_solution(lih_lda):
    return example_scf.solve(lih_lda)


@pytest.fixture(scope="module")
def lih_own(lih_lda):
    return example_scf.solve_own_grid(lih_lda)


def _checks(problem, raw, **settings):
    return {c.name: c for c in judge(problem, extract(raw), None,
                                     JudgeSettings(**settings)).checks}


def test_problem_carries_pinned_grid(h2_lda):
    g = h2_lda.grid
    assert g.coords.shape == (g.size, 3) and g.weights.shape == (g.size,)
    assert g.description["level"] == 3 and g.description["partition"] == "becke"
    assert g.hash == Problem.create(**H2, method="rks", functional="lda,vwn").grid.hash
    # the weights integrate the density of the code's solution to N = 2
    assert h2_lda.functional == "lda,vwn" and h2_lda.shape_method == "rhf"


def test_problem_functional_errors():
    with pytest.raises(CaseError) as err:
        Problem.create(**H2, method="rks")
    assert str(err.value) == ("h2-ks: functional: rks needs an exchange–correlation functional "
                              "(a libxc name as pyscf spells it, e.g. 'pbe'), got None")
    with pytest.raises(CaseError) as err:
        Problem.create(**H2, method="rhf", functional="pbe")
    assert str(err.value) == ("h2-ks: functional: is only for Kohn–Sham methods (rks, uks, "
                              "roks), got 'pbe' with rhf")
    with pytest.raises(CaseError) as err:
        Problem.create(**H2, method="rks", functional="nosuchxc")
    assert str(err.value).startswith("h2-ks: functional: 'nosuchxc': pyscf/libxc does not know")


def test_extract_text_keys():
    sol = extract({"energy": -1.0, "coefficients": np.eye(2), "occupations": [2, 0],
                   "grid": "Own", "functional": "PBE", "xc_energy": -0.5})
    assert sol.grid == "own" and sol.functional == "pbe" and sol.xc_energy == -0.5
    bad = extract({"energy": -1.0, "coefficients": np.eye(2), "occupations": [2, 0],
                   "grid": "fine"})
    assert isinstance(bad.grid, Malformed)


def test_pinned_grid_example_passes(h2_lda, h2_solution):
    checks = _checks(h2_lda, h2_solution)
    failed = [c.message for c in checks.values() if c.status is Status.FAILED]
    assert failed == []
    assert checks["self-consistency"].status is Status.PASSED
    assert checks["energy-consistency"].value < 1e-10


def test_missing_xc_potential_caught(lih_lda, lih_solution):
    """Planted: a reported Fock matrix without V_xc; stationarity catches it."""
    raw = dict(lih_solution)
    raw["fock"] = raw["fock"] - raw["xc_potential"]
    checks = _checks(lih_lda, raw)
    assert checks["stationarity"].status is Status.FAILED
    assert checks["self-consistency"].status is Status.PASSED


def test_wrong_energy_caught(h2_lda, h2_solution):
    """Planted: E_xc left out of the reported energy; energy-consistency catches it."""
    raw = dict(h2_solution, energy=h2_solution["energy"] - h2_solution["xc_energy"])
    checks = _checks(h2_lda, raw)
    assert checks["energy-consistency"].status is Status.FAILED
    assert checks["energy-consistency"].message.startswith(
        "energy-consistency: |E − E[P]| = ")


def test_wrong_exchange_fraction_caught(lih_solution):
    """A density converged with LDA judged as PBE0 (25 % exact exchange): not
    self-consistent for PBE0, and its energy is not PBE0's E[P]."""
    pbe0 = Problem.create(**LIH, method="rks", functional="pbe0")
    checks = _checks(pbe0, {k: v for k, v in lih_solution.items()})
    assert checks["self-consistency"].status is Status.FAILED
    assert checks["energy-consistency"].status is Status.FAILED


def test_other_functional_is_a_clear_failure(h2_lda, h2_solution):
    checks = _checks(h2_lda, dict(h2_solution, functional="pbe"))
    assert checks["well-formed"].message == (
        "well-formed: functional: the code used 'pbe', the case asks for 'lda,vwn' (a "
        "different energy functional: nothing else can be compared) (h2-ks)")


def test_xc_keys_on_hartree_fock_case(h2_solution):
    hf = Problem.create(**H2, method="rhf")
    checks = _checks(hf, dict(h2_solution))
    assert checks["well-formed"].status is Status.FAILED
    assert "xc_energy: given for a Hartree–Fock case (rhf)" in checks["well-formed"].message


def test_own_grid_tolerances_stated_and_can_fail(lih_lda, lih_own):
    own = lih_own  # pyscf level 2, coarser than the pinned 3
    checks = _checks(lih_lda, own)
    assert [c.message for c in checks.values() if c.status is Status.FAILED] == []
    assert "grid" in checks["energy-consistency"].message.split("[", 1)[1]
    # pinned mode judges the same solution strictly: its E_xc is another grid's
    strict = _checks(lih_lda, {k: v for k, v in own.items() if k != "grid"})
    assert strict["energy-consistency"].status is Status.FAILED
    # a much coarser own grid fails even with the grid-derived tolerance
    coarse = _checks(lih_lda, example_scf.solve_own_grid(lih_lda, level=0))
    assert coarse["energy-consistency"].status is Status.FAILED
    assert "tolerance from the grid sensitivity of this case" in \
        coarse["energy-consistency"].message or "own grid" in \
        coarse["energy-consistency"].message
    # the grid-free checks stay strict
    assert coarse["orthonormality"].tolerance == checks["orthonormality"].tolerance == 1e-8


def test_own_grid_by_setting(lih_lda, lih_own):
    own = dict(lih_own)
    del own["grid"]
    checks = _checks(lih_lda, own, grid="own")
    assert checks["energy-consistency"].status is Status.PASSED
    assert "[" in checks["energy-consistency"].message


@pytest.mark.slow
def test_unrestricted_and_rohf_shapes():
    for method in ("uks", "roks"):
        p = Problem.create(name="h-atom", numbers=[1], coordinates=[[0, 0, 0]], basis="sto-3g",
                           method=method, functional="pbe", multiplicity=2)
        raw = example_scf.solve(p)
        checks = _checks(p, raw)
        assert [c.message for c in checks.values() if c.status is Status.FAILED] == [], method
        assert np.shape(raw["xc_potential"]) == (2, 1, 1)


def test_problem_document_and_grid_file(tmp_path, h2_lda):
    from harness.run.external import problem_document, write_inputs

    doc = problem_document(h2_lda)
    assert doc["functional"] == "lda,vwn" and doc["files"]["grid"] == "grid.npz"
    assert doc["grid"]["hash"] == h2_lda.grid.hash
    write_inputs(h2_lda, tmp_path)
    data = np.load(tmp_path / "grid.npz")
    assert np.array_equal(data["coords"], h2_lda.grid.coords)
    assert np.array_equal(data["weights"], h2_lda.grid.weights)


def test_solution_files_read_text_keys(tmp_path):
    from harness.run.files import read_solution

    np.savez(tmp_path / "s.npz", energy=-1.0, coefficients=np.eye(2), occupations=[2, 0],
             grid="own", functional="pbe", xc_energy=-0.4)
    out = read_solution(tmp_path / "s.npz")
    assert out["grid"] == "own" and out["functional"] == "pbe" and out["xc_energy"] == -0.4
