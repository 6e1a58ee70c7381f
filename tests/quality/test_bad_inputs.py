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

from harness.errors import HarnessError  # noqa: E402
from harness.evaluate import evaluate  # noqa: E402
from harness.external import CommandPlugin  # noqa: E402
from harness.solution import MAX_ARRAY_ELEMENTS, extract  # noqa: E402

PY = sys.executable
CASE = "h2-sto-3g-rhf"


def outcome(plugin, case=CASE) -> str:
    """The one-line reason the case fails: the plug-in's error, or the first failed check."""
    try:
        raw = plugin(sf.problem(case))
    except HarnessError as exc:
        return str(exc)
    failed = [c for c in evaluate(sf.problem(case), extract(raw)) if c.passed is False]
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


def history_wrong_shape(tmp):
    result = good()
    result["history"] = np.zeros((4, 3))
    return copy_plugin(sf.write_npz(tmp / "h.npz", result)), CASE


def escaping_symlink(tmp):
    return CommandPlugin(f"{PY} {sf.BAD_CODE} escape --out {{solution}}"), CASE


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
    (history_wrong_shape, "history: must be an (n, 2) array of (energy, error), got shape "
                          "(4, 3)", "solution.npz: "),
    (escaping_symlink, "solution path solution.npz escapes the scratch directory (it resolves "
                       "to /", ""),
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


def test_a_correct_file_passes(tmp_path):
    """The same path with a correct file passes: the catalogue's failures are the defects'."""
    assert outcome(copy_plugin(sf.write_npz(tmp_path / "ok.npz", good()))) == "passed"
