"""Reading solution files (harness/files.py): every format round-trips to the same
verdict as the Python plug-in, and every defect gives a one-line error naming file
and key. Solutions come from the bundled example SCF code; energies in Eh."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "external"))
import solution_files as sf  # noqa: E402

from harness.errors import CaseError, HarnessError  # noqa: E402
from harness.evaluate import evaluate  # noqa: E402
from harness.files import (SOLUTION_FORMAT, SolutionFileError, check_result,  # noqa: E402
                           read_solution)
from harness.solution import extract  # noqa: E402


def failed_checks(name, raw):
    p = sf.problem(name)
    return [c.name for c in evaluate(p, extract(raw)) if c.passed is False]


def same_arrays(raw, result):
    for key in ("coefficients", "occupations", "orbital_energies", "density", "fock"):
        np.testing.assert_array_equal(np.asarray(raw[key]), np.asarray(result[key]))
    assert raw["energy"] == result["energy"]
    assert raw["converged"] is True and raw["iterations"] == result["iterations"]


class TestFormats:
    @pytest.mark.parametrize("name", ["water-sto-3g-rhf", "oh-sto-3g-uhf"])
    def test_npz_round_trip(self, tmp_path, name):
        """An .npz written with numpy.savez reads back bit for bit and passes."""
        result = sf.solved(name)
        raw = read_solution(sf.write_npz(tmp_path / "s.npz", result))
        same_arrays(raw, result)
        assert failed_checks(name, raw) == []

    def test_json_round_trip(self, tmp_path):
        """A JSON solution (tagged, atomic units) reads back exactly and passes."""
        result = sf.solved("water-sto-3g-rhf")
        path = sf.write_json(tmp_path / "s.json", result, format=SOLUTION_FORMAT,
                             units={"energy": "hartree", "length": "bohr"})
        raw = read_solution(path)
        same_arrays(raw, result)
        assert failed_checks("water-sto-3g-rhf", raw) == []

    def test_h5_round_trip(self, tmp_path):
        """An HDF5 file with one dataset per key reads back exactly."""
        pytest.importorskip("h5py")
        result = sf.solved("nh2-sto-3g-rohf")
        raw = read_solution(sf.write_h5(tmp_path / "s.h5", result))
        same_arrays(raw, result)
        assert failed_checks("nh2-sto-3g-rohf", raw) == []

    def test_json_history_pairs(self, tmp_path):
        """history as [energy, error] pairs becomes the records extract reads."""
        result = dict(sf.solved("h2-sto-3g-rhf"))
        path = sf.write_json(tmp_path / "s.json", result, history=[[-1.0, 0.1], [-1.1, 1e-7]])
        ex = extract(read_solution(path))
        np.testing.assert_array_equal(ex["history"], [[-1.0, 0.1], [-1.1, 1e-7]])

    @pytest.mark.parametrize("name", ["water-sto-3g-rhf", "oh-sto-3g-uhf", "nh2-sto-3g-rohf",
                                      "ammonia-6-31gd-rhf"])
    def test_molden_round_trip(self, tmp_path, name):
        """Molden (RHF, UHF, ROHF, cartesian 6D): orbitals back in pyscf's AO order to
        1e-12, and the case passes every check it can run."""
        result = sf.solved(name)
        p = sf.problem(name)
        path = sf.write_molden(tmp_path / "s.molden", p.to_pyscf(), result)
        raw = read_solution(path, problem=p)
        np.testing.assert_allclose(raw["coefficients"], result["coefficients"], atol=1e-12)
        np.testing.assert_array_equal(raw["occupations"], result["occupations"])
        assert raw["energy"] == result["energy"]
        assert failed_checks(name, raw) == []

    def test_molden_energy_file_option(self, tmp_path):
        """energy_file= names the JSON with the energy; extra keys (fock) come along."""
        result = sf.solved("water-sto-3g-rhf")
        p = sf.problem("water-sto-3g-rhf")
        path = sf.write_molden(tmp_path / "orbitals.molden", p.to_pyscf(), result, energy=False)
        energy = sf.write_json(tmp_path / "numbers.json",
                               {"energy": result["energy"], "fock": result["fock"]})
        raw = read_solution(path, problem=p, energy_file=energy)
        np.testing.assert_array_equal(raw["fock"], result["fock"])
        checks = {c.name: c for c in evaluate(p, extract(raw))}
        assert checks["stationarity"].passed is True


class TestErrors:
    def test_unknown_suffix(self, tmp_path):
        path = tmp_path / "s.txt"
        path.write_text("1")
        with pytest.raises(SolutionFileError) as err:
            read_solution(path)
        assert str(err.value).startswith("s.txt: unknown suffix '.txt'")

    def test_missing_file(self, tmp_path):
        with pytest.raises(SolutionFileError) as err:
            read_solution(tmp_path / "none.npz")
        assert str(err.value) == "none.npz: file not found"

    def test_missing_key_with_close_match(self, tmp_path):
        result = dict(sf.solved("h2-sto-3g-rhf"))
        result["coefficent"] = result.pop("coefficients")
        with pytest.raises(SolutionFileError) as err:
            read_solution(sf.write_npz(tmp_path / "s.npz", result))
        assert str(err.value) == "s.npz: coefficients: missing (found 'coefficent')"
        assert err.value.key == "coefficients" and err.value.file == "s.npz"

    def test_units_other_than_atomic(self, tmp_path):
        path = sf.write_json(tmp_path / "s.json", sf.solved("h2-sto-3g-rhf"),
                             units={"energy": "eV"})
        with pytest.raises(SolutionFileError) as err:
            read_solution(path)
        assert str(err.value).startswith("s.json: units: energy in 'eV'")

    def test_wrong_format_tag(self, tmp_path):
        path = sf.write_json(tmp_path / "s.json", sf.solved("h2-sto-3g-rhf"), format="other/2")
        with pytest.raises(SolutionFileError) as err:
            read_solution(path)
        assert str(err.value) == ("s.json: format: format tag is 'other/2', expected "
                                  "'scf-harness-solution/1'")

    def test_ragged_json(self, tmp_path):
        result = dict(sf.solved("h2-sto-3g-rhf"))
        result["coefficients"] = [[1.0, 2.0], [3.0]]
        with pytest.raises(SolutionFileError) as err:
            read_solution(sf.write_json(tmp_path / "s.json", result))
        assert str(err.value) == ("s.json: coefficients: is a ragged list (rows of different "
                                  "lengths)")

    def test_molden_needs_problem(self, tmp_path):
        p = sf.problem("h2-sto-3g-rhf")
        path = sf.write_molden(tmp_path / "s.molden", p.to_pyscf(), sf.solved("h2-sto-3g-rhf"))
        with pytest.raises(SolutionFileError) as err:
            read_solution(path)
        assert "needs the case" in str(err.value)

    def test_molden_without_energy_file(self, tmp_path):
        p = sf.problem("h2-sto-3g-rhf")
        path = sf.write_molden(tmp_path / "s.molden", p.to_pyscf(), sf.solved("h2-sto-3g-rhf"),
                               energy=False)
        with pytest.raises(SolutionFileError) as err:
            read_solution(path, problem=p)
        assert str(err.value) == ("s.molden: energy: needs its energy in a JSON file: s.json "
                                  "not found (give energy_file=...)")

    def test_molden_other_geometry(self, tmp_path):
        """A Molden file for another geometry names the atom and the distance (bohr)."""
        p = sf.problem("water-sto-3g-rhf")
        moved = p.replace(coordinates=np.asarray(p.coordinates) + [[0, 0, 0], [0, 0, 0],
                                                                   [0.01, 0, 0]])
        path = sf.write_molden(tmp_path / "s.molden", moved.to_pyscf(),
                               sf.solved("water-sto-3g-rhf"))
        with pytest.raises(SolutionFileError) as err:
            read_solution(path, problem=p)
        assert str(err.value).startswith("s.molden: Atoms: atom 3 lies 1.0e-02 bohr from")

    def test_molden_other_basis(self, tmp_path):
        """Same atoms, other basis with the same AO count: the overlap gives it away."""
        from pyscf import gto

        p = sf.problem("h2-sto-3g-rhf")
        mol = gto.M(atom=[(1, tuple(x)) for x in p.coordinates], unit="Bohr", basis="6-31g",
                    verbose=0)
        fake = dict(sf.solved("h2-sto-3g-rhf"))
        c = np.zeros((4, 2))
        c[0, 0] = c[2, 0] = c[0, 1] = 0.5
        c[2, 1] = -0.5
        fake.update(coefficients=c, orbital_energies=np.array([-0.5, 0.5]))
        path = sf.write_molden(tmp_path / "s.molden", mol, fake)
        with pytest.raises(SolutionFileError) as err:
            read_solution(path, problem=p)
        assert str(err.value) == ("s.molden: basis: has 4 basis functions, the case (sto-3g, "
                                  "spherical) has 2")

    def test_molden_open_shell_spin(self, tmp_path):
        """A UHF doublet file read for a UHF quartet: the spin counts are named."""
        p = sf.problem("oh-sto-3g-uhf")
        quartet = p.replace(multiplicity=4)
        path = sf.write_molden(tmp_path / "s.molden", p.to_pyscf(), sf.solved("oh-sto-3g-uhf"))
        with pytest.raises(SolutionFileError) as err:
            read_solution(path, problem=quartet)
        assert str(err.value) == ("s.molden: Occup: its occupations hold 5 alpha and 4 beta "
                                  "electrons (multiplicity 2); the case has multiplicity 4 "
                                  "(6 alpha, 3 beta)")

    def test_molden_restricted_for_uhf(self, tmp_path):
        p = sf.problem("water-sto-3g-rhf")
        path = sf.write_molden(tmp_path / "s.molden", p.to_pyscf(), sf.solved("water-sto-3g-rhf"))
        with pytest.raises(SolutionFileError) as err:
            read_solution(path, problem=p.replace(method="uhf"))
        assert str(err.value) == ("s.molden: MO: the case is uhf but the file holds one set "
                                  "of orbitals (restricted)")

    def test_molden_normalisation(self, tmp_path):
        """Coefficients scaled by 1.01 (another normalisation convention): Tr(PS) is off."""
        p = sf.problem("water-sto-3g-rhf")
        result = dict(sf.solved("water-sto-3g-rhf"))
        result["coefficients"] = 1.01 * result["coefficients"]
        path = sf.write_molden(tmp_path / "s.molden", p.to_pyscf(), result)
        with pytest.raises(SolutionFileError) as err:
            read_solution(path, problem=p)
        assert str(err.value).startswith("s.molden: MO: Tr(PS) = 10.201000 electrons with the "
                                         "case's overlap, the occupations hold 10")


class TestCheckResult:
    def test_from_xyz_and_npz(self, tmp_path):
        """check_result builds the case from XYZ (Å) + options; the verdict passes."""
        from harness.references import reference_for

        result = sf.solved("water-sto-3g-rhf")
        ref_case = __import__("harness.cases", fromlist=["x"]).load_catalogue().case(
            "water-sto-3g-rhf")
        case, extracted = check_result(sf.write_npz(tmp_path / "s.npz", result),
                                       geometry=ref_case.geometry_file, basis="STO-3G",
                                       method="RHF")
        assert case.name == "water-crawford-sto-3g-rhf"
        np.testing.assert_allclose(case.coordinates, ref_case.coordinates, atol=1e-12)
        reference, source = reference_for(ref_case)
        checks = evaluate(case.problem(), extracted, reference)
        assert [c.name for c in checks if c.passed is False] == []
        assert source == "stored"

    def test_bad_method(self, tmp_path):
        xyz = tmp_path / "h2.xyz"
        xyz.write_text("2\nH2 units=bohr\nH 0 0 0\nH 0 0 1.4\n")
        with pytest.raises(CaseError) as err:
            check_result(tmp_path / "s.npz", geometry=xyz, basis="sto-3g", method="mp2")
        assert str(err.value) == "h2-sto-3g-mp2: method: must be one of rhf, uhf, rohf, got 'mp2'"

    def test_errors_are_harness_errors(self):
        assert issubclass(SolutionFileError, HarnessError)


class TestResultCase:
    def test_defaults_and_validation(self, tmp_path):
        from harness.files import result_case

        xyz = tmp_path / "OH radical.xyz"
        xyz.write_text("2\nOH units=bohr\nO 0 0 0\nH 0 0 1.83\n")
        case = result_case(geometry=xyz, basis="6-31G*", method="UHF", multiplicity=2)
        assert case.name == "oh-radical-6-31gd-uhf"
        assert case.coordinates[1, 2] == 1.83 and case.problem().n_alpha == 5
        with pytest.raises(CaseError) as err:
            result_case(geometry=xyz, basis="sto-3g", method="rhf")
        assert str(err.value) == ("oh-radical-sto-3g-rhf: multiplicity: multiplicity 1 is "
                                  "impossible with 9 electrons")
