"""Reading solution files (harness/run/files.py): every format round-trips to the same
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

from harness.contract.errors import CaseError, HarnessError  # noqa: E402
from harness.verdict.judge import judge  # noqa: E402
from harness.run.files import (SOLUTION_FORMAT, SolutionFileError, check_result,  # noqa: E402
                           read_solution)
from harness.contract.solution import extract  # noqa: E402


def failed_checks(name, raw):
    p = sf.problem(name)
    return [c.name for c in judge(p, extract(raw), None).checks if c.passed is False]


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
        np.testing.assert_array_equal(ex.history, [[-1.0, 0.1], [-1.1, 1e-7]])

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
        checks = {c.name: c for c in judge(p, extract(raw), None).checks}
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
                                  "not found (give the energy file: --energy-file, or "
                                  "energy_file= from Python)")

    def test_molden_energy_file_is_a_directory(self, tmp_path):
        """A directory given as the energy file is named as one, not as missing."""
        p = sf.problem("h2-sto-3g-rhf")
        path = sf.write_molden(tmp_path / "s.molden", p.to_pyscf(), sf.solved("h2-sto-3g-rhf"),
                               energy=False)
        (tmp_path / "numbers.json").mkdir()
        with pytest.raises(SolutionFileError) as err:
            read_solution(path, problem=p, energy_file=tmp_path / "numbers.json")
        assert str(err.value) == "numbers.json: is a directory"
        (tmp_path / "s.json").mkdir()  # the default energy file, a directory too
        with pytest.raises(SolutionFileError) as err:
            read_solution(path, problem=p)
        assert str(err.value) == "s.json: is a directory"

    @pytest.mark.parametrize("suffix", [".npz", ".json", ".h5", ".molden"])
    def test_directory_in_place_of_a_solution_file(self, tmp_path, suffix):
        (tmp_path / f"s{suffix}").mkdir()
        with pytest.raises(SolutionFileError) as err:
            read_solution(tmp_path / f"s{suffix}", problem=sf.problem("h2-sto-3g-rhf"))
        assert str(err.value) == f"s{suffix}: is a directory"

    @staticmethod
    def h5_with_fock(path, make_fock):
        """The h2 solution as HDF5, its ``fock`` made by ``make_fock(file)``."""
        h5py = pytest.importorskip("h5py")
        with h5py.File(path, "w") as fh:
            for k, v in sf.solved("h2-sto-3g-rhf").items():
                if k != "fock":
                    fh[k] = np.asarray(v)
            make_fock(h5py, fh)
        return path

    @pytest.mark.parametrize("make_fock, message", [
        (lambda h5py, fh: fh.__setitem__("fock", h5py.SoftLink("/nonexistent")),
         "fock: is a soft link to '/nonexistent', not a dataset (links are refused)"),
        (lambda h5py, fh: fh.__setitem__("fock", h5py.SoftLink("/overlap")),
         "fock: is a soft link to '/overlap', not a dataset (links are refused)"),
        (lambda h5py, fh: fh.__setitem__("fock", h5py.ExternalLink("other.h5", "/fock")),
         "fock: is an external link to other.h5:/fock, not a dataset (links are refused)"),
        (lambda h5py, fh: fh.create_group("fock"), "fock: is a group, not a dataset"),
    ], ids=["dangling-soft-link", "soft-link", "external-link", "group"])
    def test_h5_links_are_refused(self, tmp_path, make_fock, message):
        """A key that is a link (which may point outside the file) is refused unread,
        even when it resolves to a valid dataset of the same file."""
        path = self.h5_with_fock(tmp_path / "s.h5", make_fock)
        with pytest.raises(SolutionFileError) as err:
            read_solution(path)
        assert str(err.value) == f"s.h5: {message}"
        assert err.value.key == "fock"

    def test_h5_data_outside_the_file_is_refused(self, tmp_path):
        """A dataset whose bytes live in another file (external storage) is refused,
        and so is a virtual dataset mapped from another file."""
        fock = np.asarray(sf.solved("h2-sto-3g-rhf")["fock"])
        (tmp_path / "raw.bin").write_bytes(fock.astype("<f8").tobytes())
        path = self.h5_with_fock(tmp_path / "ext.h5", lambda h5py, fh: fh.create_dataset(
            "fock", shape=fock.shape, dtype="<f8", external=[("raw.bin", 0, fock.nbytes)]))
        with pytest.raises(SolutionFileError) as err:
            read_solution(path)
        assert str(err.value) == ("ext.h5: fock: keeps its data in an external file, not in "
                                  "this one (refused)")

        def virtual(h5py, fh):
            layout = h5py.VirtualLayout(shape=fock.shape, dtype="<f8")
            layout[...] = h5py.VirtualSource(str(tmp_path / "other.h5"), "fock", shape=fock.shape)
            fh.create_virtual_dataset("fock", layout)

        self.h5_with_fock(tmp_path / "other.h5", lambda h5py, fh: fh.create_dataset("fock",
                                                                                    data=fock))
        path = self.h5_with_fock(tmp_path / "virtual.h5", virtual)
        with pytest.raises(SolutionFileError) as err:
            read_solution(path)
        assert str(err.value) == ("virtual.h5: fock: is a virtual dataset mapped from other "
                                  "files (refused)")

    @pytest.mark.parametrize("key, digits, message", [
        ("energy", 5000, "energy: is an integer of 5000 digits, beyond the float range"),
        ("energy", 320, "energy: is an integer of 320 digits, beyond the float range"),
        ("iterations", 5000, "iterations: is an integer of 5000 digits, beyond the float "
                             "range"),
        ("fock", 5000, "fock: element [1][0] is an integer of 5000 digits, beyond the float "
                       "range"),
        ("history", 5000, "history: record 0: 'error' is an integer of 5000 digits, beyond "
                          "the float range"),
    ])
    def test_json_integer_beyond_the_float_range(self, tmp_path, key, digits, message):
        """A JSON integer too long for Python's int conversion (> 4300 digits) or for a
        float64 (> 1.8e308) is named with its key, not reported as a ValueError."""
        result = dict(sf.solved("h2-sto-3g-rhf"))
        huge = "7" * digits
        if key == "fock":
            text = json.dumps(dict(result, fock=[[1.0, 2.0], ["HUGE", 3.0]]),
                              default=lambda a: a.tolist())
        elif key == "history":
            text = json.dumps(dict(result, history=[[-1.0, "HUGE"]]), default=lambda a: a.tolist())
        else:
            text = json.dumps(dict(result, **{key: "HUGE"}), default=lambda a: a.tolist())
        (tmp_path / "s.json").write_text(text.replace('"HUGE"', huge))
        with pytest.raises(SolutionFileError) as err:
            read_solution(tmp_path / "s.json")
        assert str(err.value) == f"s.json: {message}"

    def test_json_largest_integers_still_read(self, tmp_path):
        """The limit is the float64 range itself: the largest float64 written as a
        309-digit integer is read as that float, one digit more is refused."""
        import sys as _sys

        result = dict(sf.solved("h2-sto-3g-rhf"))
        top = str(int(_sys.float_info.max))
        assert len(top) == 309
        text = json.dumps(dict(result, energy="TOP"), default=lambda a: a.tolist())
        (tmp_path / "s.json").write_text(text.replace('"TOP"', "-" + top))
        assert read_solution(tmp_path / "s.json")["energy"] == -_sys.float_info.max
        (tmp_path / "s.json").write_text(text.replace('"TOP"', "-" + top + "0"))
        with pytest.raises(SolutionFileError):
            read_solution(tmp_path / "s.json")

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
        # synthetic coefficients and orbital energies (invented, not a computed result)
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
        from harness.catalogue.references import reference_for

        result = sf.solved("water-sto-3g-rhf")
        ref_case = __import__("harness.catalogue.cases", fromlist=["x"]).load_catalogue().case(
            "water-sto-3g-rhf")
        case, extracted = check_result(sf.write_npz(tmp_path / "s.npz", result),
                                       geometry=ref_case.geometry_file, basis="STO-3G",
                                       method="RHF")
        assert case.name == "water-crawford-sto-3g-rhf"
        np.testing.assert_allclose(case.coordinates, ref_case.coordinates, atol=1e-12)
        reference, source = reference_for(ref_case)
        checks = judge(case.problem(), extracted, reference).checks
        assert [c.name for c in checks if c.passed is False] == []
        assert source == "stored"

    def test_bad_method(self, tmp_path):
        xyz = tmp_path / "h2.xyz"
        xyz.write_text("2\nH2 units=bohr\nH 0 0 0\nH 0 0 1.4\n")
        with pytest.raises(CaseError) as err:
            check_result(tmp_path / "s.npz", geometry=xyz, basis="sto-3g", method="mp2")
        assert str(err.value) == "h2-sto-3g-mp2: method: must be one of rhf, uhf, rohf, rks, uks, roks, got 'mp2'"

    def test_errors_are_harness_errors(self):
        assert issubclass(SolutionFileError, HarnessError)


class TestResultCase:
    def test_defaults_and_validation(self, tmp_path):
        from harness.run.files import result_case

        xyz = tmp_path / "OH radical.xyz"
        xyz.write_text("2\nOH units=bohr\nO 0 0 0\nH 0 0 1.83\n")
        case = result_case(geometry=xyz, basis="6-31G*", method="UHF", multiplicity=2)
        assert case.name == "oh-radical-6-31gd-uhf"
        assert case.coordinates[1, 2] == 1.83 and case.problem().n_alpha == 5
        with pytest.raises(CaseError) as err:
            result_case(geometry=xyz, basis="sto-3g", method="rhf")
        assert str(err.value) == ("oh-radical-sto-3g-rhf: multiplicity: multiplicity 1 is "
                                  "impossible with 9 electrons")
