"""The plug-in contract, output side: what an SCF code returns, and its normalisation.

A plug-in returns a mapping (or an object with the same attributes). Arrays may be
numpy arrays or nested lists; unrestricted quantities carry a leading axis of 2
(alpha first). Energies in hartree (Eh), arrays in the AO basis (atomic units).
:func:`extract` reads it into a frozen :class:`Solution`; see docs/contract.md.
"""

from __future__ import annotations

import dataclasses
import difflib
from typing import Any, Mapping

import numpy as np

REQUIRED_KEYS = ("energy", "coefficients", "occupations")
OPTIONAL_ARRAY_KEYS = ("orbital_energies", "density", "fock", "overlap", "core_hamiltonian",
                       "kinetic", "nuclear_attraction", "two_electron", "xc_potential")
OPTIONAL_SCALAR_KEYS = ("converged", "iterations", "xc_energy")
#: Kohn–Sham text keys: ``functional`` (only when the code used another functional than
#: the problem's: a failure, clearly worded) and ``grid`` (GRID_MODES).
OPTIONAL_TEXT_KEYS = ("functional", "grid")
#: ``grid``: "pinned" (integrated on ``problem.grid``, the default when absent) or "own"
#: (the code's own quadrature; XC tolerances then come from a measured grid sensitivity).
GRID_MODES = ("pinned", "own")
#: ``history``: a list of per-iteration records (mappings or objects) with ``energy``
#: (Eh) and ``error`` (the code's own convergence measure); extracted as an (n, 2)
#: float array, NaN where a record lacks a field.
HISTORY_KEY = "history"
#: ``basis``: the basis the code actually used, as NWChem-format text (or the path of a
#: file holding it); the harness then builds the reference in exactly that basis.
BASIS_KEY = "basis"
KNOWN_KEYS = (REQUIRED_KEYS + OPTIONAL_ARRAY_KEYS + OPTIONAL_SCALAR_KEYS
              + (HISTORY_KEY, BASIS_KEY) + OPTIONAL_TEXT_KEYS)

#: Longest basis text accepted (characters); guards memory against garbage.
MAX_BASIS_TEXT = 5_000_000


def _read_basis(value: Any):
    """NWChem-format basis text, read from ``value`` itself or from the file it names
    (one line, an existing path); :class:`Malformed` when it is not a string, the file is
    unreadable, or the text holds no shell line. Whether it parses for the case's
    elements is judged with the problem (``harness.verdict.judge``)."""
    import os

    if isinstance(value, os.PathLike):
        value = os.fspath(value)
    if not isinstance(value, str):
        return Malformed(f"must be NWChem-format basis text or a path, got "
                         f"{type(value).__name__}")
    text = value
    if "\n" not in value.strip() and value.strip():
        from pathlib import Path

        path = Path(value.strip()).expanduser()
        if path.is_file():
            try:
                text = path.read_text(encoding="utf-8")
            except (OSError, UnicodeDecodeError) as exc:
                return Malformed(f"names {str(path)!r}, which is unreadable "
                                 f"({type(exc).__name__})")
    if len(text) > MAX_BASIS_TEXT:
        return Malformed(f"has {len(text)} characters, more than the limit {MAX_BASIS_TEXT}")
    shells = [line for line in text.splitlines()
              if len(line.split()) == 2 and line.split()[1].upper()[:1] in "SPDFGHISPL"
              and line.split()[0].isalpha()]
    if not shells:
        return Malformed("holds no NWChem shell line ('<element> <S|P|D|…>'): not "
                         "NWChem-format basis text, nor the path of a file with it")
    return text

#: Largest array accepted from a plug-in (elements); guards memory against garbage.
MAX_ARRAY_ELEMENTS = 50_000_000


@dataclasses.dataclass(frozen=True)
class Malformed:
    """Marks a returned value that could not be read; ``reason`` says why."""

    reason: str


#: dtype kinds read as numbers: bool, signed and unsigned integer, float (complex is
#: read as its real part when the imaginary part is zero). Others (datetime,
#: timedelta, object, str, bytes, void) are refused for every numeric key.
NUMERIC_KINDS = "biuf"
#: dtype kinds a solution array may have at all (complex included; checked further on).
READABLE_KINDS = NUMERIC_KINDS + "c"


def _dtype_problem(arr: np.ndarray) -> str | None:
    """Why an array's dtype is not numeric (None if it is)."""
    if arr.dtype == object:
        return "is a ragged or non-numeric array"
    if arr.dtype.kind not in READABLE_KINDS:
        return f"has non-numeric dtype {arr.dtype}"
    return None


def _read_array(key: str, value: Any):
    if isinstance(value, (str, bytes)):
        return Malformed(f"is a {type(value).__name__}, not a numeric array")
    try:
        arr = np.asarray(value)
    except Exception as exc:  # ragged lists, odd objects
        return Malformed(f"cannot be read as an array ({type(exc).__name__})")
    problem = _dtype_problem(arr)
    if problem is not None:
        return Malformed(problem)
    if arr.dtype.kind == "c":
        if np.any(np.abs(arr.imag) > 0):
            return Malformed("is complex; the harness handles real orbitals only")
        arr = arr.real
    if arr.size > MAX_ARRAY_ELEMENTS:
        return Malformed(f"has {arr.size} elements, more than the limit {MAX_ARRAY_ELEMENTS}")
    return np.array(arr, dtype=np.float64)


def _read_number(value: Any):
    """One real number as a float, or :class:`Malformed`: the shared reader of every
    numeric scalar (``energy``, the ``history`` fields).

    A bool, a string (even ``"-1.1167"``: a string is not a number), a non-numeric
    dtype (datetime, timedelta, object, str, void), a complex number with a non-zero
    imaginary part, more than one element, or an int beyond the float range is refused.
    """
    if isinstance(value, (bool, np.bool_)):
        return Malformed("must be a number, got bool")
    if isinstance(value, (str, bytes)):
        return Malformed(f"must be a number, got {type(value).__name__}")
    if isinstance(value, int):  # Python ints are unbounded, floats are not
        try:
            return float(value)
        except OverflowError:
            return Malformed(f"must be a number within the float range, got an int of "
                             f"{value.bit_length()} bits")
    try:
        arr = np.asarray(value)
    except Exception:
        return Malformed(f"must be a number, got {type(value).__name__}")
    if arr.dtype == object:
        return Malformed(f"must be a number, got {type(value).__name__}")
    if arr.dtype.kind == "b":
        return Malformed("must be a number, got bool")
    if arr.dtype.kind == "c" and np.any(arr.imag != 0):
        return Malformed(f"must be a real number, got {arr.dtype}")
    read = _read_array("", arr)
    if isinstance(read, Malformed):
        return read
    if read.size != 1:
        return Malformed(f"must be a single number, got shape {read.shape}")
    return float(read.reshape(()))


def _read_scalar(key: str, value: Any):
    if key == "converged":
        if isinstance(value, (bool, np.bool_)):
            return bool(value)
        return Malformed(f"must be a bool, got {type(value).__name__}")
    if key == "iterations":
        if isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_)):
            if value < 0:
                return Malformed(f"must be a count (an int ≥ 0), got {int(value)}")
            return int(value)
        return Malformed(f"must be an int, got {type(value).__name__}")
    return _read_number(value)  # energy, xc_energy


def _read_text(key: str, value: Any):
    if isinstance(value, bytes):
        value = value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray) and value.ndim == 0 and value.dtype.kind in "US":
        value = str(value)
    if not isinstance(value, str) or not value.strip():
        return Malformed(f"must be a non-empty string, got {type(value).__name__}")
    text = value.strip().lower()
    if key == "grid" and text not in GRID_MODES:
        return Malformed(f"must be one of {', '.join(GRID_MODES)}, got {value!r}")
    return text


def _read_history(value: Any):
    if isinstance(value, (str, bytes, Mapping)) or not hasattr(value, "__len__"):
        return Malformed("must be a list of per-iteration records with 'energy' and 'error'")
    if len(value) > MAX_HISTORY:
        return Malformed(f"has {len(value)} records, more than the limit {MAX_HISTORY}")
    rows = []
    for k, record in enumerate(value):
        row = []
        for field in ("energy", "error"):
            if isinstance(record, Mapping):
                x = record.get(field)
            else:
                x = getattr(record, field, None)
            if x is None:
                row.append(float("nan"))
                continue
            number = _read_number(x)
            if isinstance(number, Malformed):
                return Malformed(f"record {k}: '{field}' {number.reason}")
            row.append(number)
        rows.append(row)
    return np.array(rows, dtype=np.float64).reshape(len(rows), 2)


#: Longest convergence history accepted (records).
MAX_HISTORY = 100_000


Value = Any  # np.ndarray | float | bool | int | Malformed | None (absent)


@dataclasses.dataclass(frozen=True, eq=False)
class Solution:
    """One code's answer for one case, read by :func:`extract`: one field per contract key.

    A field is None when the code did not give the key, a :class:`Malformed` marker when
    it gave something unreadable (the well-formed check names it), and otherwise plain
    data: float64 arrays in the AO basis (atomic units; unrestricted quantities with a
    leading spin axis of 2, alpha first), floats in Eh, a bool, an int. After the
    well-formed check has passed, every present field is of its documented type.

    Fields: ``energy`` (Eh); ``coefficients`` (nao, nmo) or (2, nao, nmo);
    ``occupations`` like the orbitals; ``orbital_energies`` (Eh); ``density`` and
    ``fock`` (nao, nao) or (2, nao, nao); ``overlap``, ``core_hamiltonian``,
    ``kinetic``, ``nuclear_attraction`` (nao, nao); ``two_electron`` (nao,)*4 in
    chemists' notation (ij|kl); ``converged``; ``iterations``; ``history`` an (n, 2)
    array of (energy, error) per iteration, NaN where a record lacks a field;
    ``basis`` the NWChem-format text of the basis the code used (a str).
    Kohn–Sham: ``xc_energy`` E_xc (Eh); ``xc_potential`` V_xc like ``fock``;
    ``functional`` (lower-case; given only when it differs from the problem's);
    ``grid`` "pinned" or "own".
    Frozen and free of plug-in objects, so it crosses processes as plain data
    (:meth:`as_dict` / :meth:`from_dict`).
    """

    energy: Value = None
    coefficients: Value = None
    occupations: Value = None
    orbital_energies: Value = None
    density: Value = None
    fock: Value = None
    overlap: Value = None
    core_hamiltonian: Value = None
    kinetic: Value = None
    nuclear_attraction: Value = None
    two_electron: Value = None
    xc_potential: Value = None
    converged: Value = None
    iterations: Value = None
    xc_energy: Value = None
    history: Value = None
    basis: Value = None
    functional: Value = None
    grid: Value = None

    def as_dict(self) -> dict[str, Any]:
        """The given fields as ``{key: value}`` (absent ones left out)."""
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self)
                if getattr(self, f.name) is not None}

    @classmethod
    def from_dict(cls, values: Mapping[str, Any]) -> "Solution":
        """The inverse of :meth:`as_dict`; an unknown key raises ``TypeError``."""
        unknown = sorted(set(values) - set(KNOWN_KEYS))
        if unknown:
            raise TypeError(f"unknown solution keys: {', '.join(map(str, unknown))}")
        return cls(**dict(values))

    def keys(self) -> tuple[str, ...]:
        """The names of the given fields, in contract order."""
        return tuple(self.as_dict())

    def malformed(self) -> dict[str, Malformed]:
        """The fields that could not be read, with their reasons."""
        return {k: v for k, v in self.as_dict().items() if isinstance(v, Malformed)}

    def replace(self, **changes: Any) -> "Solution":
        """A copy with some fields changed (``dataclasses.replace``)."""
        return dataclasses.replace(self, **changes)


def extract(raw: Any) -> Solution:
    """Read the known keys from a plug-in's return value into a :class:`Solution`.

    Each given key becomes plain data: float64 arrays, floats, bools, ints, or
    :class:`Malformed` markers. A contract key whose value is None is Malformed (the
    well-formed check names it) rather than dropped: a ``'fock': None`` is more often a
    value never assigned than a Fock matrix meant to be absent, and silently dropping it
    would make the checks on it vanish from the table. Unknown keys are ignored, except a near miss of a
    contract key that is itself absent (``"Fock"``, ``"densty"``, ``"occupation"``:
    :func:`near_miss`): that key is marked Malformed, so the well-formed check names it
    instead of the checks on it silently disappearing. Raises ``TypeError`` if ``raw``
    is neither a mapping nor an object with any of the known attributes.
    """
    if isinstance(raw, Mapping):
        getter = {k: raw[k] for k in KNOWN_KEYS if k in raw}
    else:
        getter = {k: getattr(raw, k) for k in KNOWN_KEYS if hasattr(raw, k)}
        if not getter:
            raise TypeError(f"the plug-in returned {type(raw).__name__}, not a mapping with "
                            f"the keys {', '.join(REQUIRED_KEYS)}")
    out: dict[str, Any] = {}
    for key, value in getter.items():
        if value is None:  # refused like a JSON null: it may hide a value never assigned
            out[key] = Malformed("is None: leave out a key you have no value for (None is "
                                 "not read as absent)")
            continue
        if key in ("converged", "iterations", "energy", "xc_energy"):
            out[key] = _read_scalar(key, value)
        elif key in OPTIONAL_TEXT_KEYS:
            out[key] = _read_text(key, value)
        elif key == HISTORY_KEY:
            out[key] = _read_history(value)
        elif key == BASIS_KEY:
            out[key] = _read_basis(value)
        elif key == "two_electron" and callable(value):
            # integrals on request: called here, in the plug-in's process
            try:
                out[key] = _read_array(key, value())
            except Exception as exc:
                out[key] = Malformed(f"callable raised {type(exc).__name__}: {exc}")
        else:
            out[key] = _read_array(key, value)
    if isinstance(raw, Mapping):
        for given in raw:
            key = near_miss(given)
            if key is not None and key not in raw and key not in out:
                out[key] = Malformed(f"not given, but {given!r} was: did you mean {key!r}? "
                                     f"(keys are exact and lower-case)")
    return Solution.from_dict(out)


#: A returned key this similar to a contract key (difflib ratio) is taken for a typo of
#: it: "occupation"/"occupations" 0.95, "orbital_energy"/"orbital_energies" 0.87, while
#: unrelated extras such as "mo_energy"/"energy" (0.80) stay ignored.
NEAR_MISS = 0.85


#: Suffixes that only restate what a contract key is ("fock_matrix", "overlap_ao"): the
#: key with one of them is taken for the key (difflib alone rates "fock_matrix" 0.53).
NEAR_MISS_SUFFIXES = ("_matrix", "_matrices", "_mat", "_ao", "_array")


def near_miss(given) -> str | None:
    """The contract key that ``given`` (a returned key that is not one) was probably
    meant to be: equal ignoring case, the key with a suffix of NEAR_MISS_SUFFIXES
    (``fock_matrix``), or difflib-similar by at least NEAR_MISS."""
    if not isinstance(given, str) or given in KNOWN_KEYS:
        return None
    plain = given.strip().lower()
    for key in KNOWN_KEYS:
        if plain == key or any(plain == key + suffix for suffix in NEAR_MISS_SUFFIXES):
            return key
    close = difflib.get_close_matches(given, KNOWN_KEYS, n=1, cutoff=NEAR_MISS)
    return close[0] if close else None
