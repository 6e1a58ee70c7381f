"""Solution files: an SCF result written to disk, read into the plug-in contract.

A code that is not Python (or that ran elsewhere) hands the harness its result as a
file. :func:`read_solution` reads one into the mapping a Python plug-in would return
(the keys of ``harness.contract.solution``), ready for ``harness.contract.solution.extract``. Formats,
chosen by the file's suffix:

``.npz``
    ``numpy.savez`` archive, one array per key (``energy`` as a 0-d array). Read with
    ``allow_pickle=False``: object arrays are refused. Each array's header is read
    before its data, so a header declaring an absurd size is refused unread.
``.json``
    A JSON object with the keys of the contract: numbers and nested lists of numbers,
    ``converged`` true/false, ``iterations`` an integer, ``history`` a list of
    ``{"energy": .., "error": ..}`` records (or ``[energy, error]`` pairs). Optional
    ``"format": "scf-harness-solution/1"`` and ``"units": {"energy": "hartree",
    "length": "bohr"}``; anything else in ``units`` is refused.
``.h5`` / ``.hdf5``
    One dataset per key at the file's root (scalars may also be root attributes),
    stored in the file itself: soft and external links, external storage and virtual
    datasets are refused. Needs the optional package h5py.
``.molden``
    Orbitals, occupations and orbital energies from a Molden file (read with pyscf's
    Molden reader, which puts the AOs in pyscf's order and handles the [5D]/[7F]/[6D]/
    [10F] tags), plus a small JSON file with at least ``{"energy": ...}`` (default: the
    same name with ``.json``). Molden files lose charge and spin, and may be written in
    another basis: the atoms, the number of AOs, the overlap, the electron counts per
    spin and Tr(PS) are checked against the case before anything else.

Atomic units throughout: energies, orbital energies and Fock matrices in hartree (Eh),
lengths in bohr. Every problem raises a one-line :class:`SolutionFileError` naming
the file and, where there is one, the key.
"""

from __future__ import annotations

import json
import math
import re
import sys
import zipfile
import zlib
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from harness.contract.errors import CaseError, HarnessError
from harness.contract.solution import BASIS_KEY, OPTIONAL_TEXT_KEYS
from harness.contract.solution import (HISTORY_KEY, KNOWN_KEYS, MAX_ARRAY_ELEMENTS, READABLE_KINDS,
                              REQUIRED_KEYS, extract)

#: Format tag a JSON solution may carry (optional; any other tag is refused).
SOLUTION_FORMAT = "scf-harness-solution/1"
#: Suffixes :func:`read_solution` understands.
SUFFIXES = (".npz", ".json", ".h5", ".hdf5", ".molden")
#: Largest JSON file read (bytes): about 20 characters per number at the array limit.
MAX_JSON_BYTES = 20 * MAX_ARRAY_ELEMENTS
#: Unit names accepted in a JSON solution's ``units`` object.
ACCEPTED_UNITS = {"energy": ("hartree", "eh"), "length": ("bohr",)}
#: Largest distance (bohr) between an atom in a Molden file and in the case. Molden
#: writers print coordinates with 6 to 14 decimals.
MOLDEN_GEOMETRY_TOLERANCE = 1e-5
#: max|S_file − S_case| allowed between the overlap of the Molden file's basis and the
#: case's: Molden writers print exponents and contraction coefficients with ~10
#: significant digits, so a larger difference means another basis (or AO order).
MOLDEN_OVERLAP_TOLERANCE = 1e-6
#: |Tr(Pσ S) − Nσ| allowed right after reading a Molden file (electrons). Coefficients
#: are printed with ≥ 10 digits; a wrong AO normalisation convention is off by ≥ 1e-2.
MOLDEN_ELECTRON_COUNT_TOLERANCE = 1e-6

#: Most digits an integer in a JSON solution may have: one more and it exceeds the
#: largest float64 (1.8e308, 309 digits), so it cannot be a number the harness reads.
MAX_JSON_INT_DIGITS = len(str(int(sys.float_info.max)))

SCALAR_KEYS = ("energy", "converged", "iterations", "xc_energy")
#: Keys holding text (``basis``: the NWChem-format text of the basis the code used, or a
#: path to it, relative paths taken from the solution file's directory; Kohn–Sham
#: ``functional`` and ``grid``): a string in JSON, a 0-d string array in npz, a string
#: dataset or attribute in HDF5.
TEXT_KEYS = (BASIS_KEY,) + OPTIONAL_TEXT_KEYS
_SPHERICAL_TAGS = ("[5D]", "[5D7F]", "[5D10F]", "[7F]", "[9G]")
_CARTESIAN_TAGS = ("[6D]", "[6D10F]", "[10F]", "[15G]")


class SolutionFileError(HarnessError):
    """A solution file cannot be read: ``case`` is the file's name, ``field`` the key."""

    def __init__(self, message: str, *, file: str, key: str | None = None):
        super().__init__(message, case=file, field=key)
        self.file = file
        self.key = key


# --------------------------------------------------------------------------- values


def _numeric(name: str, key: str, arr: np.ndarray):
    """A numeric array from a file (0-d arrays of scalar keys become Python scalars;
    text keys become str)."""
    if key in TEXT_KEYS:
        return _text(name, key, arr)
    if arr.dtype.hasobject:
        raise SolutionFileError("is an object array (pickled Python objects are refused)",
                                file=name, key=key)
    if arr.dtype.kind not in READABLE_KINDS:
        raise SolutionFileError(f"has dtype {arr.dtype}, not a number", file=name, key=key)
    if arr.size > MAX_ARRAY_ELEMENTS:
        raise SolutionFileError(f"has {arr.size} elements, more than the limit "
                                f"{MAX_ARRAY_ELEMENTS}", file=name, key=key)
    if key in SCALAR_KEYS:
        if arr.size != 1:
            raise SolutionFileError(f"must be a single value, got shape {arr.shape}",
                                    file=name, key=key)
        return arr.reshape(()).item()
    if key == HISTORY_KEY:
        if arr.ndim != 2 or arr.shape[1] != 2:
            raise SolutionFileError(f"must be an (n, 2) array of (energy, error), got shape "
                                    f"{arr.shape}", file=name, key=key)
        return [{"energy": float(e), "error": float(g)} for e, g in arr]
    return arr


def _text(name: str, key: str, value) -> str:
    """A text key's value from a file: one string."""
    if isinstance(value, np.ndarray):
        if value.size != 1 or value.dtype.kind not in "USO":
            raise SolutionFileError(f"must be one string, got {value.dtype} array of shape "
                                    f"{value.shape}", file=name, key=key)
        value = value.reshape(()).item()
    if isinstance(value, bytes):
        value = value.decode("utf-8", "replace")
    if not isinstance(value, str):
        raise SolutionFileError(f"must be a string, got {type(value).__name__}", file=name,
                                key=key)
    return value


def _check_required(name: str, out: Mapping[str, Any], found) -> None:
    for key in REQUIRED_KEYS:
        if key not in out:
            import difflib

            close = difflib.get_close_matches(key, [str(k) for k in found], n=1)
            hint = f" (found {close[0]!r})" if close else \
                f" (keys found: {', '.join(sorted(map(str, found))) or 'none'})"
            raise SolutionFileError(f"missing{hint}", file=name, key=key)


def _check_nonempty(path: Path, name: str) -> None:
    try:
        size = path.stat().st_size
    except FileNotFoundError:
        raise SolutionFileError("file not found", file=name) from None
    except OSError as exc:
        raise SolutionFileError(f"cannot read ({exc.strerror or type(exc).__name__})",
                                file=name) from None
    if path.is_dir():
        raise SolutionFileError("is a directory", file=name)
    if not path.is_file():
        raise SolutionFileError("is not a regular file", file=name)
    if size == 0:
        raise SolutionFileError("empty file (0 bytes)", file=name)


# --------------------------------------------------------------------------- .npz


def _npy_header(fp, name: str, key: str):
    fmt = np.lib.format
    try:
        version = fmt.read_magic(fp)
        if version == (1, 0):
            return fmt.read_array_header_1_0(fp)
        if version == (2, 0):
            return fmt.read_array_header_2_0(fp)
    except (ValueError, EOFError, OSError, zipfile.BadZipFile, zlib.error) as exc:
        raise SolutionFileError(f"unreadable .npy header ({str(exc).splitlines()[0][:80]})",
                                file=name, key=key) from None
    raise SolutionFileError(f"unsupported .npy format version {version}", file=name, key=key)


def read_npz(path) -> dict[str, Any]:
    """Read a ``numpy.savez`` archive: ``{key: array or scalar}`` (unknown keys kept).

    Each member's header is checked (no object dtype, numeric kind, at most
    MAX_ARRAY_ELEMENTS elements) before its data are read, without pickle.
    """
    path = Path(path)
    name = path.name
    _check_nonempty(path, name)
    try:
        archive = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError, EOFError) as exc:
        raise SolutionFileError(f"not a readable .npz archive, truncated or corrupt "
                                f"({type(exc).__name__})", file=name) from None
    out: dict[str, Any] = {}
    with archive:
        for info in archive.infolist():
            if info.is_dir():
                continue
            if not info.filename.endswith(".npy"):
                raise SolutionFileError(f"member {info.filename!r} is not a .npy array",
                                        file=name)
            key = info.filename[:-4]
            with archive.open(info) as fp:
                shape, _, dtype = _npy_header(fp, name, key)
            if dtype.hasobject:
                raise SolutionFileError("is an object array (pickled Python objects are "
                                        "refused)", file=name, key=key)
            size = math.prod(shape)
            if size > MAX_ARRAY_ELEMENTS:
                raise SolutionFileError(f"declares shape {tuple(shape)} ({size} elements), "
                                        f"more than the limit {MAX_ARRAY_ELEMENTS}",
                                        file=name, key=key)
            if dtype.kind not in READABLE_KINDS and not (key in TEXT_KEYS
                                                         and dtype.kind in "US"):
                raise SolutionFileError(f"has dtype {dtype}, not a number", file=name, key=key)
            try:
                with archive.open(info) as fp:
                    arr = np.lib.format.read_array(fp, allow_pickle=False)
            except (ValueError, EOFError, OSError, zipfile.BadZipFile, zlib.error) as exc:
                raise SolutionFileError(f"is truncated or corrupt "
                                        f"({str(exc).splitlines()[0][:80]})",
                                        file=name, key=key) from None
            out[key] = arr
    return out


# --------------------------------------------------------------------------- .json


class _HugeInteger:
    """Stands for an integer in a JSON file with more than MAX_JSON_INT_DIGITS digits
    (or beyond the float64 range): kept as its digit count, never converted."""

    def __init__(self, digits: int):
        self.digits = digits

    def __repr__(self) -> str:
        return f"<an integer of {self.digits} digits>"


def _json_int(text: str):
    """``parse_int`` for :func:`json.loads`: an int, or :class:`_HugeInteger` when the
    value cannot be a float64 (Python also refuses to convert very long digit strings)."""
    digits = len(text.lstrip("-"))
    if digits <= MAX_JSON_INT_DIGITS:
        value = int(text)
        if abs(value) <= sys.float_info.max:
            return value
    return _HugeInteger(digits)


def _out_of_range(value) -> str:
    return f"is an integer of {value.digits} digits, beyond the float range"


def _first_bad_leaf(value, where: str = ""):
    """(path, predicate) of the first leaf of a nested list that is not a number."""
    if isinstance(value, list):
        for i, item in enumerate(value):
            bad = _first_bad_leaf(item, f"{where}[{i}]")
            if bad:
                return bad
        return None
    if isinstance(value, _HugeInteger):
        return where, _out_of_range(value)
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return where, f"is {_json_kind(value)}, not a number"
    return None


def _json_value(name: str, key: str, value):
    if isinstance(value, _HugeInteger):
        raise SolutionFileError(_out_of_range(value), file=name, key=key)
    if key == "basis":  # NWChem-format text (or a path), read by extract
        if not isinstance(value, str):
            raise SolutionFileError(f"must be NWChem-format basis text, got "
                                    f"{_json_kind(value)}", file=name, key=key)
        return value
    if key in ("converged",):
        if not isinstance(value, bool):
            raise SolutionFileError(f"must be true or false, got {_json_kind(value)}",
                                    file=name, key=key)
        return value
    if key == "iterations":
        if isinstance(value, bool) or not isinstance(value, int):
            raise SolutionFileError(f"must be an integer, got {_json_kind(value)}",
                                    file=name, key=key)
        return value
    if key == "energy":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise SolutionFileError(f"must be a number, got {_json_kind(value)}",
                                    file=name, key=key)
        return float(value)
    if key == HISTORY_KEY:
        return _json_history(name, value)
    if key in TEXT_KEYS:
        return _text(name, key, value)
    if key == "xc_energy":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise SolutionFileError(f"must be a number, got {_json_kind(value)}",
                                    file=name, key=key)
        return float(value)
    if not isinstance(value, list):
        raise SolutionFileError(f"must be a (nested) list of numbers, got "
                                f"{_json_kind(value)}", file=name, key=key)
    bad = _first_bad_leaf(value)
    if bad:
        raise SolutionFileError(f"element {bad[0] or '(top)'} {bad[1]}", file=name, key=key)
    try:
        arr = np.array(value, dtype=np.float64)
    except ValueError:
        raise SolutionFileError("is a ragged list (rows of different lengths)", file=name,
                                key=key) from None
    return _numeric(name, key, arr)


def _json_history(name: str, value):
    if not isinstance(value, list):
        raise SolutionFileError(f"must be a list of records, got {_json_kind(value)}",
                                file=name, key=HISTORY_KEY)
    records = []
    for k, record in enumerate(value):
        if isinstance(record, list) and len(record) == 2:
            record = {"energy": record[0], "error": record[1]}
        if not isinstance(record, dict):
            raise SolutionFileError(f"record {k} must be {{\"energy\": .., \"error\": ..}} or "
                                    f"[energy, error]", file=name, key=HISTORY_KEY)
        for field in ("energy", "error"):
            x = record.get(field)
            if isinstance(x, _HugeInteger):
                raise SolutionFileError(f"record {k}: {field!r} {_out_of_range(x)}",
                                        file=name, key=HISTORY_KEY)
            if x is not None and (isinstance(x, bool) or not isinstance(x, (int, float))):
                raise SolutionFileError(f"record {k}: {field!r} is {_json_kind(x)}, not a "
                                        f"number", file=name, key=HISTORY_KEY)
        records.append({"energy": record.get("energy"), "error": record.get("error")})
    return records


def _json_kind(value) -> str:
    if value is None:
        return "null"
    return _article({str: "str", bool: "bool", dict: "object", list: "list"}.get(
        type(value), type(value).__name__))


def _article(kind: str) -> str:
    return {"str": "a string", "bool": "a boolean", "object": "an object", "list": "a list",
            "null": "null", "int": "an integer", "float": "a number"}.get(kind, kind)


def _json_object(path: Path, name: str) -> dict:
    _check_nonempty(path, name)
    size = path.stat().st_size
    if size > MAX_JSON_BYTES:
        raise SolutionFileError(f"is {size} bytes, more than the limit {MAX_JSON_BYTES}",
                                file=name)
    try:
        data = json.loads(path.read_bytes().decode("utf-8"), parse_int=_json_int)
    except UnicodeDecodeError:
        raise SolutionFileError("is not UTF-8 text", file=name) from None
    except json.JSONDecodeError as exc:
        raise SolutionFileError(f"not valid JSON (line {exc.lineno} column {exc.colno}: "
                                f"{exc.msg})", file=name) from None
    except RecursionError:
        raise SolutionFileError("not valid JSON (nested too deeply)", file=name) from None
    except (ValueError, OverflowError) as exc:  # anything else the decoder refuses
        raise SolutionFileError(f"not a readable JSON file ({str(exc).splitlines()[0][:80]})",
                                file=name) from None
    if not isinstance(data, dict):
        raise SolutionFileError(f"must hold a JSON object, got {_json_kind(data)}", file=name)
    tag = data.get("format")
    if tag is not None and tag != SOLUTION_FORMAT:
        raise SolutionFileError(f"format tag is {tag!r}, expected {SOLUTION_FORMAT!r}",
                                file=name, key="format")
    units = data.get("units")
    if units is not None:
        if not isinstance(units, dict):
            raise SolutionFileError("must be an object such as {\"energy\": \"hartree\"}",
                                    file=name, key="units")
        for quantity, unit in units.items():
            allowed = ACCEPTED_UNITS.get(quantity)
            if allowed is None or not isinstance(unit, str) or unit.lower() not in allowed:
                raise SolutionFileError(f"{quantity} in {unit!r}: the harness reads atomic "
                                        f"units only (energy hartree, length bohr)",
                                        file=name, key="units")
    return data


def read_json(path, *, require=True) -> dict[str, Any]:
    """Read a JSON solution (see the module docstring); ``require``: the required keys
    must be present (False for the energy file that accompanies a Molden file)."""
    path = Path(path)
    name = path.name
    data = _json_object(path, name)
    out = {}
    for key in KNOWN_KEYS:
        if key in data and data[key] is not None:
            out[key] = _json_value(name, key, data[key])
    if require:
        _check_required(name, out, data)
    return out


# --------------------------------------------------------------------------- .h5


def read_h5(path) -> dict[str, Any]:
    """Read an HDF5 solution: one root dataset per key (scalars: dataset or attribute).

    Only data stored in this file are read: a key that is a soft or external link, or
    a dataset with external storage or a virtual layout, is refused unread.
    """
    path = Path(path)
    name = path.name
    _check_nonempty(path, name)
    try:
        import h5py
    except ImportError:
        raise SolutionFileError("reading .h5 needs h5py (pip install h5py)", file=name) from None
    try:
        handle = h5py.File(path, "r")
    except OSError as exc:
        raise SolutionFileError(f"not a readable HDF5 file, truncated or corrupt "
                                f"({str(exc).splitlines()[0][:80]})", file=name) from None
    out: dict[str, Any] = {}
    with handle:
        found = list(handle.keys()) + list(handle.attrs.keys())
        for key in KNOWN_KEYS:
            link = handle.get(key, getlink=True)
            if link is not None:
                _h5_own_link(h5py, name, key, link)
                obj = handle[key]
                if not isinstance(obj, h5py.Dataset):
                    kind = "a group" if isinstance(obj, h5py.Group) else \
                        f"a {type(obj).__name__.lower()}"
                    raise SolutionFileError(f"is {kind}, not a dataset", file=name, key=key)
                _h5_own_data(name, key, obj)
                if key in TEXT_KEYS:
                    out[key] = _text(name, key, np.asarray(obj[()]))
                    continue
                if obj.dtype.kind not in READABLE_KINDS:
                    raise SolutionFileError(f"has dtype {obj.dtype}, not a number",
                                            file=name, key=key)
                size = math.prod(obj.shape or ())
                if size > MAX_ARRAY_ELEMENTS:
                    raise SolutionFileError(f"declares shape {obj.shape} ({size} elements), "
                                            f"more than the limit {MAX_ARRAY_ELEMENTS}",
                                            file=name, key=key)
                try:
                    value = np.asarray(obj[()])
                except (OSError, ValueError, TypeError) as exc:
                    raise SolutionFileError(f"is unreadable ({str(exc).splitlines()[0][:80]})",
                                            file=name, key=key) from None
                out[key] = _numeric(name, key, value)
            elif key in TEXT_KEYS and key in handle.attrs:
                out[key] = _text(name, key, handle.attrs[key])
            elif key in SCALAR_KEYS and key in handle.attrs:
                out[key] = _numeric(name, key, np.asarray(handle.attrs[key]))
    _check_required(name, out, found)
    return out


def _h5_own_link(h5py, name: str, key: str, link) -> None:
    """Refuse a key that is a soft, external or user-defined link: only a dataset
    stored in the file itself is read (a link may point outside the file)."""
    if isinstance(link, h5py.HardLink):
        return
    if isinstance(link, h5py.SoftLink):
        what = f"a soft link to {link.path!r}"
    elif isinstance(link, h5py.ExternalLink):
        what = f"an external link to {link.filename}:{link.path}"
    else:
        what = f"a link ({type(link).__name__})"
    raise SolutionFileError(f"is {what}, not a dataset (links are refused)", file=name,
                            key=key)


def _h5_own_data(name: str, key: str, obj) -> None:
    """Refuse a dataset whose data live in other files (external storage, virtual)."""
    if obj.external:
        raise SolutionFileError("keeps its data in an external file, not in this one "
                                "(refused)", file=name, key=key)
    if obj.is_virtual:
        raise SolutionFileError("is a virtual dataset mapped from other files (refused)",
                                file=name, key=key)


# --------------------------------------------------------------------------- Molden


def _molden_cartesian(text: str) -> bool:
    """True if the Molden file's d/f/g functions are cartesian (the format's default)."""
    tags = {m.group(0).upper() for m in re.finditer(r"\[[0-9]+[A-Za-z][0-9A-Za-z]*\]", text)}
    if tags & set(_SPHERICAL_TAGS):
        return False
    return True


def read_molden(path, problem, *, energy_file=None) -> dict[str, Any]:
    """Read orbitals from a Molden file and the energy from a JSON file beside it.

    ``problem`` (a ``harness.contract.problem.Problem``, bohr) is required: the file is mapped
    onto its AO order and checked against it. ``energy_file`` defaults to the Molden
    file's name with ``.json``; it holds at least ``{"energy": E}`` (Eh) and may add
    any contract key except ``coefficients`` and ``occupations`` (e.g. ``converged``,
    ``fock``, ``density``). Orbital energies come from the Molden ``Ene=`` lines (Eh)
    unless the energy file gives them. Raises :class:`SolutionFileError` when the file
    is unreadable or does not describe this case: other atoms or geometry, spherical
    vs cartesian functions, another number of AOs or another basis (overlap), another
    electron count (charge) or spin, or Tr(Pσ S) ≠ Nσ with the case's overlap.
    """
    path = Path(path)
    name = path.name
    if problem is None:
        raise SolutionFileError("reading a Molden file needs the case (its basis, charge and "
                                "spin)", file=name)
    _check_nonempty(path, name)
    try:
        text = path.read_text(encoding="utf-8", errors="replace")
    except OSError as exc:
        raise SolutionFileError(f"cannot read ({exc.strerror or type(exc).__name__})",
                                file=name) from None
    if "[GTO]" not in text.upper() or "[MO]" not in text.upper():
        missing = "[GTO]" if "[GTO]" not in text.upper() else "[MO]"
        raise SolutionFileError(f"not a Molden file with orbitals: no {missing} section",
                                file=name)
    case_mol = problem.to_pyscf()
    l_max = int(max(case_mol._bas[:, 1])) if case_mol.nbas else 0
    file_cart = _molden_cartesian(text)
    if l_max >= 2 and file_cart != problem.cartesian:
        tag = "cartesian (6D/10F, the Molden default)" if file_cart else "spherical ([5D]/[7F])"
        want = "cartesian (6D/10F)" if problem.cartesian else "spherical (5D/7F)"
        raise SolutionFileError(f"its d/f functions are {tag} but the case uses {want} "
                                f"functions", file=name, key="basis")
    try:
        import contextlib
        import io

        from harness.backend.mole import load_molden

        with contextlib.redirect_stderr(io.StringIO()):
            mol, mo_energy, mo_coeff, mo_occ = load_molden(path)
    except Exception as exc:  # pyscf's parser raises anything on a broken file
        raise SolutionFileError(f"not a readable Molden file ({type(exc).__name__}: "
                                f"{str(exc).splitlines()[0][:80] if str(exc) else ''})",
                                file=name) from None
    if mo_coeff is None:
        raise SolutionFileError("has no orbitals in its [MO] section", file=name, key="MO")

    _molden_atoms(name, mol, problem)
    if mol.nao != case_mol.nao:
        raise SolutionFileError(f"has {mol.nao} basis functions, the case ({problem.basis}, "
                                f"{'cartesian' if problem.cartesian else 'spherical'}) has "
                                f"{case_mol.nao}", file=name, key="basis")
    from harness.backend.integrals import overlap

    s_case = overlap(case_mol)
    s_file = overlap(mol)
    diff = np.abs(s_file - s_case)
    worst = np.unravel_index(int(np.argmax(diff)), diff.shape)
    if diff[worst] > MOLDEN_OVERLAP_TOLERANCE:
        labels = problem.ao_labels
        raise SolutionFileError(
            f"its basis is not the case's {problem.basis}: max|S_file − S_case| = "
            f"{diff[worst]:.1e} > {MOLDEN_OVERLAP_TOLERANCE:.0e} at ({labels[worst[0]].strip()}, "
            f"{labels[worst[1]].strip()})", file=name, key="basis")

    unrestricted = isinstance(mo_coeff, tuple)
    if problem.method == "uhf" and not unrestricted:
        raise SolutionFileError("the case is uhf but the file holds one set of orbitals "
                                "(restricted)", file=name, key="MO")
    if problem.method != "uhf" and unrestricted:
        raise SolutionFileError(f"the case is {problem.method} but the file holds separate "
                                f"alpha and beta orbitals", file=name, key="MO")
    if unrestricted:
        if mo_coeff[0].shape != mo_coeff[1].shape:
            raise SolutionFileError(f"has {mo_coeff[0].shape[1]} alpha and "
                                    f"{mo_coeff[1].shape[1]} beta orbitals; the harness needs "
                                    f"the same number", file=name, key="MO")
        c = np.stack([np.asarray(x, dtype=float) for x in mo_coeff])
        occ = np.stack([np.asarray(x, dtype=float) for x in mo_occ])
        eps = np.stack([np.asarray(x, dtype=float) for x in mo_energy])
    else:
        c = np.asarray(mo_coeff, dtype=float)
        occ = np.asarray(mo_occ, dtype=float)
        eps = np.asarray(mo_energy, dtype=float)
    if c.shape[-2] != case_mol.nao:
        raise SolutionFileError(f"its orbitals have {c.shape[-2]} AO coefficients, the case "
                                f"has {case_mol.nao} AOs", file=name, key="MO")
    _molden_electrons(name, problem, c, occ, s_case)

    out: dict[str, Any] = {"coefficients": c, "occupations": occ, "orbital_energies": eps}
    energy_path = Path(energy_file) if energy_file is not None else path.with_suffix(".json")
    if not (energy_path.exists() or energy_path.is_symlink()):
        raise SolutionFileError(f"needs its energy in a JSON file: {energy_path.name} not "
                                f"found (give the energy file: --energy-file, or "
                                f"energy_file= from Python)", file=name, key="energy")
    extra = read_json(energy_path, require=False)
    for key in ("coefficients", "occupations"):
        if key in extra:
            raise SolutionFileError(f"holds {key!r}, which the Molden file already gives",
                                    file=energy_path.name, key=key)
    if "energy" not in extra:
        raise SolutionFileError("missing (the total energy in Eh)", file=energy_path.name,
                                key="energy")
    out.update(extra)
    return out


def _molden_atoms(name: str, mol, problem) -> None:
    numbers = [int(round(z)) for z in mol.atom_charges()]
    if numbers != [int(z) for z in problem.numbers]:
        raise SolutionFileError(f"holds atoms {numbers}, the case has "
                                f"{[int(z) for z in problem.numbers]}", file=name, key="Atoms")
    dist = np.linalg.norm(np.asarray(mol.atom_coords()) - problem.coordinates, axis=1)
    k = int(np.argmax(dist))
    if dist[k] > MOLDEN_GEOMETRY_TOLERANCE:
        raise SolutionFileError(f"atom {k + 1} lies {dist[k]:.1e} bohr from its position in "
                                f"the case (> {MOLDEN_GEOMETRY_TOLERANCE:.0e})", file=name,
                                key="Atoms")


def _molden_electrons(name: str, problem, c, occ, s) -> None:
    """Electron counts per spin from the occupations, then Tr(Pσ S) with the case's S."""
    if problem.method == "uhf":
        n_alpha, n_beta = (float(x) for x in occ.sum(axis=1))
    else:
        n_beta = float(np.sum(occ >= 1.5)) if problem.method == "rohf" else float(occ.sum()) / 2
        n_alpha = float(occ.sum()) - n_beta
    total = n_alpha + n_beta
    if abs(total - problem.n_electrons) > 0.5:
        charge = problem.charge + problem.n_electrons - round(total)
        raise SolutionFileError(
            f"its occupations hold {total:g} electrons, the case has {problem.n_electrons} "
            f"(charge {problem.charge}); Molden files carry no charge: it looks written for "
            f"charge {charge:+d}", file=name, key="Occup")
    if problem.method != "rhf" and (abs(n_alpha - problem.n_alpha) > 0.5
                                    or abs(n_beta - problem.n_beta) > 0.5):
        mult = round(n_alpha - n_beta) + 1
        raise SolutionFileError(
            f"its occupations hold {n_alpha:g} alpha and {n_beta:g} beta electrons "
            f"(multiplicity {mult}); the case has multiplicity {problem.multiplicity} "
            f"({problem.n_alpha} alpha, {problem.n_beta} beta)", file=name, key="Occup")
    cs = c if c.ndim == 3 else c[None]
    ns = occ if occ.ndim == 2 else occ[None]
    for spin, (ci, ni) in enumerate(zip(cs, ns)):
        trace = float(np.einsum("pi,i,qi,pq->", ci, ni, ci, s))
        want = float(ni.sum())
        if abs(trace - want) > MOLDEN_ELECTRON_COUNT_TOLERANCE:
            which = ("alpha " if spin == 0 else "beta ") if cs.shape[0] == 2 else ""
            raise SolutionFileError(
                f"Tr(PS) = {trace:.6f} {which}electrons with the case's overlap, the "
                f"occupations hold {want:g}: the orbitals are not normalised in the case's "
                f"basis (another AO normalisation convention?)", file=name, key="MO")


# --------------------------------------------------------------------------- entry


def read_solution(path, *, problem=None, energy_file=None) -> dict[str, Any]:
    """Read a solution file into the plug-in contract's mapping (Eh, bohr).

    The suffix chooses the format (``.npz``, ``.json``, ``.h5``/``.hdf5``, ``.molden``;
    see the module docstring). ``problem`` is needed for Molden files and
    ``energy_file`` is used only by them. The result is ready for
    ``harness.contract.solution.extract``. Raises :class:`SolutionFileError` (one line).
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix == ".npz":
        data = read_npz(path)
        out = {k: _numeric(path.name, k, v) for k, v in data.items() if k in KNOWN_KEYS}
        _check_required(path.name, out, data)
        return _basis_beside(path, out)
    if suffix == ".json":
        return _basis_beside(path, read_json(path))
    if suffix in (".h5", ".hdf5"):
        return _basis_beside(path, read_h5(path))
    if suffix == ".molden":
        return read_molden(path, problem, energy_file=energy_file)
    raise SolutionFileError(f"unknown suffix {path.suffix or '(none)'!r} (known: "
                            f"{', '.join(SUFFIXES)})", file=path.name)


def _basis_beside(path: Path, out: dict) -> dict:
    """``out`` with a ``basis`` that is a one-line relative path naming a file next to
    the solution file ``path`` made absolute (extract reads the text from it)."""
    value = out.get(BASIS_KEY)
    if isinstance(value, str) and value.strip() and "\n" not in value.strip():
        name = Path(value.strip()).expanduser()
        if not name.is_absolute() and (path.parent / name).is_file():
            out = {**out, BASIS_KEY: str(path.parent / name)}
    return out


def _default_name(geometry: Path, basis: str, method: str) -> str:
    raw = f"{geometry.stem}-{basis}-{method}".lower().replace("*", "d")
    name = re.sub(r"[^a-z0-9+._-]+", "-", raw).strip("-._+")
    return name or "result"


def result_case(*, geometry, basis: str, method: str, charge: int = 0,
                multiplicity: int = 1, cartesian: bool = False, name: str | None = None,
                note: str = "", functional: str | None = None):
    """A ``harness.catalogue.cases.Case`` from an XYZ geometry and options (for ``check-result``).

    ``geometry`` is an XYZ file (ångström, or bohr with ``units=bohr`` on its comment
    line; see ``harness.catalogue.cases.read_xyz``); the case's coordinates are in bohr. ``name``
    defaults to ``<xyz stem>-<basis>-<method>``. ``functional``: Kohn–Sham methods only
    (rks/uks/roks need it; a libxc name as pyscf spells it). Raises a one-line
    ``CaseError`` for a bad geometry or option (validated as ``Problem.create`` validates).
    """
    from harness.catalogue.cases import NAME_PATTERN, Case, _geometry_source, read_xyz

    geometry = Path(geometry)
    numbers, coordinates, comment = read_xyz(geometry)
    method = str(method).strip().lower()
    basis = str(basis).strip().lower()
    name = name if name is not None else _default_name(geometry, basis, method)
    if not NAME_PATTERN.match(name):
        raise CaseError(f"{name!r} must be lower-case letters, digits and + . _ -",
                        field="name")
    case = Case(name=name, numbers=numbers, coordinates=coordinates, charge=int(charge),
                multiplicity=int(multiplicity), basis=basis, cartesian=bool(cartesian),
                method=method, note=note, geometry_source=_geometry_source(comment),
                geometry_file=str(geometry),
                functional=(functional or "").strip().lower())
    case.problem()  # validates charge, multiplicity, method and basis
    return case


def check_result(path, *, geometry, basis: str, method: str, charge: int = 0,
                 multiplicity: int = 1, cartesian: bool = False, name: str | None = None,
                 energy_file=None, convergence: float | None = None,
                 functional: str | None = None):
    """A case built from an XYZ geometry and options (:func:`result_case`), and the
    solution file read for it (:func:`read_solution`).

    ``convergence`` (default ``harness.contract.problem.DEFAULT_CONVERGENCE``) is the one the
    problem is built with; evaluate with ``case.problem(convergence)``. Returns
    ``(case, extracted)``: a ``harness.catalogue.cases.Case`` and the solution through
    ``harness.contract.solution.extract``. Raises ``CaseError`` for bad options or geometry,
    :class:`SolutionFileError` for the file.
    """
    from harness.contract.problem import DEFAULT_CONVERGENCE

    case = result_case(geometry=geometry, basis=basis, method=method, charge=charge,
                       multiplicity=multiplicity, cartesian=cartesian, name=name,
                       note=f"check-result of {Path(path).name}", functional=functional)
    problem = case.problem(DEFAULT_CONVERGENCE if convergence is None else convergence)
    raw = read_solution(path, problem=problem, energy_file=energy_file)
    return case, extract(raw)
