"""Certificates: a verdict written down so that a reviewer can check and recompute it.

A certificate is a JSON file (format ``"scf-harness-certificate/1"``) beside a sidecar
``.npz`` with the solution arrays it judged. It holds the harness, pyscf and numpy
versions and the platform; per case the inputs (atomic numbers, coordinates in bohr,
charge, multiplicity, basis, cartesian flag, method, convergence) and their input hash
(``harness.catalogue.references.input_hash``), the SHA-256 of the solution data
(:func:`solution_hash`), every check's value, tolerance, status and message, the
reference energy with its provenance; the tolerances in force; the evaluation
options (:data:`EVALUATION_KEY`: the AO convention and the stability mode given to
``harness.verdict.evaluate.evaluate_case``); the SHA-256 of the sidecar file; a digest of every field (:data:`DIGESTS_KEY`), and a SHA-256 over the
whole (canonical JSON of everything except ``certificate_sha256``).

:func:`verify_certificate` detects any edit of the JSON or the sidecar and names the
field or the case; with ``recompute=True`` it re-runs ``harness.verdict.evaluate.evaluate``
on the stored solutions with the certified tolerances and evaluation options and
compares every verdict and value. The hashes guard
against accidental or careless edits, not against a forger who recomputes them
(there is no signature). Energies in hartree (Eh), lengths in bohr.
"""

from __future__ import annotations

import dataclasses
import datetime
import hashlib
import json
import math
import platform
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from harness.run.atomic import atomic_write
from harness.contract.errors import HarnessError
from harness.contract.results import CaseResult, _json_float, fixed

#: Format tag of a certificate.
CERTIFICATE_FORMAT = "scf-harness-certificate/1"
#: The sidecar of ``NAME.json`` is ``NAME.solutions.npz``.
SIDECAR_SUFFIX = ".solutions.npz"
#: Key of the whole-certificate hash, and of the per-field digests.
HASH_KEY = "certificate_sha256"
DIGESTS_KEY = "digests"
#: Key of the evaluation options: the keyword options of
#: ``harness.verdict.evaluate.evaluate_case`` that change what the checks compute (everything
#: else it uses is recorded per case or in ``tolerances``). A certificate made before
#: they were recorded is recomputed with evaluate_case's defaults.
EVALUATION_KEY = "evaluation"
EVALUATION_OPTIONS = ("ao_convention", "stability", "basis_source", "grid")
#: ``verify-certificate`` lists at most this many problems, then says how many more.
MAX_LISTED_PROBLEMS = 20
#: A recomputed check value agrees with the certified one when
#: |a − b| ≤ VALUE_AGREEMENT_ABS + VALUE_AGREEMENT_REL · max(|a|, |b|): the same
#: arrays through other BLAS builds differ by rounding only (~1e-14 relative; the
#: smallest values are commutator elements near 1e-12).
VALUE_AGREEMENT_ABS = 1e-10
VALUE_AGREEMENT_REL = 1e-6
#: |E_ref,now − E_ref,certified| (Eh) tolerated when recomputing: the stored references
#: reproduce to 1e-9 (``harness.catalogue.references.RECOMPUTE_TOLERANCE``).
REFERENCE_AGREEMENT = 1e-9

_SCALARS = {"energy": float, "converged": bool, "iterations": int, "basis": str,
            "xc_energy": float, "functional": str, "grid": str}


# --------------------------------------------------------------------------- hashing


def canonical_json(data: Any) -> str:
    """Sorted keys, no spaces, UTF-8 characters kept, NaN refused: the text hashed."""
    return json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False)


def _sha256_text(text: str) -> str:
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def file_sha256(path) -> str:
    """``"sha256:<hex>"`` of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return "sha256:" + h.hexdigest()


def _as_array(value) -> np.ndarray:
    if isinstance(value, (bool, np.bool_)):
        return np.asarray(value, dtype=np.bool_)
    if isinstance(value, (int, np.integer)):
        return np.asarray(value, dtype=np.int64)
    if isinstance(value, str):  # the 'basis' text: a 0-d unicode array (no pickle)
        return np.asarray(value, dtype=np.str_)
    return np.ascontiguousarray(np.asarray(value, dtype=np.float64))


def solution_hash(extracted) -> str:
    """SHA-256 of an extracted solution: for each key in sorted order, the key, the
    array's dtype (``numpy.dtype.str``, e.g. ``<f8``), its shape and its C-order bytes;
    floats, bools and ints as 0-d float64, bool and int64 arrays; a ``Malformed``
    marker as its reason."""
    from harness.contract.solution import Malformed

    h = hashlib.sha256()
    for key, value in sorted(extracted.as_dict().items()):
        h.update(key.encode("utf-8") + b"\0")
        if isinstance(value, Malformed):
            h.update(b"malformed\0" + value.reason.encode("utf-8") + b"\0")
            continue
        arr = _as_array(value)
        h.update(f"{arr.dtype.str}{arr.shape}\0".encode("ascii"))
        h.update(arr.tobytes(order="C"))
    return "sha256:" + h.hexdigest()


def sidecar_path(path) -> Path:
    """``NAME.solutions.npz`` for a certificate ``NAME.json`` (or ``NAME``)."""
    path = Path(path)
    stem = path.name[:-5] if path.name.endswith(".json") else path.name
    return path.with_name(stem + SIDECAR_SUFFIX)


def _digests(cert: Mapping[str, Any]) -> dict[str, str]:
    """A digest per field: top-level keys, ``cases/<name>/<key>`` and
    ``cases/<name>/checks/<check>``."""
    out: dict[str, str] = {}
    for key, value in cert.items():
        if key in (HASH_KEY, DIGESTS_KEY):
            continue
        if key != "cases" or not isinstance(value, list):
            out[key] = _sha256_text(canonical_json(value))
            continue
        out["cases/(list)"] = _sha256_text(canonical_json(
            [c.get("name") if isinstance(c, dict) else c for c in value]))
        for case in value:
            if not isinstance(case, dict):
                continue
            name = case.get("name")
            for ckey, cvalue in case.items():
                if ckey == "checks" and isinstance(cvalue, list):
                    out[f"cases/{name}/checks/(list)"] = _sha256_text(canonical_json(
                        [c.get("name") if isinstance(c, dict) else c for c in cvalue]))
                    for check in cvalue:
                        cname = check.get("name") if isinstance(check, dict) else check
                        out[f"cases/{name}/checks/{cname}"] = _sha256_text(
                            canonical_json(check))
                else:
                    out[f"cases/{name}/{ckey}"] = _sha256_text(canonical_json(cvalue))
    return out


def _whole_hash(cert: Mapping[str, Any]) -> str:
    return _sha256_text(canonical_json({k: v for k, v in cert.items() if k != HASH_KEY}))


# --------------------------------------------------------------------------- making


def collect_platform() -> dict[str, str]:
    """Operating system, machine and Python build the verdict was reached on."""
    return {"platform": platform.platform(), "system": platform.system(),
            "machine": platform.machine(),
            "python": f"{platform.python_implementation()} {platform.python_version()}"}


def collect_versions() -> dict[str, str]:
    """Versions of the harness, pyscf and numpy."""
    import harness

    try:
        from harness.backend.mole import pyscf_version as _pyscf_version
        pyscf_version = _pyscf_version()
    except Exception:  # pragma: no cover - pyscf is a dependency
        pyscf_version = "unavailable"
    return {"harness": str(getattr(harness, "__version__", "unknown")), "pyscf": pyscf_version,
            "numpy": np.__version__}


def _case_of(problem):
    from harness.catalogue.cases import Case

    return Case(name=problem.name, numbers=tuple(int(z) for z in problem.numbers),
                coordinates=problem.coordinates, charge=problem.charge,
                multiplicity=problem.multiplicity, basis=problem.basis,
                cartesian=problem.cartesian, method=problem.method,
                functional=getattr(problem, "functional", None) or "")


def _inputs(problem) -> dict[str, Any]:
    return {"numbers": [int(z) for z in problem.numbers],
            "coordinates_bohr": [[float(x) + 0.0 for x in row] for row in problem.coordinates],
            "charge": int(problem.charge), "multiplicity": int(problem.multiplicity),
            "basis": problem.basis, "cartesian": bool(problem.cartesian),
            "method": problem.method, "convergence": float(problem.convergence),
            **_ks_inputs(problem)}


def _ks_inputs(problem) -> dict[str, Any]:
    """Kohn–Sham only (absent for Hartree–Fock, whose inputs stay as they were): the
    functional and the pinned grid's content hash (a recompute rebuilds the grid and
    must get the same one)."""
    if not getattr(problem, "functional", None):
        return {}
    return {"functional": problem.functional, "grid_hash": problem.grid.hash}


def _reference_entry(reference, source) -> dict[str, Any] | None:
    if reference is None:
        return None
    from harness.catalogue.references import _clean

    return {"energy": float(reference.energy), "source": source,
            "input_hash": getattr(reference, "input_hash", None),
            "provenance": _clean(dict(getattr(reference, "provenance", {}) or {}))}


def _check_entry(check) -> dict[str, Any]:
    data = check.to_json()
    return {k: data[k] for k in ("name", "status", "passed", "value", "tolerance", "message")}


def _case_entry(result: CaseResult, problem, solution, reference) -> dict[str, Any]:
    from harness.catalogue.references import input_hash

    entry: dict[str, Any] = {
        "name": result.name, "passed": bool(result.passed), "status": result.status,
        "unsupported": result.unsupported, "error": result.error,
        "inputs": _inputs(problem), "input_hash": input_hash(_case_of(problem)),
        "energy": _json_float(result.energy),
        "reference": _reference_entry(reference, result.reference_source),
        "checks": [_check_entry(c) for c in result.checks],
    }
    other = (result.analysis or {}).get("judged_in_basis")
    if other:  # judged in the other source's basis of the same name (issue 11)
        from harness.catalogue.references import _clean

        entry["judged_in_basis"] = _clean({**other, "reference_energy": result.reference_energy})
    if solution is None:
        entry["solution"] = None
    else:
        entry["solution"] = {
            "sha256": solution_hash(solution), "keys": sorted(solution.keys()),
            "malformed": {k: v.reason for k, v in sorted(solution.malformed().items())}}
    return entry


def make_certificate(case_results: Sequence[CaseResult], *, problems: Mapping[str, Any],
                     solutions: Mapping[str, Mapping[str, Any] | None],
                     references: Mapping[str, Any] | None = None, tolerances=None,
                     versions: Mapping[str, str] | None = None, plugin: str | None = None,
                     sidecar: Mapping[str, str] | None = None,
                     created: str | None = None, ao_convention: str | None = None,
                     stability: str = "internal", require_all: bool = False,
                     basis_source: str = "pyscf", grid: str | None = None) -> dict[str, Any]:
    """The certificate of a run as a JSON-ready dict, hashed and digested.

    Each case records its ``status`` (``passed``, ``failed`` or ``unsupported``, with
    the code's reason in ``unsupported``); the certificate ``passed`` when no case
    failed, and records ``require_all`` (unsupported cases counted as failures).

    ``problems``, ``solutions`` (the extracted solutions, ``harness.contract.solution.extract``;
    None for a case whose plug-in failed) and ``references`` (``Reference`` or None)
    are keyed by case name. ``tolerances``: the ``harness.checks.tolerances.Tolerances`` in
    force (default ones if None). ``sidecar``: ``{"file": name, "sha256": hash}`` of
    the solution arrays (see :func:`write_certificate`, which fills it).
    ``ao_convention``, ``stability``, ``basis_source`` and ``grid`` (Kohn–Sham
    ``--grid own``): the options the checks were run with
    (``harness.verdict.judge.JudgeSettings``), recorded under :data:`EVALUATION_KEY`
    (basis_source and grid only when not the default).
    """
    from harness.checks.tolerances import Tolerances

    tol = tolerances if tolerances is not None else Tolerances()
    references = references or {}
    cases = [_case_entry(r, problems[r.name], solutions.get(r.name), references.get(r.name))
             for r in case_results]
    cert: dict[str, Any] = {
        "format": CERTIFICATE_FORMAT,
        "created_utc": created or datetime.datetime.now(datetime.timezone.utc).isoformat(
            timespec="seconds"),
        "versions": dict(versions) if versions is not None else collect_versions(),
        "platform": collect_platform(),
        "plugin": plugin,
        "units": {"energy": "hartree", "length": "bohr"},
        "tolerances": {"factor": float(tol.factor),
                       "overrides": {k: float(v) for k, v in sorted(tol.overrides.items())}},
        EVALUATION_KEY: {"ao_convention": ao_convention, "stability": stability,
                         **_basis_source_entry(basis_source),
                         **({"grid": "own"} if grid == "own" else {})},
        "passed": bool(case_results) and not any(r.failed for r in case_results),
        "require_all": bool(require_all),
        "sidecar": dict(sidecar) if sidecar is not None else None,
        "cases": cases,
    }
    cert[DIGESTS_KEY] = _digests(cert)
    cert[HASH_KEY] = _whole_hash(cert)
    return cert


def _sidecar_arrays(solutions: Mapping[str, Mapping[str, Any] | None]) -> dict[str, np.ndarray]:
    from harness.contract.solution import Malformed

    arrays = {}
    for name, solution in solutions.items():
        for key, value in (solution.as_dict() if solution is not None else {}).items():
            if not isinstance(value, Malformed):
                arrays[f"{name}/{key}"] = _as_array(value)
    return arrays


def _atomic_write(path: Path, write) -> None:
    atomic_write(path, write)


def _basis_source_entry(source: str) -> dict:
    """The evaluation option of ``--basis-source`` (left out for the default, pyscf); the
    basis_set_exchange version is in the case entries' reference provenance."""
    return {} if source == "pyscf" else {"basis_source": source}


def write_certificate(path, case_results: Sequence[CaseResult], *, problems, solutions,
                      references=None, tolerances=None, versions=None,
                      plugin: str | None = None, ao_convention: str | None = None,
                      stability: str = "internal", require_all: bool = False,
                      basis_source: str = "pyscf", grid: str | None = None) -> Path:
    """Write the sidecar ``NAME.solutions.npz`` (every non-malformed array of every
    solution, keyed ``<case>/<key>``), then the certificate ``path`` with the sidecar's
    hash; both atomically. Arguments as for :func:`make_certificate`. Returns ``path``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    side = sidecar_path(path)
    arrays = _sidecar_arrays(solutions)

    def save_npz(tmp):
        with open(tmp, "wb") as fh:
            np.savez(fh, **arrays)

    _atomic_write(side, save_npz)
    cert = make_certificate(case_results, problems=problems, solutions=solutions,
                            references=references, tolerances=tolerances, versions=versions,
                            plugin=plugin, ao_convention=ao_convention, stability=stability,
                            require_all=require_all, basis_source=basis_source, grid=grid,
                            sidecar={"file": side.name, "sha256": file_sha256(side)})

    def save_json(tmp):
        Path(tmp).write_text(json.dumps(cert, indent=1, ensure_ascii=False) + "\n",
                             encoding="utf-8")

    _atomic_write(path, save_json)
    return path


# --------------------------------------------------------------------------- verifying


@dataclasses.dataclass(frozen=True)
class VerificationResult:
    """What :func:`verify_certificate` found. ``issues``: one line each, naming the field
    or case; empty when the certificate is intact (and, with ``recomputed``, when every
    verdict and value was reproduced)."""

    path: str
    issues: tuple[str, ...]
    recomputed: bool
    cases: int
    #: With ``recomputed``: the re-judged ``CaseResult`` of each case with a solution, by
    #: name (:func:`summary_markdown` reports these, not the certified claims).
    results: Mapping[str, CaseResult] = dataclasses.field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return not self.issues

    def summary(self) -> str:
        """One line: intact, the one problem, or how many problems there are."""
        what = "intact and reproduced" if self.recomputed else "intact"
        if self.ok:
            return f"certificate {self.path}: {what} ({self.cases} case" \
                   f"{'s' if self.cases != 1 else ''})"
        if len(self.issues) == 1:
            return f"certificate {self.path}: {self.issues[0]}"
        return f"certificate {self.path}: {len(self.issues)} problems:"

    def report_lines(self, limit: int = MAX_LISTED_PROBLEMS) -> list[str]:
        """The summary, then (when there is more than one) each problem once, indented;
        after ``limit`` of them a last line says how many were not listed."""
        lines = [self.summary()]
        if len(self.issues) > 1:
            lines += [f"  {issue}" for issue in self.issues[:limit]]
            if len(self.issues) > limit:
                lines.append(f"  ... and {len(self.issues) - limit} more not listed")
        return lines


class CertificateReadError(HarnessError):
    """A certificate file that cannot be read as a JSON object (one-line reason)."""


class _NotJSON(ValueError):
    pass


def _refuse_constant(name: str):
    raise _NotJSON(f"{name} is not JSON")


def load_certificate(path) -> dict[str, Any]:
    """The certificate at ``path`` as a dict, without checking its content.

    Raises CertificateReadError, whose message is one of "file not found", "is a
    directory", "not a readable JSON file (<why>)" — also for the bare NaN and Infinity
    tokens, which no certificate holds (non-finite values are written as strings) — or
    "not a JSON object (a <type>), not a certificate".
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
        cert = json.loads(text, parse_constant=_refuse_constant)
    except FileNotFoundError:
        raise CertificateReadError("file not found") from None
    except IsADirectoryError:
        raise CertificateReadError("is a directory") from None
    except _NotJSON as exc:
        raise CertificateReadError(f"not a readable JSON file ({exc})") from None
    except RecursionError:
        raise CertificateReadError("not a readable JSON file (nested too deeply)") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CertificateReadError(f"not a readable JSON file ({type(exc).__name__})") \
            from None
    if not isinstance(cert, dict):
        kind = {list: "list", str: "string", bool: "boolean", int: "number",
                float: "number", type(None): "null"}.get(type(cert), type(cert).__name__)
        raise CertificateReadError(f"not a JSON object (a {kind}), not a certificate")
    return cert


def _load_sidecar(path: Path) -> dict[str, np.ndarray]:
    with np.load(path, allow_pickle=False) as data:
        return {k: np.array(data[k]) for k in data.files}


def _case_entries(cert: Mapping[str, Any]) -> list[dict]:
    """The certified cases that are objects (an edited list is named by the digests)."""
    cases = cert.get("cases")
    return [c for c in cases if isinstance(c, dict)] if isinstance(cases, list) else []


def _solution_record(entry: Mapping[str, Any]) -> dict | None:
    """A case's ``solution`` entry when it has the certified shape, else None."""
    record = entry.get("solution")
    if not isinstance(record, dict) or not isinstance(record.get("keys", []), list) \
            or not all(isinstance(k, str) for k in record.get("keys", [])) \
            or not isinstance(record.get("malformed") or {}, dict):
        return None
    return record


def _solution_from_sidecar(name: str, entry: Mapping[str, Any], arrays):
    """The certified :class:`~harness.contract.solution.Solution` of case ``name`` from
    the sidecar arrays; keys outside the contract are left out (the hash then differs)."""
    from harness.contract.solution import KNOWN_KEYS, Malformed, Solution

    out: dict[str, Any] = {}
    malformed = entry.get("malformed") or {}
    for key in entry.get("keys", []):
        if key in malformed:
            out[key] = Malformed(str(malformed[key]))
            continue
        arr = arrays.get(f"{name}/{key}")
        if arr is None:
            continue
        out[key] = _SCALARS[key](arr.reshape(())) if key in _SCALARS else \
            np.array(arr, dtype=np.float64)
    return Solution.from_dict({k: v for k, v in out.items() if k in KNOWN_KEYS})


def _agree(a, b) -> bool:
    if a is None or b is None or isinstance(a, str) or isinstance(b, str):
        return a == b
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return abs(a - b) <= VALUE_AGREEMENT_ABS + VALUE_AGREEMENT_REL * max(abs(a), abs(b))


def _case_of_field(field: str) -> str | None:
    """``cases/<name>`` of a per-case digest field, else None."""
    parts = field.split("/")
    return "/".join(parts[:2]) if len(parts) > 2 and parts[0] == "cases" else None


def _digest_issues(stored: Mapping[str, Any], now: Mapping[str, str], issues: list[str]):
    """Compare the certified digests with the present ones, each difference once: a case
    removed or added as a whole is one line, and so is a list (``cases``, a case's
    ``checks``) that is no list any more."""
    stored, now = dict(stored), dict(now)
    for field in sorted(f for f in now if f"{f}/(list)" in stored):
        # certified as a list, now something else: its item fields mean nothing any more
        issues.append(f"{field}: not a list of {field.rsplit('/', 1)[-1]} (edited after "
                      f"the certificate was made)")
        now.pop(field)
        stored = {k: v for k, v in stored.items() if not k.startswith(f"{field}/")}
    cases_now = {_case_of_field(f) for f in now} - {None}
    cases_stored = {_case_of_field(f) for f in stored} - {None}
    done: set[str] = set()
    for field in sorted(set(now) | set(stored)):
        case = _case_of_field(field)
        if case is not None and (case not in cases_now or case not in cases_stored):
            if case not in done:
                done.add(case)
                gone = case not in cases_now
                issues.append(f"{case}: {'removed' if gone else 'added'} after the "
                              f"certificate was made")
        elif field not in stored:
            issues.append(f"{field}: added after the certificate was made")
        elif field not in now:
            issues.append(f"{field}: removed after the certificate was made")
        elif stored[field] != now[field]:
            issues.append(f"{field}: edited after the certificate was made (digest mismatch)")


def _integrity(cert: dict, folder: Path, issues: list[str]) -> dict[str, np.ndarray] | None:
    stored_hash = cert.get(HASH_KEY)
    if stored_hash != _whole_hash(cert):
        issues.append(f"{HASH_KEY}: does not match the certificate's content (edited)")
    stored = cert.get(DIGESTS_KEY)
    if not isinstance(stored, dict):
        issues.append(f"{DIGESTS_KEY}: missing or not an object")
        stored = {}
    _digest_issues(stored, _digests(cert), issues)
    sidecar = cert.get("sidecar")
    if not isinstance(sidecar, dict) or "file" not in sidecar:
        issues.append("sidecar: no solution file recorded")
        return None
    side = folder / Path(str(sidecar["file"])).name
    if not side.is_file():
        issues.append(f"sidecar: {side.name} not found beside the certificate")
        return None
    if file_sha256(side) != sidecar.get("sha256"):
        issues.append(f"sidecar: {side.name} was modified (its SHA-256 differs from the "
                      f"certified one)")
    try:
        arrays = _load_sidecar(side)
    except Exception as exc:
        issues.append(f"sidecar: {side.name} is unreadable ({type(exc).__name__})")
        return None
    for entry in _case_entries(cert):
        if not entry.get("solution"):
            continue
        name = entry.get("name")
        record = _solution_record(entry)
        if record is None:
            issues.append(f"cases/{name}/solution: not a solution record (no object with "
                          f"a list of keys)")
            continue
        try:
            got = solution_hash(_solution_from_sidecar(name, record, arrays))
        except (TypeError, ValueError, KeyError) as exc:
            issues.append(f"cases/{name}/solution: the sidecar's arrays do not fit the "
                          f"certified keys ({type(exc).__name__})")
            continue
        if got != record.get("sha256"):
            changed = [k for k in record.get("keys", [])
                       if f"{name}/{k}" not in arrays
                       and k not in (record.get("malformed") or {})]
            detail = f" (missing: {', '.join(changed)})" if changed else ""
            issues.append(f"cases/{name}/solution: the sidecar's arrays do not match the "
                          f"certified solution hash{detail}")
    return arrays


#: Start of every line about a certificate whose own fields disagree with each other.
INTEGRITY = "certificate integrity"
#: The check whose value is a signed eigenvalue (Eh/rad²) rather than a deviation: it
#: must pass when value ≥ −tolerance, and may pass below (when following the instability
#: does not lower the energy), so only the first direction is a contradiction.
SIGNED_VALUE_CHECKS = ("stability",)


def _number(x) -> float | None:
    """A certified value as a float (NaN and ±inf are stored as strings), else None."""
    if isinstance(x, bool) or x is None:
        return None
    if isinstance(x, str):
        try:
            return float(x) if x.lower() in ("nan", "inf", "-inf") else None
        except ValueError:  # pragma: no cover
            return None
    return float(x) if isinstance(x, (int, float)) else None


def _within(name, value, tolerance) -> tuple[bool | None, str]:
    """Whether ``value`` says the check passed (True), failed (False) or cannot tell
    (None), with the words saying why (``"value 3.1e-04 > tolerance 1e-06"``)."""
    v, t = _number(value), _number(tolerance)
    if v is None or t is None:
        return None, ""
    if name in SIGNED_VALUE_CHECKS:
        return (True, f"value {v:.1e} ≥ −tolerance {-t:g}") if v >= -t else (None, "")
    ok = v <= t  # False for NaN, as in harness.contract.results.judge
    return ok, f"value {v:.1e} {'≤' if ok else '>'} tolerance {t:g}"


def _flag(x) -> str:
    return json.dumps(x) if isinstance(x, (bool, type(None))) else repr(x)


def _check_consistency(case: str, check: Mapping[str, Any]) -> str | None:
    """One line when a certified check's ``passed`` flag, ``status`` and value against
    tolerance disagree, else None."""
    from harness.contract.results import Status

    name, status, flag = check.get("name"), check.get("status"), check.get("passed")
    where = f"{INTEGRITY}: case {case}, check {name}"
    statuses = [s.value for s in Status]
    if status not in statuses:
        return f"{where}: status {_flag(status)} is not one of {', '.join(statuses)}"
    expected = {"passed": True, "failed": False}.get(status)
    verdict, words = _within(name, check.get("value"), check.get("tolerance"))
    if status not in ("passed", "failed"):
        verdict = None  # not applicable / skipped: no value is judged
    if flag is not expected or (flag is not None and not isinstance(flag, bool)):
        if verdict is None:
            return f"{where}: passed={_flag(flag)} but status {status}"
        if verdict == expected:  # the flag is the odd one out
            return f"{where}: passed={_flag(flag)} but status {status} and {words}"
        return f"{where}: status {status} but passed={_flag(flag)} and {words}"
    if verdict is not None and verdict != expected:
        return f"{where}: passed={_flag(flag)} but {words}"
    return None


def _consistency(cert: Mapping[str, Any], issues: list[str]) -> None:
    """Every disagreement between a certificate's own fields, one line each: per check
    the ``passed`` flag, the ``status`` and the value against the tolerance; per case
    its ``passed`` against its error and its checks' statuses (passed when no error, no
    check failed and one passed: ``CaseResult.passed``); the certificate's ``passed``
    against its cases. A forger who flips a flag and recomputes every hash is caught
    here, without recomputing anything."""
    cases = _case_entries(cert)
    for entry in cases:
        name = entry.get("name")
        checks = entry.get("checks") if isinstance(entry.get("checks"), list) else []
        checks = [c for c in checks if isinstance(c, dict)]
        for check in checks:
            line = _check_consistency(name, check)
            if line is not None:
                issues.append(line)
        failed = [c.get("name") for c in checks if c.get("status") == "failed"]
        if entry.get("error") is not None:
            expected, why = False, "the case has an error"
        elif _case_status(entry) == "unsupported":
            expected, why = False, "the case is unsupported"
        elif failed:
            expected, why = False, f"check {failed[0]} failed"
        elif not any(c.get("status") == "passed" for c in checks):
            expected, why = False, "no check passed"
        else:
            expected, why = True, "no check failed"
        if entry.get("passed") is not expected:
            issues.append(f"{INTEGRITY}: case {name}: passed={_flag(entry.get('passed'))} "
                          f"but {why}")
    if not isinstance(cert.get("cases"), list) or len(cases) != len(cert["cases"]):
        return  # a damaged list of cases: named by the digests, no verdict to compare
    n_passed = sum(1 for c in cases if c.get("passed") is True)
    n_failed = sum(1 for c in cases
                   if c.get("passed") is not True and _case_status(c) != "unsupported")
    expected = bool(cases) and n_failed == 0  # unsupported cases are not failures
    if cert.get("passed") is not expected:
        issues.append(f"{INTEGRITY}: passed={_flag(cert.get('passed'))} but {n_passed} of "
                      f"{len(cases)} cases passed and {n_failed} failed")


def _evaluation_options(cert: Mapping[str, Any], issues: list[str]) -> dict[str, Any] | None:
    """The keyword options to recompute with (``harness.verdict.judge.JudgeSettings``): the
    certified ones; none (its defaults) for a certificate made before they were
    recorded; None, with an issue, when they are not valid options."""
    from harness.verdict.conventions import NAMED
    from harness.contract.defaults import STABILITY_MODES

    if EVALUATION_KEY not in cert:
        return {}
    data = cert[EVALUATION_KEY]
    if not isinstance(data, dict) or set(data) - set(EVALUATION_OPTIONS):
        issues.append(f"{EVALUATION_KEY}: not an object of {', '.join(EVALUATION_OPTIONS)}")
        return None
    stability = data.get("stability", "internal")
    if stability not in STABILITY_MODES:
        issues.append(f"{EVALUATION_KEY}: stability {stability!r} is not one of "
                      f"{', '.join(STABILITY_MODES)}")
        return None
    convention = data.get("ao_convention")
    if convention is not None and convention not in NAMED:
        issues.append(f"{EVALUATION_KEY}: ao_convention {convention!r} is not one of "
                      f"{', '.join(NAMED)}")
        return None
    if data.get("basis_source", "pyscf") not in ("pyscf", "bse"):
        issues.append(f"{EVALUATION_KEY}: basis_source {data['basis_source']!r} is not one "
                      f"of pyscf, bse")
        return None
    if data.get("grid", "own") != "own":
        issues.append(f"{EVALUATION_KEY}: grid {data['grid']!r} is not 'own' (the only "
                      f"recorded value)")
        return None
    return {k: data[k] for k in EVALUATION_OPTIONS if k in data}


def _recompute(cert: dict, arrays, issues: list[str], reference_dir,
               results: dict | None = None) -> None:
    from harness.contract.errors import first_line
    from harness.checks.tolerances import Tolerances

    options = _evaluation_options(cert, issues)
    if options is None:
        return
    try:
        tol_data = cert.get("tolerances") or {}
        tolerances = Tolerances(overrides=dict(tol_data.get("overrides") or {}),
                                factor=float(tol_data.get("factor", Tolerances().factor)))
    except Exception as exc:
        issues.append(f"tolerances: not usable ({first_line(exc)})")
        return
    for entry in _case_entries(cert):
        name = entry.get("name")
        record = _solution_record(entry)
        if not entry.get("solution") or record is None:
            continue
        try:
            result = _recompute_case(entry, record, arrays, tolerances, options, issues,
                                     reference_dir)
            if result is not None and results is not None:
                results[name] = result
        except Exception as exc:
            issues.append(f"cases/{name}: could not be recomputed ({first_line(exc)})")


def _recompute_case(entry: dict, record: dict, arrays, tolerances, options: dict,
                    issues: list[str], reference_dir) -> CaseResult | None:
    """Re-judge one certified case; its issues appended; the recomputed result (None when
    it could not be recomputed)."""
    from harness.contract.problem import Problem
    from harness.catalogue.references import reference_for
    from harness.verdict.judge import JudgeSettings, judge

    name = entry.get("name")
    inputs = entry["inputs"]
    problem = Problem.create(name=name, numbers=inputs["numbers"],
                             coordinates=inputs["coordinates_bohr"],
                             charge=inputs["charge"], multiplicity=inputs["multiplicity"],
                             basis=inputs["basis"], cartesian=inputs["cartesian"],
                             method=inputs["method"], convergence=inputs["convergence"],
                             functional=inputs.get("functional"))
    if inputs.get("grid_hash") is not None and problem.grid.hash != inputs["grid_hash"]:
        issues.append(f"cases/{name}/inputs: the pinned grid rebuilt now has hash "
                      f"{problem.grid.hash}, certified {inputs['grid_hash']}")
    reference, source = None, None
    if entry.get("reference") is not None:
        reference, source = reference_for(_case_of(problem), reference_dir)
        certified = float(entry["reference"]["energy"])
        if abs(reference.energy - certified) > REFERENCE_AGREEMENT:
            issues.append(f"cases/{name}/reference: the reference energy is now "
                          f"{fixed(reference.energy)} Eh, certified {fixed(certified)} Eh")
    solution = _solution_from_sidecar(name, record, arrays)
    result = judge(problem, solution, reference,
                   JudgeSettings(tolerances=tolerances, reference_source=source, **options))
    if result.error is not None:
        issues.append(f"cases/{name}: could not be recomputed ({result.error})")
        return None
    checks = {c.name: c for c in result.checks}
    for old in entry.get("checks") or []:
        old = old if isinstance(old, dict) else {"name": old}
        new = checks.get(old.get("name"))
        where = f"cases/{name}/checks/{old.get('name')}"
        if new is None:
            issues.append(f"{where}: not produced by this harness version")
            continue
        data = new.to_json()
        if data["status"] != old.get("status"):
            issues.append(f"{where}: certified {old.get('status')}, recomputed "
                          f"{data['status']} ({data['message']})")
        elif not _agree(data["value"], old.get("value")):
            issues.append(f"{where}: certified value {old.get('value')!r}, recomputed "
                          f"{data['value']!r}")
    return result


def verify_certificate(path, *, recompute: bool = False,
                       reference_dir=None) -> VerificationResult:
    """Check a certificate's integrity; with ``recompute``, also re-run the checks.

    Integrity: the format tag, the whole-certificate hash, every field's digest (an
    edited, added or removed field is named; a case removed or added as a whole is one
    issue), the sidecar file's SHA-256 and each case's solution hash recomputed from
    the sidecar's arrays; and the agreement of the certificate's own fields with each
    other (:func:`_consistency`: flags, statuses, values against tolerances, case and
    overall verdicts; "certificate integrity: …"). Recompute: each case with a solution is re-judged
    (``harness.verdict.judge.judge``) with the certified tolerances and evaluation
    options (:data:`EVALUATION_KEY`; the defaults when absent) and the reference from
    ``harness.catalogue.references.reference_for`` (stored under ``reference_dir`` when its hash
    matches, else computed); every status must be the same, every value agree within
    VALUE_AGREEMENT_ABS/REL, and the reference energy within REFERENCE_AGREEMENT Eh.
    Never raises for a bad file: problems are returned as issues (an unreadable file
    as the one issue :func:`load_certificate` names).
    """
    path = Path(path)
    issues: list[str] = []
    try:
        cert = load_certificate(path)
    except CertificateReadError as exc:
        return VerificationResult(str(path), (str(exc),), recompute, 0)
    if cert.get("format") != CERTIFICATE_FORMAT:
        return VerificationResult(str(path), (f"format: {cert.get('format')!r}, expected "
                                              f"{CERTIFICATE_FORMAT!r}",), recompute, 0)
    cases = cert.get("cases") if isinstance(cert.get("cases"), list) else []
    try:
        arrays = _integrity(cert, path.parent, issues)
    except (RecursionError, ValueError, TypeError) as exc:
        # a structure hashing cannot walk (e.g. nested too deeply to encode)
        issues.append(f"not a readable certificate ({type(exc).__name__})")
        arrays = None
    try:
        _consistency(cert, issues)
    except (RecursionError, ValueError, TypeError) as exc:  # pragma: no cover - odd JSON
        issues.append(f"{INTEGRITY}: not checkable ({type(exc).__name__})")
    results: dict[str, CaseResult] = {}
    if recompute and arrays is not None:
        try:
            _recompute(cert, arrays, issues, reference_dir, results)
        except Exception as exc:
            issues.append(f"recompute: failed ({type(exc).__name__}: {exc})".splitlines()[0])
    return VerificationResult(str(path), tuple(issues), recompute, len(cases), results)


# --------------------------------------------------------------------------- summary


def _fmt(x, spec: str = ".10f") -> str:
    if x is None:
        return "—"
    if isinstance(x, str):
        return x
    try:
        return format(float(x), spec)
    except (TypeError, ValueError):  # an edited certificate: show what is there
        return str(x)


def _obj(x) -> Mapping[str, Any]:
    """``x`` if it is a JSON object, else an empty one (a damaged certificate)."""
    return x if isinstance(x, dict) else {}


def _evaluation_line(cert: Mapping[str, Any]) -> list[str]:
    if EVALUATION_KEY not in cert:
        return []
    options = _obj(cert[EVALUATION_KEY])
    convention = options.get("ao_convention")
    return [f"- checked with stability analysis {options.get('stability', '?')}, AO "
            f"convention {convention if convention is not None else 'from the overlap'}"]


def _case_status(entry: Mapping[str, Any]) -> str:
    """A case entry's status; a certificate made before statuses were recorded has
    only ``passed``."""
    status = entry.get("status")
    if status in ("passed", "failed", "unsupported"):
        return status
    return "passed" if entry.get("passed") else "failed"


#: The verdict column's word per case status.
_WORDS = {"passed": "passed", "unsupported": "unsupported", "failed": "FAILED"}


#: The closing section of every reviewer's summary: what a certificate covers, what its
#: hashes do and do not prove, and where the limits of a pass are written.
COVERAGE_LINES = (
    "## What this certificate covers",
    "",
    "- Only the cases and checks listed above, for the inputs recorded with each case "
    "(molecule, basis, method, convergence) and the tolerances and options recorded here; "
    "nothing about other molecules, bases, methods, or quantities the code did not return.",
    "- The hashes (input, solution, sidecar, certificate) detect edits made after the "
    "certificate was written; they are not a signature: whoever edits the file can "
    "recompute them. `scf-harness verify-certificate --recompute` re-runs every check on "
    "the stored solutions instead of trusting the recorded results.",
    "- The limits of a pass are written in the README (\"What a pass means\", "
    "\"Reliability\") and in docs/what-a-pass-means.md.",
)


def _row_of(entry: Mapping[str, Any], result: CaseResult | None) -> dict[str, Any]:
    """What the summary shows of one case: the recomputed result when there is one, else
    the certificate's own fields."""
    if result is None:
        ref = _obj(entry.get("reference"))
        checks = entry.get("checks") if isinstance(entry.get("checks"), list) else []
        return {"passed": entry.get("passed") is True, "error": entry.get("error"),
                "status": _case_status(entry), "unsupported": entry.get("unsupported"),
                "energy": entry.get("energy"), "reference": ref.get("energy"),
                "source": ref.get("source"),
                "checks": [k for k in checks if isinstance(k, dict)]}
    return {"passed": result.passed, "error": result.error, "status": result.status,
            "unsupported": result.unsupported, "energy": result.energy,
            "reference": result.reference_energy, "source": result.reference_source,
            "checks": [_check_entry(c) for c in result.checks]}


def _verdict_line(rows: list[dict], verification) -> str:
    n_pass = sum(1 for r in rows if r["status"] == "passed")
    n_unsupported = sum(1 for r in rows if r["status"] == "unsupported")
    unsupported = f", {n_unsupported} unsupported" if n_unsupported else ""
    counted = (f"({n_pass} of {len(rows)} cases passed{unsupported}); energies in hartree "
               f"(Eh), lengths in bohr")
    if verification is not None and not verification.ok:
        issues = verification.issues
        return (f"- verdict: **REJECTED**: the certificate did not verify ({len(issues)} "
                f"problem{'s' if len(issues) != 1 else ''}; first: {issues[0]}) {counted}")
    passed = bool(rows) and not any(r["status"] == "failed" for r in rows)
    return f"- verdict: **{'PASSED' if passed else 'FAILED'}** {counted}"


def _source_line(verification) -> str:
    if verification is None:
        return "- results as recorded in the certificate (not verified)"
    if verification.recomputed:
        return ("- results recomputed from the stored solutions by this harness "
                "(`verify-certificate --recompute`), not read from the certificate")
    return ("- results as recorded in the certificate (hashes and internal consistency "
            "verified; not recomputed)")


def summary_markdown(cert: Mapping[str, Any], verification=None) -> str:
    """A short Markdown summary for a reviewer: versions, evaluation options, per case
    method/basis, energy, reference, verdict, the checks (value vs tolerance), the
    hashes, and what the certificate covers (:data:`COVERAGE_LINES`). Eh.

    ``verification``: the :class:`VerificationResult` of this certificate. When it was
    recomputed, every case it recomputed is shown with the recomputed values and verdict,
    never the certificate's own claims; when it found problems the verdict is REJECTED
    with the first one. Parts of a damaged certificate that are not objects are left out."""
    versions = _obj(cert.get("versions"))
    plat = _obj(cert.get("platform"))
    cases = _case_entries(cert)
    recomputed = dict(verification.results) if verification is not None else {}
    rows = [_row_of(c, recomputed.get(c.get("name"))) for c in cases]
    lines = [
        "# SCF verdict certificate",
        "",
        f"- made {cert.get('created_utc', '?')} with scf-harness {versions.get('harness', '?')}, "
        f"pyscf {versions.get('pyscf', '?')}, numpy {versions.get('numpy', '?')} "
        f"({plat.get('python', '?')}, {plat.get('platform', '?')})",
        f"- code: `{cert.get('plugin') or '?'}`",
        *_evaluation_line(cert),
        _verdict_line(rows, verification),
        _source_line(verification),
        "",
        "| case | method/basis | energy (Eh) | reference (Eh) | reference from | verdict |",
        "|---|---|---|---|---|---|",
    ]
    for c, row in zip(cases, rows):
        inputs = _obj(c.get("inputs"))
        basis = f"{inputs.get('basis', '?')}" + (" (cartesian)" if inputs.get("cartesian")
                                                 else "")
        lines.append(f"| {c.get('name')} | {inputs.get('method', '?')}/{basis} | "
                     f"{_fmt(row['energy'])} | {_fmt(row['reference'])} | "
                     f"{row['source'] or '—'} | {_WORDS.get(row['status'], 'FAILED')} |")
    for c, row in zip(cases, rows):
        lines += ["", f"## {c.get('name')}", ""]
        if row["error"]:
            lines.append(f"- error: {row['error']}")
        elif row["status"] == "unsupported":
            lines.append(f"- unsupported: {row['unsupported']}")
        for check in row["checks"]:
            status = check.get("status")
            mark = {"passed": "✓", "failed": "✗"}.get(status, "–")
            if check.get("value") is not None and check.get("tolerance") is not None:
                detail = f"{_fmt(check['value'], '.1e')} (tolerance {_fmt(check['tolerance'], '.1e')})"
            else:
                detail = status
            lines.append(f"- {mark} {check.get('name')}: {detail}")
        solution = _obj(c.get("solution"))
        lines.append(f"- input hash `{c.get('input_hash')}`")
        lines.append(f"- solution hash `{solution.get('sha256', '—')}`")
    sidecar = _obj(cert.get("sidecar"))
    lines += ["", f"Sidecar `{sidecar.get('file', '—')}` `{sidecar.get('sha256', '—')}`; "
                  f"certificate `{cert.get(HASH_KEY, '—')}`.", "", *COVERAGE_LINES, ""]
    return "\n".join(lines)
