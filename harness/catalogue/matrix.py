"""Case matrices: geometries × basis sets × methods, written compactly in a suite file.

A suite file may hold ``[[matrix]]`` tables besides ``[[case]]`` tables. Each matrix is
expanded into ordinary :class:`harness.catalogue.cases.Case` objects, one per
(geometry, basis, method) that is not excluded, in this order: geometries (sorted file
names within each pattern, patterns in the order given), then bases, then methods::

    [[matrix]]
    name = "small molecules"               # optional, names the entry in errors
    prefix = "lab-"                        # optional, put before every generated id
    geometries = ["geo/*.xyz", "more/"]    # files, folders (their *.xyz) or globs
    bases = ["sto-3g", "6-31g"]
    methods = ["rhf", "uhf"]
    cartesian = false                      # optional (false)
    suites = ["nightly"]                   # optional
    note = "..."                           # optional
    exclude = ["o2-*-rhf", { geometry = "oh", method = "rhf" }]
    molecules = { oh = { multiplicity = 2 } }   # optional side table, by file stem

Paths are relative to the suite file. Charge and multiplicity of a geometry come from
the side table ``molecules`` (keyed by the XYZ file's stem), else from ``charge=Q`` and
``multiplicity=M`` tokens on the XYZ comment line, else 0 and 1. XYZ coordinates are in
ångström (or bohr with ``units=bohr``); cases are in bohr.

Generated ids are ``<prefix><xyz stem>-<basis>-<method>`` in lower case, with ``**`` in a basis
name written ``dp``, ``*`` written ``d``, ``(`` ``)`` ``,`` and spaces dropped or
written ``-`` (``6-31g*`` → ``6-31gd``), so that an id is a plain file name.

An exclusion is either a string, an ``fnmatch`` pattern of generated ids, or a table
with any of ``geometry`` (the stem), ``basis`` and ``method`` (each an ``fnmatch``
pattern); an entry matching any exclusion is not generated (and not validated). An
exclusion that matches nothing is an error (a misspelt exclusion would silently run
the cases it meant to skip).

Every problem of every entry (a missing file, an empty glob, an unknown element, an
electron count a method cannot hold, a basis pyscf lacks for an element…) is collected;
:func:`expand` returns them all with the cases, so the reader reports them together.
"""

from __future__ import annotations

import fnmatch
import glob
import re
from pathlib import Path
from typing import Any, Callable

from harness.contract.errors import CaseError
from harness.contract.problem import METHODS

#: Keys of a ``[[matrix]]`` table: (type, default). ``...`` marks a required key.
MATRIX_KEYS: dict[str, tuple[type | tuple[type, ...], Any]] = {
    "name": (str, ""),
    "prefix": (str, ""),
    "geometries": ((str, list), ...),
    "bases": (list, ...),
    "methods": (list, ...),
    "cartesian": (bool, False),
    "suites": (list, ()),
    "note": (str, ""),
    "exclude": (list, ()),
    "molecules": (dict, {}),
}

#: Keys of one row of the ``molecules`` side table.
MOLECULE_KEYS = ("charge", "multiplicity")

#: Keys of a table in ``exclude``.
EXCLUDE_KEYS = ("geometry", "basis", "method")

#: Tokens of an XYZ comment line read as the molecule's charge and multiplicity.
_COMMENT_TOKEN = re.compile(r"^(charge|multiplicity)=(.*)$", re.IGNORECASE)


def id_part(text: str) -> str:
    """``text`` as a piece of a case id: lower case, ``**`` → ``dp``, ``*`` → ``d``,
    ``+`` kept, parentheses and commas dropped, anything else not allowed in a case
    name (``[a-z0-9+._-]``) → ``-``."""
    text = text.strip().lower().replace("**", "dp").replace("*", "d")
    text = re.sub(r"[(),]", "", text)
    return re.sub(r"[^a-z0-9+._-]+", "-", text).strip("-")


def comment_spin(comment: str) -> dict[str, int | str]:
    """``{"charge": Q, "multiplicity": M}`` from ``charge=Q`` / ``multiplicity=M`` tokens
    of an XYZ comment line (those present; a value that is not an integer is returned
    as the string it is, for the caller to report)."""
    found: dict[str, int | str] = {}
    for token in comment.split():
        m = _COMMENT_TOKEN.match(token)
        if m:
            key, value = m.group(1).lower(), m.group(2)
            try:
                found[key] = int(value)
            except ValueError:
                found[key] = value
    return found


def _type_words(kind) -> str:
    if kind == (str, list):
        return "a path or a list of paths"
    return {str: "a string", bool: "true or false", list: "a list", dict: "a table"}[kind]


def _geometry_files(patterns: list[str], base: Path, problem: Callable[[str, str], None]
                    ) -> list[Path]:
    """The XYZ files named by ``patterns`` (files, folders, globs; relative to ``base``),
    in order, without duplicates; each missing file or empty pattern reported."""
    files: list[Path] = []
    for pattern in patterns:
        path = Path(pattern).expanduser()
        path = path if path.is_absolute() else base / path
        if glob.has_magic(pattern):
            found = sorted(Path(p) for p in glob.glob(str(path)) if Path(p).is_file())
            if not found:
                problem("geometries", f"{pattern!r} matches no file ({path})")
        elif path.is_dir():
            found = sorted(p for p in path.glob("*.xyz") if p.is_file())
            if not found:
                problem("geometries", f"folder {path} holds no .xyz file")
        elif path.is_file():
            found = [path]
        else:
            problem("geometries", f"file not found: {path}")
            found = []
        for p in found:
            if p not in files:
                files.append(p)
    return files


def _exclusion_matches(rule, stem: str, basis: str, method: str, case_id: str) -> bool:
    if isinstance(rule, str):
        return fnmatch.fnmatchcase(case_id, rule.lower())
    wanted = {"geometry": stem, "basis": basis, "method": method}
    return all(fnmatch.fnmatchcase(wanted[k], str(v).lower()) for k, v in rule.items())


def expand(table: Any, index: int, base: Path, where: str, require_suites: bool,
           make_case: Callable[[dict, str], Any]) -> tuple[list, list[CaseError]]:
    """Expand one ``[[matrix]]`` table: ``(cases, problems)``.

    ``make_case(case_table, label)`` builds and validates one case from a ``[[case]]``
    -style table (geometry path absolute), raising :class:`CaseError`; ``problems`` are
    the one-line CaseErrors of every bad field and every bad entry, each starting with
    ``<file>: matrix '<name>'`` (or ``matrix #<index>``) and, for an entry, its case id.
    """
    from harness.catalogue.cases import read_xyz

    problems: list[CaseError] = []
    if not isinstance(table, dict):
        return [], [CaseError("is not a table", case=f"{where}: matrix #{index}")]
    raw_name = table.get("name")
    label = f"{where}: matrix '{raw_name}'" if isinstance(raw_name, str) and raw_name \
        else f"{where}: matrix #{index}"

    def problem(field: str, message: str) -> None:
        problems.append(CaseError(message, case=label, field=field))

    unknown = sorted(set(table) - set(MATRIX_KEYS))
    for key in unknown:
        import difflib

        close = difflib.get_close_matches(key, list(MATRIX_KEYS), n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else \
            f" (known keys: {', '.join(MATRIX_KEYS)})"
        problem(key, f"unknown key{hint}")
    values: dict[str, Any] = {}
    for key, (kind, default) in MATRIX_KEYS.items():
        if key not in table:
            if default is ... or (key == "suites" and require_suites):
                problem(key, "missing")
            values[key] = default
            continue
        value = table[key]
        if not isinstance(value, kind):
            problem(key, f"must be {_type_words(kind)}, got {value!r}")
            values[key] = default
            continue
        values[key] = value
    if isinstance(values["geometries"], str):
        values["geometries"] = [values["geometries"]]
    for key in ("geometries", "bases", "methods", "suites"):
        items = values[key]
        if items is ... or items is None:
            values[key] = []
            continue
        if not all(isinstance(v, str) and v.strip() for v in items):
            problem(key, f"must be a list of non-empty strings, got {items!r}")
            values[key] = []
        elif key in ("geometries", "bases", "methods") and not items and key in table:
            problem(key, "must not be empty")
    methods = []
    for m in values["methods"]:
        if m.lower() not in METHODS:
            problem("methods", f"must be among {', '.join(METHODS)}, got {m!r}")
        elif m.lower() not in methods:
            methods.append(m.lower())
    bases = []
    for b in values["bases"]:
        if b.strip().lower() not in bases:
            bases.append(b.strip().lower())
    if require_suites and "suites" in table and not values["suites"]:
        problem("suites", "must name at least one suite")
    rules = []
    for rule in values["exclude"]:
        if isinstance(rule, str) and rule.strip():
            rules.append(rule.strip())
        elif isinstance(rule, dict) and rule and set(rule) <= set(EXCLUDE_KEYS) \
                and all(isinstance(v, str) and v for v in rule.values()):
            rules.append(rule)
        else:
            problem("exclude", f"each exclusion is an id pattern or a table of "
                               f"{', '.join(EXCLUDE_KEYS)}, got {rule!r}")
    side: dict[str, dict] = {}
    for stem, row in values["molecules"].items():
        if not isinstance(row, dict) or not row or not set(row) <= set(MOLECULE_KEYS) \
                or not all(isinstance(v, int) and not isinstance(v, bool)
                           for v in row.values()):
            problem(f"molecules.{stem}", f"expected a table of integer "
                                         f"{' and '.join(MOLECULE_KEYS)}, got {row!r}")
            continue
        side[stem] = row

    files = _geometry_files(values["geometries"], base, problem)
    stems = {}
    for f in files:
        stem = f.stem
        if stem in stems:
            problem("geometries", f"two files with the stem {stem!r} ({stems[stem]} and {f}); "
                                  f"ids would clash")
            continue
        stems[stem] = f
    for stem in side:
        if stem not in stems:
            problem(f"molecules.{stem}", "names no geometry of this matrix")

    cases = []
    used = [False] * len(rules)
    for stem, path in stems.items():
        try:
            _, _, comment = read_xyz(path)
        except CaseError as exc:
            problem("geometries", str(exc))
            continue
        spin = comment_spin(comment)
        for key, value in spin.items():
            if isinstance(value, str):
                problem("geometries", f"{path}: line 2: {key}={value} is not an integer")
        spin = {k: v for k, v in spin.items() if isinstance(v, int)}
        spin.update(side.get(stem, {}))
        for basis in bases:
            for method in methods:
                case_id = f"{values['prefix']}{id_part(stem)}-{id_part(basis)}-{method}"
                hit = [i for i, r in enumerate(rules)
                       if _exclusion_matches(r, stem.lower(), basis, method, case_id)]
                for i in hit:
                    used[i] = True
                if hit:
                    continue
                # absolute: make_case joins a relative path to the suite file's folder again
                entry = {"name": case_id, "geometry": str(path.absolute()), "basis": basis,
                         "method": method, "cartesian": values["cartesian"],
                         "charge": spin.get("charge", 0),
                         "multiplicity": spin.get("multiplicity", 1),
                         "suites": list(values["suites"]), "note": values["note"]}
                try:
                    cases.append(make_case(entry, f"{label}: case '{case_id}'"))
                except CaseError as exc:
                    problems.append(exc)
    if stems and bases and methods:
        for rule, hit in zip(rules, used):
            if not hit:
                problem("exclude", f"{rule!r} matches no generated case")
    return cases, problems
