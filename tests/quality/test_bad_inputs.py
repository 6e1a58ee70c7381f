"""A catalogue of malformed solutions, files and misbehaving external codes.

Each entry is run the way the harness runs an external code (CommandPlugin: the
program runs in a scratch directory and the harness reads what it wrote) and must
give a failed case with the one-line reason asserted below (verbatim prefix), never a
traceback. File defects are produced by a stand-in program that copies a prepared
file into place, so every entry goes through the same path. Energies in Eh.
"""

from __future__ import annotations

import io
import sys
import zipfile
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "external"))
import solution_files as sf  # noqa: E402

from harness.contract.errors import HarnessError  # noqa: E402
from harness.verdict.judge import judge  # noqa: E402
from harness.run.external import CommandPlugin  # noqa: E402
from harness.contract.solution import MAX_ARRAY_ELEMENTS, extract  # noqa: E402

PY = sys.executable
CASE = "h2-sto-3g-rhf"


def outcome(plugin, case=CASE) -> str:
    """The one-line reason the case fails: the plug-in's error, or the first failed check."""
    try:
        raw = plugin(sf.problem(case))
    except HarnessError as exc:
        return str(exc)
    failed = [c for c in judge(sf.problem(case), extract(raw), None).checks if c.passed is False]
    return failed[0].message if failed else "passed"


def copy_plugin(prepared: Path, name: str = "solution.npz", **options) -> CommandPlugin:
    return CommandPlugin(f"{PY} {sf.BAD_CODE} copy --from {prepared} --out {{solution}}",
                         solution=name, **options)


def good(case=CASE) -> dict:
    return dict(sf.solved(case))


def npy_bytes(header: dict, data: bytes = b"") -> bytes:
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(buf, header)
    return buf.getvalue() + data


def zip_with(path: Path, members: dict[str, bytes], arrays: dict) -> Path:
    with zipfile.ZipFile(path, "w") as zf:
        for key, value in arrays.items():
            buf = io.BytesIO()
            np.lib.format.write_array(buf, np.asarray(value))
            zf.writestr(f"{key}.npy", buf.getvalue())
        for name, data in members.items():
            zf.writestr(name, data)
    return path


# Each builder takes tmp_path and returns (plugin, case); EXPECTED gives the prefix.
def truncated_npz(tmp):
    full = sf.write_npz(tmp / "full.npz", good()).read_bytes()
    (tmp / "cut.npz").write_bytes(full[: len(full) // 2])
    return copy_plugin(tmp / "cut.npz"), CASE


def object_array_npz(tmp):
    result = good()
    result["coefficients"] = np.array([[{"pickled": 1}, 0], [0, 0]], dtype=object)
    np.savez(tmp / "obj.npz", **result)
    return copy_plugin(tmp / "obj.npz"), CASE


def wrong_dtype_npz(tmp):
    result = good()
    result["coefficients"] = np.array([["0.5", "0.5"], ["0.5", "-0.5"]])
    np.savez(tmp / "str.npz", **result)
    return copy_plugin(tmp / "str.npz"), CASE


def wrong_shape_npz(tmp):
    result = good()
    result["coefficients"] = np.eye(3)
    return copy_plugin(sf.write_npz(tmp / "shape.npz", result)), CASE


def nan_in_npz(tmp):
    result = good()
    fock = np.array(result["fock"])
    fock[0, 1] = np.nan
    result["fock"] = fock
    return copy_plugin(sf.write_npz(tmp / "nan.npz", result)), CASE


def string_energy_json(tmp):
    result = good()
    result["energy"] = str(result["energy"])
    return copy_plugin(sf.write_json(tmp / "s.json", result), "solution.json"), CASE


def string_element_json(tmp):
    result = good()
    c = np.asarray(result["coefficients"]).tolist()
    c[0][1] = "0.5"
    result["coefficients"] = c
    return copy_plugin(sf.write_json(tmp / "s.json", result), "solution.json"), CASE


def nan_energy_json(tmp):
    result = good()
    result["energy"] = float("nan")
    return copy_plugin(sf.write_json(tmp / "s.json", result), "solution.json"), CASE


def truncated_json(tmp):
    (tmp / "cut.json").write_text('{"energy": -1.1, "coefficients": [[0.5')
    return copy_plugin(tmp / "cut.json", "solution.json"), CASE


def empty_file(tmp):
    (tmp / "empty.npz").write_bytes(b"")
    return copy_plugin(tmp / "empty.npz"), CASE


def text_named_npz(tmp):
    (tmp / "t.npz").write_text("energy = -1.1\n")
    return copy_plugin(tmp / "t.npz"), CASE


def huge_array_header(tmp):
    result = good()
    result.pop("density")
    header = {"descr": "<f8", "fortran_order": False, "shape": (100000, 100000)}
    path = zip_with(tmp / "huge.npz", {"density.npy": npy_bytes(header)}, result)
    return copy_plugin(path), CASE


def truncated_member(tmp):
    result = good()
    result.pop("fock")
    header = {"descr": "<f8", "fortran_order": False, "shape": (2, 2)}
    path = zip_with(tmp / "short.npz", {"fock.npy": npy_bytes(header, b"\0" * 8)}, result)
    return copy_plugin(path), CASE


def h5_missing_key(tmp):
    pytest.importorskip("h5py")
    path = sf.write_h5(tmp / "s.h5", good(), skip=("occupations",))
    return copy_plugin(path, "solution.h5"), CASE


def h5_truncated(tmp):
    pytest.importorskip("h5py")
    full = sf.write_h5(tmp / "full.h5", good()).read_bytes()
    (tmp / "cut.h5").write_bytes(full[:1000])
    return copy_plugin(tmp / "cut.h5", "solution.h5"), CASE


def molden_wrong_electron_count(tmp):
    case = "water-sto-3g-rhf"
    result = good(case)
    occ = np.array(result["occupations"])
    occ[4] = 0.0  # the HOMO emptied: 8 electrons, as if for the dication
    result["occupations"] = occ
    path = sf.write_molden(tmp / "w.molden", sf.problem(case).to_pyscf(), result)
    return copy_plugin(path, "solution.molden"), case  # refused before its energy is read


def molden_5d_for_6d_case(tmp):
    case = "ammonia-6-31gd-rhf"
    path = sf.write_molden(tmp / "a.molden", sf.problem(case).to_pyscf(), good(case))
    path.write_text(path.read_text().replace("[MO]", "[5D]\n[MO]"))
    return copy_plugin(path, "solution.molden"), case


def molden_without_orbitals(tmp):
    (tmp / "m.molden").write_text("[Molden Format]\n[Atoms] AU\nH 1 1 0 0 0\n")
    (tmp / "m.json").write_text('{"energy": -1.0}')
    return copy_plugin(tmp / "m.molden", "solution.molden"), CASE


def h5_with_fock(tmp, make_fock):
    """The h2 solution as solution.h5 with ``fock`` made by ``make_fock(h5py, file)``."""
    h5py = pytest.importorskip("h5py")
    path = tmp / "s.h5"
    with h5py.File(path, "w") as fh:
        for key, value in good().items():
            if key != "fock":
                fh[key] = np.asarray(value)
        make_fock(h5py, fh)
    return copy_plugin(path, "solution.h5"), CASE


def h5_dangling_soft_link(tmp):
    return h5_with_fock(tmp, lambda h5py, fh: fh.__setitem__("fock",
                                                             h5py.SoftLink("/nonexistent")))


def h5_external_link(tmp):
    return h5_with_fock(tmp, lambda h5py, fh: fh.__setitem__(
        "fock", h5py.ExternalLink("/etc/passwd", "/fock")))


def json_with(tmp, key, text):
    """The h2 solution as solution.json with ``key``'s value written as raw ``text``."""
    doc = {k: (np.asarray(v).tolist() if isinstance(v, np.ndarray) else v)
           for k, v in good().items()}
    doc[key] = "@VALUE@"
    (tmp / "s.json").write_text(__import__("json").dumps(doc).replace('"@VALUE@"', text))
    return copy_plugin(tmp / "s.json", "solution.json"), CASE


def json_5000_digit_energy(tmp):
    return json_with(tmp, "energy", "-" + "1" * 5000)


def json_negative_iterations(tmp):
    return json_with(tmp, "iterations", "-5")


def npz_with(tmp, **changes):
    result = good()
    result.update(changes)
    np.savez(tmp / "s.npz", **result)
    return copy_plugin(tmp / "s.npz"), CASE


def npz_string_energy(tmp):
    return npz_with(tmp, energy=np.array("-1.1167"))


def npz_datetime_energy(tmp):
    return npz_with(tmp, energy=np.datetime64("2024-05-01"))


def solution_is_a_directory(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} dir --out {{solution}}"), CASE


def history_wrong_shape(tmp):
    result = good()
    result["history"] = np.zeros((4, 3))
    return copy_plugin(sf.write_npz(tmp / "h.npz", result)), CASE


def escaping_symlink(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} escape --out {{solution}}"), CASE


def hard_link(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} hardlink --out {{solution}}"), CASE


def moved_in(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} moved --out {{solution}}"), CASE


def exits_3(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} exit3"), CASE


def segfaults(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} segv"), CASE


def times_out(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} sleep", timeout=1), CASE


def writes_nothing(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} nothing --out {{solution}}"), CASE


def writes_two_files(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} two"), CASE


def program_missing(tmp):
    return CommandPlugin("no-such-scf-code --in {problem}"), CASE


def long_stderr_line(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} noisy"), CASE


CATALOGUE = [
    (truncated_npz, "not a readable .npz archive, truncated or corrupt (BadZipFile) | "
                    "stderr: (empty)", "solution.npz: "),
    (object_array_npz, "coefficients: is an object array (pickled Python objects are "
                       "refused)", "solution.npz: "),
    (wrong_dtype_npz, "coefficients: has dtype <U4, not a number", "solution.npz: "),
    (wrong_shape_npz, "well-formed: 'coefficients' has shape (3, 3), expected (nao, nmo) with "
                      "nao = 2 and 1 ≤ nmo ≤ 2 (h2-sto-3g-rhf)", ""),
    (nan_in_npz, "well-formed: 'fock' has 1 non-finite element (h2-sto-3g-rhf)", ""),
    (string_energy_json, "energy: must be a number, got a string", "solution.json: "),
    (string_element_json, "coefficients: element [0][1] is a string, not a number",
     "solution.json: "),
    (nan_energy_json, "well-formed: 'energy' is nan (h2-sto-3g-rhf)", ""),
    (truncated_json, "not valid JSON (line 1 column 39: Expecting ',' delimiter)", "solution.json: "),
    (empty_file, "empty file (0 bytes) | stderr: (empty)", "solution.npz: "),
    (text_named_npz, "not a readable .npz archive, truncated or corrupt (BadZipFile)",
     "solution.npz: "),
    (huge_array_header, f"density: declares shape (100000, 100000) (10000000000 elements), "
                        f"more than the limit {MAX_ARRAY_ELEMENTS}", "solution.npz: "),
    (truncated_member, "fock: is truncated or corrupt (EOF: reading array data",
     "solution.npz: "),
    (h5_missing_key, "occupations: missing (keys found: coefficients, converged, "
                     "core_hamiltonian, density, energy, fock, iterations, orbital_energies, "
                     "overlap)", "solution.h5: "),
    (h5_truncated, "not a readable HDF5 file, truncated or corrupt", "solution.h5: "),
    (molden_wrong_electron_count, "Occup: its occupations hold 8 electrons, the case has 10 "
                                  "(charge 0); Molden files carry no charge: it looks written "
                                  "for charge +2", "solution.molden: "),
    (molden_5d_for_6d_case, "basis: its d/f functions are spherical ([5D]/[7F]) but the case "
                            "uses cartesian (6D/10F) functions", "solution.molden: "),
    (molden_without_orbitals, "not a Molden file with orbitals: no [GTO] section",
     "solution.molden: "),
    (h5_dangling_soft_link, "fock: is a soft link to '/nonexistent', not a dataset (links are "
                            "refused) | stderr: (empty)", "solution.h5: "),
    (h5_external_link, "fock: is an external link to /etc/passwd:/fock, not a dataset (links "
                       "are refused)", "solution.h5: "),
    (json_5000_digit_energy, "energy: is an integer of 5000 digits, beyond the float range",
     "solution.json: "),
    (json_negative_iterations, "well-formed: 'iterations' must be a count (an int ≥ 0), got -5 "
                               "(h2-sto-3g-rhf)", ""),
    (npz_string_energy, "energy: has dtype <U7, not a number", "solution.npz: "),
    (npz_datetime_energy, "energy: has dtype datetime64[D], not a number", "solution.npz: "),
    (solution_is_a_directory, "is a directory | stderr: (empty)", "solution.npz: "),
    (history_wrong_shape, "history: must be an (n, 2) array of (energy, error), got shape "
                          "(4, 3)", "solution.npz: "),
    (escaping_symlink, "solution path solution.npz escapes the scratch directory (it resolves "
                       "to /", ""),
    (hard_link, "solution file solution.npz has 2 links (a hard link to a file elsewhere?): "
                "refused; write the file itself | stderr: (empty)", ""),
    (moved_in, "solution file solution.npz was not written during the run (last modified ",
     ""),
    (exits_3, "exited with status 3 | stderr: bad_code: exiting with status 3", ""),
    (segfaults, "killed by signal SIGSEGV | stderr: ", ""),
    (times_out, "timed out after 1 s | stderr: bad_code: sleeping", ""),
    (writes_nothing, "wrote no solution file (expected solution.npz) | stderr: (empty)", ""),
    (writes_two_files, "wrote several solution files (solution.npz, solution.json): write "
                       "one | stderr: (empty)", ""),
    (program_missing, "cannot start 'no-such-scf-code': not found on PATH | stderr: (empty)",
     ""),
    (long_stderr_line, "exited with status 1 | stderr: …" + "x" * 199, ""),
]


@pytest.mark.parametrize("build, reason, prefix", CATALOGUE,
                         ids=[entry[0].__name__ for entry in CATALOGUE])
def test_bad_input_fails_the_case_in_one_line(tmp_path, build, reason, prefix):
    plugin, case = build(tmp_path)
    line = outcome(plugin, case)
    assert line.startswith(prefix + reason), line
    assert "\n" not in line and "Traceback" not in line


def test_catalogue_is_large_enough():
    assert len(CATALOGUE) >= 15


def returning(**changes):
    """A Python plug-in returning the h2 solution with ``changes``."""
    def plugin(problem):
        return dict(good(), **changes)
    return plugin


class Opaque:
    """A number-like object of a user's own (it has __float__, but no numeric dtype)."""

    def __float__(self):
        return -1.1


# Python plug-ins' return values: (changes, the one-line reason). The same defect in a
# file is refused too (string_energy_json, npz_string_energy, npz_datetime_energy,
# json_negative_iterations above): a value is read the same way whatever carried it.
RETURNS = [
    ({"energy": 10 ** 400}, "well-formed: 'energy' must be a number within the float range, "
                            "got an int of 1329 bits (h2-sto-3g-rhf)"),
    ({"energy": -10 ** 400}, "well-formed: 'energy' must be a number within the float range, "
                             "got an int of 1329 bits (h2-sto-3g-rhf)"),
    ({"energy": "-1.1167"}, "well-formed: 'energy' must be a number, got str (h2-sto-3g-rhf)"),
    ({"energy": np.str_("-1.1167")}, "well-formed: 'energy' must be a number, got str_ "
                                     "(h2-sto-3g-rhf)"),
    ({"energy": np.array(["-1.1167"])}, "well-formed: 'energy' has non-numeric dtype <U7 "
                                        "(h2-sto-3g-rhf)"),
    ({"energy": np.datetime64("2024-05-01")}, "well-formed: 'energy' has non-numeric dtype "
                                              "datetime64[D] (h2-sto-3g-rhf)"),
    ({"energy": np.timedelta64(3, "s")}, "well-formed: 'energy' has non-numeric dtype "
                                         "timedelta64[s] (h2-sto-3g-rhf)"),
    ({"energy": np.void(b"\x00" * 8)}, "well-formed: 'energy' has non-numeric dtype |V8 "
                                       "(h2-sto-3g-rhf)"),
    ({"energy": Opaque()}, "well-formed: 'energy' must be a number, got Opaque (h2-sto-3g-rhf)"),
    ({"energy": np.array(True)}, "well-formed: 'energy' must be a number, got bool "
                                 "(h2-sto-3g-rhf)"),
    ({"energy": complex(-1.1, 1e-3)}, "well-formed: 'energy' must be a real number, got "
                                      "complex128 (h2-sto-3g-rhf)"),
    ({"iterations": -5}, "well-formed: 'iterations' must be a count (an int ≥ 0), got -5 "
                         "(h2-sto-3g-rhf)"),
    ({"iterations": np.int32(-1)}, "well-formed: 'iterations' must be a count (an int ≥ 0), "
                                   "got -1 (h2-sto-3g-rhf)"),
    ({"history": [{"energy": "-1.1", "error": 1e-3}]},
     "well-formed: 'history' record 0: 'energy' must be a number, got str (h2-sto-3g-rhf)"),
    ({"history": [{"energy": -1.1, "error": 10 ** 400}]},
     "well-formed: 'history' record 0: 'error' must be a number within the float range, got "
     "an int of 1329 bits (h2-sto-3g-rhf)"),
    ({"history": [{"energy": np.datetime64("2024"), "error": 1e-3}]},
     "well-formed: 'history' record 0: 'energy' has non-numeric dtype datetime64[Y] "
     "(h2-sto-3g-rhf)"),
    ({"fock": np.full((2, 2), np.timedelta64(1, "s"))},
     "well-formed: 'fock' has non-numeric dtype timedelta64[s] (h2-sto-3g-rhf)"),
]


@pytest.mark.parametrize("changes, reason", RETURNS, ids=[
    f"{next(iter(c))}={type(next(iter(c.values()))).__name__}-{k}"
    for k, (c, _) in enumerate(RETURNS)])
def test_bad_return_value_names_its_key(changes, reason):
    """Every bad value a Python plug-in returns fails the case with its key named."""
    assert outcome(returning(**changes)) == reason


def renamed(old: str, new: str):
    """A Python plug-in returning the h2 solution with key ``old`` renamed ``new``."""
    def plugin(problem):
        sol = good()
        sol[new] = sol.pop(old)
        return sol
    return plugin


@pytest.mark.parametrize("old, new", [("fock", "Fock"), ("density", "densty"),
                                      ("occupations", "occupation"),
                                      ("orbital_energies", "orbital_energy")])
def test_a_misspelt_key_is_named_not_ignored(old, new):
    """Without this, the checks that need the key would silently drop out of the table
    and the case could pass on the rest."""
    assert outcome(renamed(old, new)) == (f"well-formed: '{old}' not given, but '{new}' was: "
                                          f"did you mean '{old}'? (keys are exact and "
                                          "lower-case) (h2-sto-3g-rhf)")


@pytest.mark.parametrize("old, new", [("fock", "fock_matrix"), ("overlap", "Overlap_AO"),
                                      ("density", "density_mat")])
def test_a_key_with_a_restating_suffix_is_named_not_ignored(old, new):
    """'fock_matrix' is too far from 'fock' for difflib (0.53) but plainly meant it."""
    assert outcome(renamed(old, new)) == (f"well-formed: '{old}' not given, but '{new}' was: "
                                          f"did you mean '{old}'? (keys are exact and "
                                          "lower-case) (h2-sto-3g-rhf)")


@pytest.mark.parametrize("key", ["fock", "history", "converged", "energy"])
def test_a_key_given_as_none_is_named_not_dropped(key):
    """'fock': None used to drop the stationarity column silently; like a JSON null it
    fails well-formed, naming the key (so every numerical check is reported skipped)."""
    assert outcome(returning(**{key: None})) == (
        f"well-formed: '{key}' is None: leave out a key you have no value for (None is not "
        f"read as absent) (h2-sto-3g-rhf)")


def test_unrelated_extra_keys_are_still_ignored():
    sol = dict(good(), mo_energy=[1.0], e_tot=-1.0, kinetic_energy=0.5, note="lab run 7")
    assert outcome(lambda problem: sol) == "passed"


def test_numbers_of_numeric_kinds_still_read():
    """The counterpart: numpy scalars, 1-element arrays, zero-imaginary complex numbers
    and integers within the float range are energies; 0 is an iteration count."""
    for energy, value in ((np.float32(-1.25), -1.25), (np.int64(-1), -1.0), ([-1.25], -1.25),
                          (np.array([[-1.25]]), -1.25), (complex(-1.25, 0.0), -1.25),
                          (-(10 ** 300), -1e300)):
        assert extract({"energy": energy}).energy == value
    assert extract({"iterations": 0}).iterations == 0
    assert extract({"iterations": np.uint8(7)}).iterations == 7


def test_huge_energy_through_the_runner(tmp_path):
    """Through the runner (the plug-in in its own process), energy = 10**400 fails the
    well-formed check with the key named, not as an unreadable return value."""
    from harness.catalogue.cases import load_catalogue
    from harness.run.runner import run_cases
    from harness.checks.tolerances import Tolerances

    plugin = tmp_path / "huge.py"
    plugin.write_text("from harness.testing.example_scf import solve\n\n\n"
                      "def run(problem):\n"
                      "    return dict(solve(problem), energy=10 ** 400)\n")
    result = run_cases([load_catalogue().case(CASE)], f"{plugin}:run",
                       tolerances=Tolerances(), timeout=60.0).cases[0]
    assert result.error is None and not result.passed
    assert result.failures[0].message == ("well-formed: 'energy' must be a number within the "
                                          "float range, got an int of 1329 bits "
                                          "(h2-sto-3g-rhf)")


def test_a_correct_file_passes(tmp_path):
    """The same path with a correct file passes: the catalogue's failures are the defects'."""
    assert outcome(copy_plugin(sf.write_npz(tmp_path / "ok.npz", good()))) == "passed"


def test_huge_numbers_are_written_with_an_exponent():
    """An energy of 1e308 is not written with 300+ digits: magnitudes ≥ 1e6 get an
    exponent with the same number of decimals; ordinary values keep their fixed decimals."""
    from harness.catalogue.cases import load_catalogue
    from harness.catalogue.references import reference_for

    reference, _ = reference_for(load_catalogue().case(CASE))
    raw = dict(good(), energy=1e308)
    failed = {c.name: c.message for c in judge(sf.problem(CASE), extract(raw), reference).checks
              if c.passed is False}
    assert failed == {
        "energy-consistency": "energy-consistency: |E − E[P]| = 1.0e+308 > 1.0e-08 "
                              "(h2-sto-3g-rhf), E = 1.0000000000e+308, E[P] = -1.1167143251 Eh",
        "reference-energy": "reference-energy: |E − E_ref| = 1.0e+308 > 1.0e-06 "
                            "(h2-sto-3g-rhf), E = 1.0000000000e+308 Eh is 1.000e+308 Eh above "
                            "E_ref = -1.1167143251 Eh"}


def test_fixed_switches_to_an_exponent_at_a_million():
    from harness.contract.results import fixed

    assert fixed(-1.1167143251) == "-1.1167143251"
    assert fixed(999999.5, 2) == "999999.50"
    assert fixed(-1e6, 6) == "-1.000000e+06"
    assert fixed(2.5e300, 4, sign=True) == "+2.5000e+300"
    assert fixed(float("nan")) == "nan" and fixed(float("-inf"), 2) == "-inf"
