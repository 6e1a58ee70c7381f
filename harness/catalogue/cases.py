"""The case catalogue: molecules, bases and methods the harness runs, and their suites.

A case is read from a TOML table (``[[case]]``) that points at an XYZ geometry file.
XYZ files are in ångström by the XYZ convention, unless their comment line carries the
token ``units=bohr``. Inside the harness every coordinate is in **bohr**.

The bundled catalogue is ``references/cases.toml``; users can write their own suite
files in the same format (:func:`load_suite_file`), which may also declare case
matrices (``[[matrix]]`` tables: geometries × bases × methods, ``harness.catalogue.matrix``).
"""

from __future__ import annotations

import atexit
import contextlib
import dataclasses
import difflib
import fnmatch
import importlib.resources
import os
import re
import tomllib
from pathlib import Path
from typing import Any

import numpy as np

from harness.contract.errors import CaseError, CaseListError
from harness.contract.problem import DEFAULT_CONVERGENCE, METHODS, Problem, closest_pair
from harness.contract.units import ANGSTROM_IN_BOHR

#: Environment variable naming a reference directory to use instead of the bundled one.
REFERENCES_ENV = "SCF_HARNESS_REFERENCES"

#: Case names become file names (``references/data/<name>.json``): keep them plain.
NAME_PATTERN = re.compile(r"^[a-z0-9][a-z0-9+._-]*$")
#: Longest case name (characters): it becomes a file name and a column of the tables.
MAX_NAME_LENGTH = 80
#: Nuclei in a geometry file closer than this (bohr) are one atom typed twice: no bond
#: is shorter than 1.3 bohr (H₂ has 1.4, H₂⁺ 2.0).
CLOSEST_NUCLEI = 0.1

#: Keys of a ``[[case]]`` table: (type, default). ``...`` marks a required key.
CASE_KEYS: dict[str, tuple[type | tuple[type, ...], Any]] = {
    "name": (str, ...),
    "geometry": (str, ...),
    "basis": (str, ...),
    "method": (str, ...),
    "cartesian": (bool, False),
    "charge": (int, 0),
    "multiplicity": (int, 1),
    "suites": (list, ()),
    "note": (str, ""),
    "functional": (str, ""),
}


#: The package the bundled references are installed as (pyproject.toml maps the repo's
#: top-level ``references/`` folder to it, so a wheel carries it as package data).
REFERENCE_PACKAGE = "harness.catalogue.data"

#: Keeps directories that importlib.resources had to extract (a zipped install) until exit.
_EXTRACTED = contextlib.ExitStack()
_EXTRACTED_DIR: Path | None = None


def _source_tree_references() -> Path | None:
    """The ``references/`` folder beside ``harness/`` when the harness runs from a source
    tree (an editable install, or a checkout on ``PYTHONPATH``), else None.

    Looked at before the installed package, so a checkout on ``PYTHONPATH`` reads its own
    references even when the environment has an editable install of another checkout.
    """
    root = Path(__file__).resolve().parents[2]
    refs = root / "references"
    if (root / "pyproject.toml").is_file() and (refs / "__init__.py").is_file() \
            and (refs / "cases.toml").is_file():
        return refs
    return None


def bundled_reference_dir() -> Path:
    """The references shipped with the harness: from a source tree the repo's top-level
    ``references/`` folder, from a wheel the package data ``harness.catalogue.data``
    (found with importlib.resources)."""
    local = _source_tree_references()
    if local is not None:
        return local
    try:
        root = importlib.resources.files(REFERENCE_PACKAGE)
    except ModuleNotFoundError:
        # Neither a source tree nor an install that carries the data: name where it was
        # looked for, so the "suite file not found" error that follows says something.
        return Path(__file__).resolve().parents[2] / "references"
    if isinstance(root, Path):  # an ordinary install: the files are on disk already
        return root
    # A zipped install (never a pip-installed wheel): extract once, delete at exit.
    # as_file extracts directories from Python 3.12 on.
    global _EXTRACTED_DIR
    if _EXTRACTED_DIR is None:  # pragma: no cover
        try:
            _EXTRACTED_DIR = _EXTRACTED.enter_context(importlib.resources.as_file(root))
        except Exception as exc:
            raise CaseError(f"cannot read the bundled references from {root}: {exc}") from exc
        atexit.register(_EXTRACTED.close)
    return _EXTRACTED_DIR


def default_reference_dir() -> Path:
    """The reference directory: ``$SCF_HARNESS_REFERENCES`` if set, else the bundled
    references (:func:`bundled_reference_dir`: ``cases.toml``, ``geometries/``,
    ``data/``, ``suites/``)."""
    env = os.environ.get(REFERENCES_ENV)
    if env:
        return Path(env)
    return bundled_reference_dir()


# --------------------------------------------------------------------------- XYZ


def _element_number(symbol: str) -> int | None:
    from harness.backend.mole import element_symbols

    symbols = element_symbols()
    if symbol.isdigit():
        z = int(symbol)
        return z if 1 <= z < len(symbols) else None
    wanted = symbol.capitalize()
    try:
        z = symbols.index(wanted)
    except ValueError:
        return None
    return z if z >= 1 else None


def _short(text: str, limit: int = 30) -> str:
    """``repr(text)``, cut to ``limit`` characters with an ellipsis (binary junk in a
    geometry file must not fill the error line)."""
    return repr(text) if len(text) <= limit else repr(text[:limit]) + "…"


def read_xyz(path) -> tuple[tuple[int, ...], np.ndarray, str]:
    """Read an XYZ file: ``(atomic numbers, coordinates in bohr (natm, 3), comment)``.

    Format: a line with the atom count, a comment line, then one ``Symbol x y z`` line
    per atom. Coordinates are in ångström (converted with
    ``bohr = Å × ANGSTROM_IN_BOHR``) unless the comment line contains the token
    ``units=bohr``. Blank lines after the last atom are ignored. Raises a one-line
    :class:`CaseError` naming the file and the line for anything malformed.
    """
    path = Path(path)
    where = str(path)
    try:
        # undecodable bytes (a Latin-1 comment line) become U+FFFD; in an atom line
        # they then fail as an unknown symbol or a bad number, naming the line
        text = path.read_text(encoding="utf-8", errors="replace")
    except FileNotFoundError:
        raise CaseError("geometry file not found", case=where) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise CaseError(f"cannot read geometry file ({type(exc).__name__})", case=where) from None
    lines = text.splitlines()
    if not lines or not lines[0].strip():
        raise CaseError("expected the number of atoms, got an empty line", case=where,
                        field="line 1")
    try:
        count = int(lines[0].strip())
    except ValueError:
        raise CaseError(f"expected the number of atoms, got {_short(lines[0].strip())}",
                        case=where, field="line 1") from None
    if count < 1:
        raise CaseError(f"the number of atoms must be positive, got {count}", case=where,
                        field="line 1")
    if len(lines) < 2:
        raise CaseError("missing the comment line", case=where, field="line 2")
    comment = lines[1].strip()
    scale = ANGSTROM_IN_BOHR
    for token in comment.split():
        if token.lower().startswith("units="):
            unit = token.split("=", 1)[1].lower()
            if unit == "bohr":
                scale = 1.0
            elif unit in ("angstrom", "ångström", "ang"):
                scale = ANGSTROM_IN_BOHR
            else:
                raise CaseError(f"unknown unit {unit!r} (use units=bohr or units=angstrom)",
                                case=where, field="line 2")
    body = lines[2:]
    while body and not body[-1].strip():
        body.pop()
    if len(body) != count:
        raise CaseError(f"says {count} atoms but {len(body)} atom lines follow", case=where,
                        field="line 1")
    numbers, coords = [], []
    for i, line in enumerate(body, start=3):
        fields = line.split()
        if len(fields) < 4:
            raise CaseError(f"expected 'Symbol x y z', got {len(fields)} fields", case=where,
                            field=f"line {i}")
        z = _element_number(fields[0])
        if z is None:
            raise CaseError(f"unknown element symbol {_short(fields[0])}", case=where,
                            field=f"line {i}")
        xyz = []
        for value in fields[1:4]:
            try:
                x = float(value)
            except ValueError:
                raise CaseError(f"coordinate {_short(value)} is not a number", case=where,
                                field=f"line {i}") from None
            if not np.isfinite(x):
                raise CaseError(f"coordinate {value!r} is not finite", case=where,
                                field=f"line {i}")
            xyz.append(x * scale)
        numbers.append(z)
        coords.append(xyz)
    coordinates = np.array(coords, dtype=np.float64)
    i, j, r = closest_pair(coordinates)
    if r < CLOSEST_NUCLEI:
        raise CaseError(f"atoms {i + 1} and {j + 1} are {r:.3g} bohr apart, closer than "
                        f"{CLOSEST_NUCLEI} bohr (one atom given twice?)", case=where,
                        field=f"lines {i + 3} and {j + 3}")
    coordinates.setflags(write=False)
    return tuple(numbers), coordinates, comment


def _geometry_source(comment: str) -> str:
    """The provenance text of an XYZ comment line (after ``source:``, units token removed)."""
    kept = " ".join(t for t in comment.split() if not t.lower().startswith("units="))
    head, sep, tail = kept.partition("source:")
    return tail.strip() if sep else kept


# --------------------------------------------------------------------------- Case


#: Stands in for the pinned grid in :meth:`Case.validate`'s throw-away Problem.
_GRID_NOT_BUILT = object()


@dataclasses.dataclass(frozen=True)
class Case:
    """One catalogue entry: a molecule, a basis and a method.

    Attributes:
        name: the case id, e.g. ``"water-cc-pvdz-rhf"``.
        numbers: atomic numbers (tuple of int).
        coordinates: nuclear positions in **bohr**, read-only float array (natm, 3).
        charge: total charge; multiplicity: 2S + 1.
        basis: pyscf basis name; cartesian: True for cartesian (6D/10F) shells.
        method: "rhf", "uhf", "rohf", "rks", "uks" or "roks".
        functional: Kohn–Sham only: the libxc name as pyscf spells it ("" for HF).
        suites: names of the suites the case belongs to.
        note: why the case is there.
        geometry_source: provenance of the geometry (from the XYZ comment line).
        geometry_file: the XYZ file it was read from ("" if built in code).
    """

    name: str
    numbers: tuple[int, ...]
    coordinates: np.ndarray
    charge: int
    multiplicity: int
    basis: str
    cartesian: bool
    method: str
    suites: tuple[str, ...] = ()
    note: str = ""
    geometry_source: str = ""
    geometry_file: str = ""
    functional: str = ""

    def __post_init__(self):
        coords = np.array(self.coordinates, dtype=np.float64)
        coords.setflags(write=False)
        object.__setattr__(self, "coordinates", coords)
        object.__setattr__(self, "numbers", tuple(int(z) for z in self.numbers))
        object.__setattr__(self, "suites", tuple(self.suites))

    @property
    def id(self) -> str:
        return self.name

    @property
    def n_electrons(self) -> int:
        return sum(self.numbers) - self.charge

    def problem(self, convergence: float = DEFAULT_CONVERGENCE,
                initial_density=None, *, _grid=None) -> Problem:
        """The :class:`Problem` handed to a plug-in (coordinates in bohr)."""
        return Problem.create(name=self.name, numbers=self.numbers,
                              coordinates=self.coordinates, charge=self.charge,
                              multiplicity=self.multiplicity, basis=self.basis,
                              cartesian=self.cartesian, method=self.method,
                              convergence=convergence, initial_density=initial_density,
                              functional=self.functional or None, grid=_grid)

    def validate(self) -> None:
        """Raise ``CaseError`` (naming the case and field) where :meth:`problem` would:
        the same checks, with pyscf building the basis for these elements, but without
        the Kohn–Sham pinned grid, which is built when the case runs (a grid costs tens
        of milliseconds; reading the catalogue would build all of them)."""
        self.problem(_grid=_GRID_NOT_BUILT)

    def mole(self):
        """The pyscf ``Mole`` of this case (bohr, symmetry off), via ``build_mole``."""
        from harness.backend.mole import build_mole

        return build_mole(self.numbers, self.coordinates, charge=self.charge,
                          multiplicity=self.multiplicity, basis=self.basis,
                          cartesian=self.cartesian)

    def __eq__(self, other):
        if not isinstance(other, Case):
            return NotImplemented
        return all(
            np.array_equal(getattr(self, f.name), getattr(other, f.name))
            if f.name == "coordinates" else getattr(self, f.name) == getattr(other, f.name)
            for f in dataclasses.fields(self))

    def __hash__(self):
        return hash((self.name, self.numbers, self.coordinates.tobytes(), self.basis,
                     self.method))

    def __repr__(self) -> str:
        return (f"Case({self.name!r}, {self.method}/{self.basis}"
                f"{' cartesian' if self.cartesian else ''}, charge={self.charge}, "
                f"multiplicity={self.multiplicity}, natm={len(self.numbers)})")


# --------------------------------------------------------------------------- TOML


def _type_name(t) -> str:
    return {str: "a string", bool: "true or false", int: "an integer",
            list: "a list of strings"}[t]


def _case_from_table(table: Any, index: int, base: Path, where: str,
                     require_suites: bool, label: str | None = None) -> Case:
    if not isinstance(table, dict):
        raise CaseError(f"case #{index} is not a table", case=where)
    raw_name = table.get("name")
    if label is None:
        label = f"{where}: case '{raw_name}'" if isinstance(raw_name, str) and raw_name \
            else f"{where}: case #{index}"

    def fail(field: str, message: str):
        raise CaseError(message, case=label, field=field)

    unknown = sorted(set(table) - set(CASE_KEYS))
    if unknown:
        key = unknown[0]
        close = difflib.get_close_matches(key, list(CASE_KEYS), n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else \
            f" (known keys: {', '.join(CASE_KEYS)})"
        fail(key, f"unknown key{hint}")
    values: dict[str, Any] = {}
    for key, (kind, default) in CASE_KEYS.items():
        if key not in table:
            if default is ... or (key == "suites" and require_suites):
                fail(key, "missing")
            values[key] = default
            continue
        value = table[key]
        ok = isinstance(value, kind) and not (kind is int and isinstance(value, bool))
        if kind is list and ok:
            ok = all(isinstance(v, str) and v for v in value)
        if not ok:
            fail(key, f"must be {_type_name(kind)}, got {value!r}")
        values[key] = value
    name = values["name"]
    if not NAME_PATTERN.match(name):
        fail("name", f"{name!r} must be lower-case letters, digits and + . _ - "
                     f"(it becomes a file name)")
    if len(name) > MAX_NAME_LENGTH:
        fail("name", f"{len(name)} characters, at most {MAX_NAME_LENGTH} (it becomes a file "
                     f"name)")
    method = values["method"].lower()
    if method not in METHODS:
        fail("method", f"must be one of {', '.join(METHODS)}, got {values['method']!r}")
    if require_suites and not values["suites"]:
        fail("suites", "must name at least one suite")
    if values["multiplicity"] < 1:
        fail("multiplicity", f"must be a positive integer, got {values['multiplicity']}")
    geometry = (base / values["geometry"])
    if not geometry.is_file():
        fail("geometry", f"file not found: {geometry}")
    try:
        numbers, coordinates, comment = read_xyz(geometry)
    except CaseError as exc:
        fail("geometry", str(exc))
    n_electrons = sum(numbers) - values["charge"]
    if n_electrons < 1:
        fail("charge", f"charge {values['charge']} leaves {n_electrons} electrons")
    spin = values["multiplicity"] - 1
    if method == "rhf" and n_electrons % 2:
        fail("method", f"rhf is closed-shell but the molecule has {n_electrons} electrons "
                       f"(an odd number; use uhf or rohf with an even multiplicity)")
    if spin > n_electrons or (n_electrons - spin) % 2:
        fail("multiplicity", f"{values['multiplicity']} is impossible with {n_electrons} "
                             f"electrons")
    if method in ("rhf", "rks") and spin:
        other = "uhf or rohf" if method == "rhf" else "uks or roks"
        fail("method", f"{method} needs a singlet, got multiplicity "
                       f"{values['multiplicity']} (use {other})")
    case = Case(name=name, numbers=numbers, coordinates=coordinates, charge=values["charge"],
                multiplicity=values["multiplicity"], basis=values["basis"].strip().lower(),
                cartesian=values["cartesian"], method=method, suites=tuple(values["suites"]),
                note=values["note"], geometry_source=_geometry_source(comment),
                geometry_file=str(geometry),
                functional=values["functional"].strip().lower())
    try:  # let pyscf confirm the basis exists for these elements
        case.validate()
    except CaseError as exc:
        raise CaseError(exc.detail, case=label, field=exc.field) from None
    return case


def _read_cases(path, require_suites: bool) -> tuple[Case, ...]:
    """Every case of a suite file: its ``[[case]]`` tables, then its expanded
    ``[[matrix]]`` tables (``harness.catalogue.matrix``). All problems are collected
    first: one is raised as it is, several as one :class:`CaseListError` listing them."""
    from harness.catalogue.matrix import expand

    path = Path(path)
    where = str(path)
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise CaseError("suite file not found", case=where) from None
    except tomllib.TOMLDecodeError as exc:
        raise CaseError(f"not valid TOML ({exc})", case=where) from None
    except OSError as exc:
        raise CaseError(f"cannot read suite file ({type(exc).__name__})", case=where) from None
    extra = sorted(set(data) - {"case", "matrix"})
    if extra:
        raise CaseError(f"unknown top-level key {extra[0]!r} (a suite file holds only "
                        f"[[case]] and [[matrix]] tables)", case=where)
    tables = data.get("case", [])
    matrices = data.get("matrix", [])
    if not isinstance(tables, list) or not isinstance(matrices, list) \
            or not (tables or matrices):
        raise CaseError("no [[case]] or [[matrix]] tables", case=where)
    cases: list[Case] = []
    problems: list[CaseError] = []
    for index, table in enumerate(tables, start=1):
        try:
            cases.append(_case_from_table(table, index, path.parent, where, require_suites))
        except CaseError as exc:
            problems.append(exc)

    def make_case(entry: dict, label: str) -> Case:
        return _case_from_table(entry, 0, path.parent, where, require_suites, label=label)

    for index, table in enumerate(matrices, start=1):
        made, bad = expand(table, index, path.parent, where, require_suites, make_case)
        cases.extend(made)
        problems.extend(bad)
    seen: set[str] = set()
    unique = []
    for case in cases:
        if case.name in seen:
            problems.append(CaseError("duplicate case name",
                                      case=f"{where}: case '{case.name}'", field="name"))
            continue
        seen.add(case.name)
        unique.append(case)
    if len(problems) == 1:
        raise problems[0] from None
    if problems:
        raise CaseListError(problems, case=where)
    return tuple(unique)


def load_suite_file(path) -> tuple[Case, ...]:
    """Read a user's suite file: ``[[case]]`` tables as in ``references/cases.toml``, then
    the cases of its ``[[matrix]]`` tables (``harness.catalogue.matrix``).

    Geometry paths are relative to the suite file; ``suites``, ``note``, ``charge``
    (0), ``multiplicity`` (1) and ``cartesian`` (false) are optional. Every field is
    validated and every problem collected: several raise one :class:`CaseListError`
    (one line per problem), a single one a one-line :class:`CaseError` of the form
    ``"<file>: case '<name>': <field>: <what is wrong>"``.
    """
    return _read_cases(path, require_suites=False)


def load_user_suite(path, catalogue: "Catalogue | None" = None) -> tuple[Case, ...]:
    """:func:`load_suite_file`, refusing a case named like a catalogue case (its stored
    reference would be confused with, or written over, the catalogue's)."""
    cases = load_suite_file(path)
    names = set((catalogue or load_catalogue()).names)
    for case in cases:
        if case.name in names:
            raise CaseError("is the name of a catalogue case; give yours another name",
                            case=f"{path}: case '{case.name}'", field="name")
    return cases


def _expect_name(kind: str, name) -> None:
    if not isinstance(name, str):
        raise CaseError(f"expected a {kind} name (a string), got {type(name).__name__} "
                        f"{name!r}"[:120], field=kind)


def _unknown(kind: str, name: str, known) -> CaseError:
    known = list(known)
    close = difflib.get_close_matches(name, known, n=3, cutoff=0.5)
    listed = ", ".join(close) if close else ", ".join(known)
    what = "closest" if close else "known"
    return CaseError(f"unknown {kind} {name!r} ({what}: {listed})", field=kind)


#: Characters that make a case name a shell-style pattern (``fnmatch``: ``*``, ``?``, ``[...]``).
PATTERN_CHARS = "*?["


def is_pattern(text: str) -> bool:
    """Whether ``text`` is a shell-style pattern rather than a case name."""
    return any(ch in text for ch in PATTERN_CHARS)


def basis_key(name: str) -> str:
    """A basis name normalised for comparison: stripped, lower case (as the catalogue
    stores basis names), and without ``-``, ``_`` and spaces (as pyscf reads names), so
    ``cc-pVDZ``, ``CC-PVDZ`` and ``ccpvdz`` are one basis."""
    return "".join(ch for ch in str(name).strip().lower() if ch not in "-_ ")


def matching(pattern: str, cases) -> list:
    """The cases whose name matches the shell-style ``pattern`` (``fnmatch``, case
    sensitive: case names are lower case), in their order."""
    return [c for c in cases if fnmatch.fnmatchcase(c.name, pattern)]


def no_match(pattern: str, names) -> CaseError:
    """The one-line error for a case pattern that matches nothing, with the three
    closest case names."""
    names = list(names)
    literal = "".join(ch for ch in pattern if ch not in PATTERN_CHARS + "]")
    close = difflib.get_close_matches(literal, names, n=3, cutoff=0.0)
    return CaseError(f"no case matches {pattern!r} (closest: {', '.join(close) or 'none'})",
                     field="case")


def filter_cases(cases, *, bases=None, methods=None) -> list:
    """The cases (in order) whose basis is one of ``bases`` (compared with
    :func:`basis_key`) and whose method is one of ``methods`` (lower case); None or
    empty: no filter on that field."""
    keys = {basis_key(b) for b in bases or ()}
    wanted = {str(m).strip().lower() for m in methods or ()}
    return [c for c in cases if (not keys or basis_key(c.basis) in keys)
            and (not wanted or c.method in wanted)]


@dataclasses.dataclass(frozen=True)
class Catalogue:
    """The bundled cases and their suites. ``path`` is the TOML file it came from."""

    cases: tuple[Case, ...]
    path: Path | None = None

    @property
    def suites(self) -> tuple[str, ...]:
        """Suite names, in order of first appearance."""
        names: list[str] = []
        for case in self.cases:
            names.extend(s for s in case.suites if s not in names)
        return tuple(names)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.cases)

    def suite(self, name: str) -> tuple[Case, ...]:
        """The cases of suite ``name``; unknown names raise CaseError listing the known."""
        _expect_name("suite", name)
        if name not in self.suites:
            raise _unknown("suite", name, self.suites)
        return tuple(c for c in self.cases if name in c.suites)

    def case(self, name: str) -> Case:
        """The case called ``name``; unknown names raise CaseError with the closest ones."""
        _expect_name("case", name)
        for c in self.cases:
            if c.name == name:
                return c
        raise _unknown("case", name, self.names)


def load_catalogue(path=None) -> Catalogue:
    """Read the catalogue (default: ``default_reference_dir() / "cases.toml"``).

    Same format as a suite file, but every case must name at least one suite.
    """
    path = Path(path) if path is not None else default_reference_dir() / "cases.toml"
    return Catalogue(cases=_read_cases(path, require_suites=True), path=path)
