"""The ``basis`` solution key in npz and HDF5 solution files (issue 11): the NWChem
text of the basis the code used (or a path to it, relative to the solution file);
check-result judges the case in that basis."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "external"))
import solution_files as sf  # noqa: E402

from harness.catalogue.cases import load_catalogue  # noqa: E402
from harness.catalogue.references import reference_for  # noqa: E402
from harness.run.files import check_result, read_solution  # noqa: E402
from harness.testing.planted.variants import rounded_basis_data, rounded_basis_text  # noqa: E402
from harness.verdict.judge import judge  # noqa: E402

CASE = "water-sto-3g-rhf"


def _solved():
    case = load_catalogue().case(CASE)
    return case, rounded_basis_data(case.problem())


def _verdict(path):
    ref_case, _ = _solved()
    case, extracted = check_result(path, geometry=ref_case.geometry_file, basis="STO-3G",
                                   method="RHF")
    reference, _ = reference_for(ref_case)
    return judge(case.problem(), extracted, reference)


#: The basis line check-result gives the rounded-basis code's file (its own basis).
OWN = ("basis: judged in the code's own basis (given as 'basis'; 7 functions, differs from "
       "pyscf's 'sto-3g' by 1.4e-08 in the overlap, +9.1e-08 Eh in the reference energy) "
       "(water-crawford-sto-3g-rhf)")


def test_npz_basis_text_is_honoured(tmp_path):
    _, result = _solved()
    path = sf.write_npz(tmp_path / "s.npz", result)
    assert read_solution(path)["basis"] == result["basis"]
    r = _verdict(path)
    assert [c.name for c in r.failures] == []
    assert r.check("basis").message == OWN


def test_h5_basis_path_beside_the_file(tmp_path):
    h5py = pytest.importorskip("h5py")
    _, result = _solved()
    (tmp_path / "used.nw").write_text(result["basis"], encoding="utf-8")
    with h5py.File(tmp_path / "s.h5", "w") as fh:
        for k, v in result.items():
            fh[k] = "used.nw" if k == "basis" else np.asarray(v)
    assert read_solution(tmp_path / "s.h5")["basis"] == str(tmp_path / "used.nw")
    r = _verdict(tmp_path / "s.h5")
    assert r.check("basis").message == OWN


def test_without_the_basis_key_the_same_file_is_judged_in_pyscfs_basis(tmp_path):
    """The key matters: without it the rounded digits are measured against pyscf's."""
    _, result = _solved()
    r = _verdict(sf.write_npz(tmp_path / "s.npz",
                              {k: v for k, v in result.items() if k != "basis"}))
    assert not r.check("basis").message.startswith("basis: judged in the code's own basis")
    assert "kinetic" in {c.name for c in r.failures}  # 7-digit exponents cost > 1e-7 Eh


def test_rounded_text_is_not_pyscfs():
    problem = load_catalogue().case(CASE).problem()
    assert rounded_basis_text(problem) != problem.basis_nwchem
