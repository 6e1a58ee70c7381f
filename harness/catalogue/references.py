"""Stored pyscf references: computing, storing, loading and verifying them.

pyscf's SCF runs in ``harness.backend.reference_scf``; this module stores, hashes,
loads and verifies what it finds. A reference is the
lowest converged, internally stable pyscf solution for a case, with its energy split
into terms, orbital energies, ⟨S²⟩ and dipole, and the other distinct stationary
solutions met on the way (``known_states``: saddle points and higher minima). All
values in atomic units: energies in hartree (Eh), dipole in e·bohr (origin at the
coordinate origin), lengths in bohr.

Storage: one JSON file per case, ``<data directory>/<case name>.json`` (default data
directory: ``default_reference_dir() / "data"``). Each file carries an input hash
(:func:`input_hash`); a stored reference is used only while the hash still matches. Each
file also carries a hash of its own content (:data:`CONTENT_HASH_KEY`,
:func:`content_hashes`: one SHA-256 per stored field, each energy term on its own), and
its energy terms must sum to its total (:data:`STORED_TERMS_TOLERANCE`): a file whose
content no longer matches is refused everywhere it is read (``references verify``,
``certify``, the pytest plug-in) as "reference tampered or corrupted: <file>: <what
differs>" (:class:`ReferenceTampered`), never recomputed over silently. The hashes detect
edits; they are not a signature (whoever edits a file can recompute them).
(:func:`input_hash`); a stored reference is used only while the hash still matches.

Cases with at least STORED_DENSITY_MIN_AO basis functions also store the reference
density and its exact J and K per spin component (:class:`ReferenceDensity`) in a
compressed ``<case name>.density.npz`` beside the JSON; the JSON records the file's
SHA-256 (``density_file``) and the npz carries the input hash, so both are used only
together and only while both match. The checks use them to build J/K of the code's
density as J/K(P_ref) + J/K(ΔP) (``harness.verdict.coulomb``). References computed in
the process (not stored) carry the density in memory when the case is that large.
"""

from __future__ import annotations

import dataclasses
import datetime
import hashlib
import json
import math
import os
import time
from pathlib import Path
from typing import Any, Iterable, Mapping

import numpy as np

from harness.catalogue.cases import Case, default_reference_dir
from harness.contract.errors import ReferenceDataError
# the SCF settings live with the driver that runs pyscf (harness.backend.reference_scf)
from harness.backend.reference_scf import (  # noqa: F401  (re-exported)
    BROKEN_SYMMETRY, CONV_TOL, CONV_TOL_GRAD, GUESSES, MAX_CYCLE, MAX_STABILITY_ROUNDS,
    RESTRICTED, SAME_SOLUTION)

#: Format tag written into every reference file.
REFERENCE_FORMAT = "scf-harness-reference/1"
#: Two converged stationary solutions whose energies differ by more than this (Eh) are
#: distinct states (``known_states``); closer ones are the same state (the first met is
#: kept). 1e-6 Eh is the reference-energy tolerance: a code cannot be told apart from
#: two states closer than that anyway.
KNOWN_STATE_SEPARATION = 1e-6
#: Versioned description of how a reference solution is chosen; part of the input hash.
#: The text is frozen with its version tag (the module it names is now
#: ``harness.verdict.states``): changing a character invalidates every stored reference.
STABILITY_POLICY = (
    "policy/2: for each guess (minao, atom, huckel, 1e; UHF singlets also broken-symmetry "
    "and restricted, the UHF started from the stable RHF solution), "
    "converge, find the lowest internal orbital-Hessian eigenvalue (harness.stability."
    "internal_mode: one root, Davidson tol 1e-5, seeded random start admixture), while "
    "it is below -1e-5 Eh/rad^2 rerun from the "
    f"rotated orbitals (at most {MAX_STABILITY_ROUNDS} rounds); keep the lowest-energy "
    "converged stable solution over all guesses; record every converged stationary "
    f"solution distinct by > {KNOWN_STATE_SEPARATION:g} Eh as a known state")
#: |E_total − (E_nuc + E_1 + E_J + E_K)| allowed when the energy terms are stored (Eh).
ENERGY_SUM_TOLERANCE = 1e-9
#: |E_total − (E_nuc + E_1 + E_J + E_K)| allowed in a *stored* reference file (Eh). The
#: terms are stored as full-precision doubles (17 significant digits, ~1e-16 relative), so
#: they reproduce the stored total to rounding: at most 2.3e-13 Eh over the 32 stored files
#: (measured 2026-12-03, o2-cc-pvdz-uhf). 1e-10 Eh is far above that rounding and far below
#: any hand edit of an energy. A larger gap means the file was edited or corrupted.
STORED_TERMS_TOLERANCE = 1e-10
#: Key of the per-field content hashes in a reference file (:func:`content_hashes`).
CONTENT_HASH_KEY = "content_hashes"
#: Start of the reason a stored reference whose content does not match is refused with.
TAMPERED = "reference tampered or corrupted"
#: |E_recomputed − E_stored| allowed by ``verify(..., recompute=True)`` (Eh).
RECOMPUTE_TOLERANCE = 1e-9

#: Stored references of cases with at least this many basis functions keep their density
#: and its exact J/K (``<case>.density.npz``): below it the exact J/K build of the code's
#: density costs milliseconds (≤ 60 AO in the catalogue) and the file would only add
#: bytes; at 114 AO (benzene/cc-pVDZ) it is the checks' main cost. Three packed
#: triangles per spin component: ~0.15 MB for benzene.
STORED_DENSITY_MIN_AO = 100

UNITS = {"energy": "hartree (Eh)", "dipole": "e*bohr (atomic units), origin at (0, 0, 0)",
         "coordinates": "bohr"}


def default_data_dir() -> Path:
    """Where the reference JSON files live: ``default_reference_dir() / "data"``."""
    return default_reference_dir() / "data"


# --------------------------------------------------------------------------- hash


def _clean(x):
    """JSON-ready plain Python values (floats at full precision, −0.0 → 0.0)."""
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple, np.ndarray)):
        return [_clean(v) for v in x]
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return float(x) + 0.0
    return x


def _inputs(case: Case) -> dict[str, Any]:
    out = {"numbers": list(case.numbers), "coordinates": _clean(case.coordinates),
           "charge": case.charge, "multiplicity": case.multiplicity, "method": case.method,
           "cartesian": case.cartesian, "basis": case.basis}
    if case.functional:  # Kohn–Sham only, so Hartree–Fock hashes are unchanged
        out["functional"] = case.functional
    return out


#: Kohn–Sham references: the same policy (STABILITY_POLICY, unchanged) run with pyscf
#: RKS/UKS/ROKS on the pinned grid; hashed (with the grid's hash) for Kohn–Sham cases only.
KS_POLICY = ("ks/1: pyscf RKS/UKS/ROKS with the case's functional (libxc via pyscf) on the "
             "pinned grid (harness.backend.grid, points and weights as handed to the code), "
             "small_rho_cutoff 0 (no density-based pruning), stability policy as for "
             "Hartree-Fock with pyscf's Kohn-Sham orbital Hessian")


def _ks_settings(case: Case, mol) -> dict[str, Any]:
    from harness.backend import grid as _grid
    from harness.contract.grid import grid_hash

    coords, weights, description = _grid.grid_arrays(mol)
    return {"ks_policy": KS_POLICY, "grid_hash": grid_hash(coords, weights),
            "grid": description}


def input_hash(case: Case) -> str:
    """``"sha256:<hex>"`` of the canonical JSON of everything that fixes the reference.

    Hashed: atomic numbers, coordinates in bohr (full-precision floats), charge,
    multiplicity, method, cartesian flag, basis name, the basis contents pyscf
    actually uses (``harness.backend.mole.basis_set``, hashed in pyscf's row layout
    ``{symbol: [[l, [exponent, c1, ...], ...], ...]}``) and the reference settings (conv_tol,
    conv_tol_grad, stability policy); Kohn–Sham cases also the functional, KS_POLICY,
    the pinned grid's description and content hash. Not hashed: the pyscf, libxc or
    numpy version.
    """
    from harness.backend.mole import basis_set
    from harness.contract.basis import as_rows

    payload = _inputs(case)
    mol = case.mole()
    payload["basis_contents"] = _clean(as_rows(basis_set(mol)))
    payload["settings"] = {"conv_tol": CONV_TOL, "conv_tol_grad": CONV_TOL_GRAD,
                           "stability_policy": STABILITY_POLICY}
    if case.functional:
        payload["settings"].update(_ks_settings(case, mol))
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"))
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def _content_fields(data: Mapping[str, Any]) -> dict[str, Any]:
    """The stored fields a reference file's content hashes cover: every top-level key of
    :meth:`Reference.to_json` but the hashes themselves, ``energies`` split into one
    field per term (``energies.total``, ``energies.nuclear``, …)."""
    out: dict[str, Any] = {}
    for key, value in data.items():
        if key == CONTENT_HASH_KEY:
            continue
        if key == "energies" and isinstance(value, Mapping):
            out.update({f"energies.{term}": v for term, v in value.items()})
        else:
            out[key] = value
    return out


def content_hashes(data: Mapping[str, Any]) -> dict[str, str]:
    """``{field: "sha256:<hex>"}`` of the canonical JSON (sorted keys, full-precision
    floats) of each stored field of a reference's JSON form (:func:`_content_fields`):
    the energy and each of its terms, orbital energies, occupations, ⟨S²⟩, dipole, the
    known states, the inputs and provenance, every other stored value."""
    return {field: "sha256:" + hashlib.sha256(
                json.dumps(_clean(value), sort_keys=True, separators=(",", ":"))
                .encode("utf-8")).hexdigest()
            for field, value in sorted(_content_fields(data).items())}


class ReferenceTampered(ReferenceDataError):
    """A stored reference whose content does not match its own hashes, or whose energy
    terms do not sum to its total: ``"reference tampered or corrupted: <file>: <what
    differs>"`` (one line). Never recomputed over: the case fails with this reason."""

    def __init__(self, path, what: str, *, case: str | None = None):
        super().__init__(f"{TAMPERED}: {path}: {what}")
        self.case = case
        self.path = str(path)


def tamper_problems(data: Mapping[str, Any], ref: "Reference") -> list[str]:
    """What differs between a reference file's stored content hashes (``data``, the file's
    JSON) and its content (``ref``, read from it), and whether its energy terms miss the
    total by more than STORED_TERMS_TOLERANCE Eh. Empty for an intact file."""
    problems = []
    stored = data.get(CONTENT_HASH_KEY)
    if not isinstance(stored, Mapping):
        problems.append(f"no {CONTENT_HASH_KEY} (written before content hashing or removed; "
                        f"`scf-harness references rehash` re-stores them)")
    else:
        now = content_hashes(ref.to_json())
        differ = [f for f in now if stored.get(f) != now[f]]
        differ += [f"{f} (not stored)" for f in stored if f not in now]
        if differ:
            problems.append(f"content hash differs for {', '.join(differ)}")
    gap = ref.energy - ref.energy_terms_sum
    if not abs(gap) <= STORED_TERMS_TOLERANCE:
        problems.append(f"energy terms sum to {ref.energy_terms_sum!r} Eh, the total is "
                        f"{ref.energy!r} Eh (difference {gap:.1e} Eh > "
                        f"{STORED_TERMS_TOLERANCE:.0e})")
    return problems


def reference_error_text(exc: BaseException) -> str:
    """The one line a case's reference-energy failure gives for ``exc``: a tampered
    reference's own text, ``"<ExcType>: <message>"`` for anything else."""
    if isinstance(exc, ReferenceTampered):
        return str(exc)
    return f"{type(exc).__name__}: {exc}".splitlines()[0]


# --------------------------------------------------------------------------- Reference


def _frozen(values) -> np.ndarray:
    arr = np.array(values, dtype=np.float64)
    arr.setflags(write=False)
    return arr


@dataclasses.dataclass(frozen=True)
class KnownState:
    """One stationary Hartree–Fock solution of a case found while making its reference.

    ``energy`` (Eh, total), ``s_squared`` (⟨S²⟩; 0 for RHF), ``stable`` (no internal
    orbital-Hessian eigenvalue below −1e-5 Eh/rad²), ``eigenvalue`` (that lowest
    eigenvalue, Eh/rad², see ``harness.verdict.states``), ``label`` (a short description of the
    occupation: per-spin HOMO character, aufbau or not, spin-restricted or not) and
    ``found_by`` (guess, and how many instability-following rounds led there).
    """

    energy: float
    s_squared: float
    stable: bool
    eigenvalue: float
    label: str
    found_by: str

    def to_json(self) -> dict[str, Any]:
        return _clean(dataclasses.asdict(self))

    @classmethod
    def from_json(cls, data: Mapping[str, Any]) -> "KnownState":
        return cls(energy=float(data["energy"]), s_squared=float(data["s_squared"]),
                   stable=bool(data["stable"]), eigenvalue=float(data["eigenvalue"]),
                   label=str(data["label"]), found_by=str(data["found_by"]))


@dataclasses.dataclass(frozen=True, eq=False)
class ReferenceDensity:
    """The reference solution's density and its exact Coulomb and exchange matrices, per
    spin component (RHF: one component, the total density), pyscf AO order, Eh:
    ``density`` Pσ, ``coulomb`` J[Pσ], ``exchange`` K[Pσ], each (ns, nao, nao)."""

    density: np.ndarray
    coulomb: np.ndarray
    exchange: np.ndarray

    def __post_init__(self):
        for name in ("density", "coulomb", "exchange"):
            object.__setattr__(self, name, _frozen(getattr(self, name)))


def reference_density(mol, density: np.ndarray) -> ReferenceDensity:
    """:class:`ReferenceDensity` of a density (leading spin axis): one exact J/K build."""
    from harness.backend.integrals import exact_jk_components

    vj, vk = exact_jk_components(mol, density)
    return ReferenceDensity(density=density, coulomb=vj, exchange=vk)


def _pack(a: np.ndarray) -> np.ndarray:
    i, j = np.tril_indices(a.shape[-1])
    return np.ascontiguousarray(a[:, i, j])


def _unpack(packed: np.ndarray, n: int) -> np.ndarray:
    out = np.zeros((packed.shape[0], n, n))
    i, j = np.tril_indices(n)
    out[:, i, j] = packed
    out[:, j, i] = packed
    return out


def _density_bytes(density: ReferenceDensity, input_hash: str) -> bytes:
    import io

    buf = io.BytesIO()
    np.savez_compressed(buf, input_hash=np.array(input_hash),
                        nao=np.array(density.density.shape[-1]),
                        density=_pack(density.density), coulomb=_pack(density.coulomb),
                        exchange=_pack(density.exchange))
    return buf.getvalue()


def _read_density(case: Case, path: Path, entry: Mapping[str, Any], input_hash: str
                  ) -> ReferenceDensity:
    """The density file named by a reference's ``density_file`` entry; ReferenceDataError
    when it is missing, its SHA-256 differs from the entry or its input hash from the
    reference's."""
    import io

    name = str(entry.get("name", ""))
    file = path.parent / name
    try:
        raw = file.read_bytes()
    except OSError:
        raise ReferenceDataError(f"density file {file} is missing", case=case.name,
                                 field="density_file") from None
    digest = "sha256:" + hashlib.sha256(raw).hexdigest()
    if digest != entry.get("sha256"):
        raise ReferenceDataError(f"hash mismatch in {file} (stored {str(entry.get('sha256'))[:19]}"
                                 f"…, file {digest[:19]}…)", case=case.name,
                                 field="density_file")
    try:
        with np.load(io.BytesIO(raw), allow_pickle=False) as z:
            if str(z["input_hash"]) != input_hash:
                raise ReferenceDataError(f"{file} belongs to other inputs", case=case.name,
                                         field="density_file")
            n = int(z["nao"])
            return ReferenceDensity(density=_unpack(z["density"], n),
                                    coulomb=_unpack(z["coulomb"], n),
                                    exchange=_unpack(z["exchange"], n))
    except (KeyError, ValueError, OSError) as exc:
        raise ReferenceDataError(f"{file} is malformed ({exc})".splitlines()[0],
                                 case=case.name, field="density_file") from None


@dataclasses.dataclass(frozen=True, eq=False)
class Reference:
    """A stored pyscf solution of one case. Energies in Eh, dipole in e·bohr.

    ``orbital_energies`` and ``occupations`` have shape (nmo,) for RHF and ROHF (ROHF:
    eigenvalues of pyscf's effective Fock matrix, occupations 0/1/2) and (2, nmo) for
    UHF (alpha first). The energy terms satisfy
    ``energy = energy_nuclear + energy_one_electron + energy_coulomb + energy_exchange``
    with E_1 = Tr(P h), E_J = ½ Tr(P J[P]), E_K = −½ Σσ Tr(Pσ K[Pσ]) (RHF: −¼ Tr(P K[P])).

    ``known_states``: every distinct converged stationary solution found (energy-sorted;
    index 0 is the reference solution itself). Files written before known states were
    recorded read back with an empty tuple.

    ``density``: the :class:`ReferenceDensity` (density and exact J/K) when the case has
    at least STORED_DENSITY_MIN_AO functions, else None; ``density_file`` the JSON entry
    naming its stored file (name, sha256) when read from storage.
    """

    case: str
    input_hash: str
    method: str
    basis: str
    cartesian: bool
    charge: int
    multiplicity: int
    energy: float
    energy_nuclear: float
    energy_one_electron: float
    energy_coulomb: float
    energy_exchange: float
    orbital_energies: np.ndarray
    occupations: np.ndarray
    s_squared: float
    dipole: np.ndarray
    nao: int
    nmo: int
    converged: bool
    stable: bool
    stability_rounds: int
    inputs: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    provenance: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    known_states: tuple[KnownState, ...] = ()
    density: ReferenceDensity | None = None
    density_file: Mapping[str, Any] | None = None
    #: Kohn–Sham: the functional and E_xc (Eh; ``energy_exchange`` is then the scaled
    #: exact-exchange part). "" and 0.0 for Hartree–Fock.
    functional: str = ""
    energy_xc: float = 0.0

    def __post_init__(self):
        for name in ("orbital_energies", "occupations", "dipole"):
            object.__setattr__(self, name, _frozen(getattr(self, name)))
        object.__setattr__(self, "known_states", tuple(self.known_states))

    @property
    def energy_terms_sum(self) -> float:
        """E_nuc + E_1 + E_J + E_K (Eh); equals ``energy`` to ~1e-10."""
        return (self.energy_nuclear + self.energy_one_electron + self.energy_coulomb
                + self.energy_exchange + self.energy_xc)

    def to_json(self) -> dict[str, Any]:
        """A JSON-ready dict (floats at full precision), tagged with REFERENCE_FORMAT,
        with the content hashes of its values (:data:`CONTENT_HASH_KEY`)."""
        data = self._to_json()
        if self.functional:  # Kohn–Sham keys only where they mean something
            data["functional"] = self.functional
            data["energies"]["xc"] = _clean(self.energy_xc)
        data[CONTENT_HASH_KEY] = content_hashes(data)
        return data

    def _to_json(self) -> dict[str, Any]:
        data = _clean({
            "format": REFERENCE_FORMAT,
            "case": self.case,
            "input_hash": self.input_hash,
            "method": self.method, "basis": self.basis, "cartesian": self.cartesian,
            "charge": self.charge, "multiplicity": self.multiplicity,
            "units": UNITS,
            "energies": {"total": self.energy, "nuclear": self.energy_nuclear,
                         "one_electron": self.energy_one_electron,
                         "coulomb": self.energy_coulomb, "exchange": self.energy_exchange},
            "s_squared": self.s_squared,
            "dipole": self.dipole,
            "nao": self.nao, "nmo": self.nmo,
            "converged": self.converged, "stable": self.stable,
            "stability_rounds": self.stability_rounds,
            "orbital_energies": self.orbital_energies,
            "occupations": self.occupations,
            "inputs": dict(self.inputs),
            "provenance": dict(self.provenance),
            "known_states": [k.to_json() for k in self.known_states],
            **({"density_file": dict(self.density_file)} if self.density_file else {}),
        })
        return data

    @classmethod
    def from_json(cls, data: Mapping[str, Any]) -> "Reference":
        """Rebuild from :meth:`to_json` output; raises ReferenceDataError if malformed."""
        if not isinstance(data, Mapping):
            raise ReferenceDataError("not a JSON object", field="reference")
        tag = data.get("format")
        if tag != REFERENCE_FORMAT:
            raise ReferenceDataError(f"format tag is {tag!r}, expected {REFERENCE_FORMAT!r}",
                                     case=data.get("case"), field="format")
        try:
            e = data["energies"]
            ref = cls(case=str(data["case"]), input_hash=str(data["input_hash"]),
                      method=str(data["method"]), basis=str(data["basis"]),
                      cartesian=bool(data["cartesian"]), charge=int(data["charge"]),
                      multiplicity=int(data["multiplicity"]), energy=float(e["total"]),
                      energy_nuclear=float(e["nuclear"]),
                      energy_one_electron=float(e["one_electron"]),
                      energy_coulomb=float(e["coulomb"]), energy_exchange=float(e["exchange"]),
                      orbital_energies=data["orbital_energies"],
                      occupations=data["occupations"], s_squared=float(data["s_squared"]),
                      dipole=data["dipole"], nao=int(data["nao"]), nmo=int(data["nmo"]),
                      converged=bool(data["converged"]), stable=bool(data["stable"]),
                      stability_rounds=int(data["stability_rounds"]),
                      inputs=dict(data.get("inputs", {})),
                      provenance=dict(data.get("provenance", {})),
                      known_states=tuple(KnownState.from_json(k)
                                         for k in data.get("known_states", ())),
                      density_file=(dict(data["density_file"]) if data.get("density_file")
                                    else None),
                      functional=str(data.get("functional", "")),
                      energy_xc=float(e.get("xc", 0.0)))
        except KeyError as exc:
            raise ReferenceDataError(f"missing key {exc.args[0]!r}", case=data.get("case"),
                                     field="reference") from None
        except (TypeError, ValueError) as exc:
            raise ReferenceDataError(f"malformed value ({exc})".splitlines()[0],
                                     case=data.get("case"), field="reference") from None
        if ref.dipole.shape != (3,) or ref.orbital_energies.shape != ref.occupations.shape \
                or ref.orbital_energies.shape[-1] != ref.nmo:
            raise ReferenceDataError("array shapes do not match nmo", case=ref.case,
                                     field="reference")
        if not all(math.isfinite(x) for x in (ref.energy, ref.energy_terms_sum)):
            raise ReferenceDataError("energy is not finite", case=ref.case, field="energies")
        return ref


# --------------------------------------------------------------------------- computing


def distinct_states(states: Iterable[KnownState]) -> tuple[KnownState, ...]:
    """Energy-sorted states, merging those within KNOWN_STATE_SEPARATION Eh (the first
    met of a group is kept, and a stable member wins over a saddle)."""
    kept: list[KnownState] = []
    for st in states:
        twin = next((k for k, old in enumerate(kept)
                     if abs(old.energy - st.energy) <= KNOWN_STATE_SEPARATION), None)
        if twin is None:
            kept.append(st)
        elif st.stable and not kept[twin].stable:
            kept[twin] = st
    return tuple(sorted(kept, key=lambda k: k.energy))


def _solve(mol, method: str, functional: str = ""):
    """The backend's reference solution (``harness.backend.reference_scf``) and the
    distinct stationary states met, the kept solution first."""
    from harness.backend.reference_scf import reference_solution

    sol = reference_solution(mol, method, functional or None)
    # the kept solution is state 0, the others follow by energy (a saddle point below it
    # would be listed too: it would mean a lower minimum exists that no guess reached)
    known = distinct_states(KnownState(**dataclasses.asdict(st)) for st in sol.states)
    first = [st for st in known if abs(st.energy - sol.energy) <= KNOWN_STATE_SEPARATION]
    return sol, tuple(first[:1]) + tuple(st for st in known if st not in first[:1])

def reference_energy(mol, method: str) -> float:
    """Total energy (Eh) of the reference solution for a pyscf ``Mole`` built in bohr,
    chosen exactly as :func:`compute_reference` chooses it. For molecules that are not
    catalogue cases, e.g. a custom basis given as a pyscf basis dict."""
    from harness.backend.reference_scf import reference_solution

    return reference_solution(mol, method).energy


def compute_reference(case: Case) -> Reference:
    """Run pyscf RHF/UHF/ROHF for ``case`` and return its :class:`Reference`.

    Symmetry off, conv_tol = CONV_TOL (Eh), conv_tol_grad = CONV_TOL_GRAD; every guess
    in GUESSES (plus BROKEN_SYMMETRY and RESTRICTED for UHF singlets) is converged and
    followed to an internally stable solution; the lowest converged stable one is kept
    (ties within SAME_SOLUTION Eh go to the earlier guess). Every converged stationary
    point met is recorded; the distinct ones (KNOWN_STATE_SEPARATION) are
    ``known_states``, the kept solution first. Raises ReferenceDataError if the stored
    energy terms do not sum to the total within ENERGY_SUM_TOLERANCE.
    """
    from harness.backend.mole import pyscf_version

    mol = case.mole()
    sol, known = _solve(mol, case.method, case.functional)
    guess, converged, stable, rounds = sol.guess, sol.converged, sol.stable, sol.rounds
    guesses = list(sol.guesses)

    terms = dict(sol.terms)
    total = sol.energy
    mismatch = total - sum(terms.values())
    if abs(mismatch) > ENERGY_SUM_TOLERANCE:
        raise ReferenceDataError(f"energy terms sum to {total - mismatch!r}, total is "
                                 f"{total!r} (difference {mismatch:.1e} Eh)", case=case.name,
                                 field="energies")
    s2 = sol.s_squared
    dipole = sol.dipole
    mo_energy = sol.orbital_energies
    mo_occ = sol.occupations
    provenance = {
        "program": "pyscf", "pyscf_version": pyscf_version(), "numpy_version": np.__version__,
        "conv_tol": CONV_TOL, "conv_tol_grad": CONV_TOL_GRAD, "max_cycle": MAX_CYCLE,
        "symmetry": False, "guesses_tried": guesses, "guess_kept": guess,
        "energy_by_guess": dict(sol.energy_by_guess),
        "stability_policy": STABILITY_POLICY,
        "geometry_source": case.geometry_source,
        "created_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(
            timespec="seconds"),
    }
    density = (reference_density(mol, sol.density)
               if sol.density is not None and sol.nao >= STORED_DENSITY_MIN_AO else None)
    if case.functional:
        from harness.backend.grid import libxc_version

        ks = _ks_settings(case, mol)
        provenance.update({"functional": case.functional, "libxc_version": libxc_version(),
                           "grid_hash": ks["grid_hash"], "grid": ks["grid"],
                           "ks_policy": KS_POLICY, "small_rho_cutoff": 0.0})
    return Reference(case=case.name, input_hash=input_hash(case), method=case.method,
                     basis=case.basis, cartesian=case.cartesian, charge=case.charge,
                     multiplicity=case.multiplicity, energy=total,
                     energy_nuclear=terms["nuclear"],
                     energy_one_electron=terms["one_electron"],
                     energy_coulomb=terms["coulomb"], energy_exchange=terms["exchange"],
                     orbital_energies=mo_energy, occupations=mo_occ, s_squared=s2,
                     dipole=dipole, nao=sol.nao, nmo=sol.nmo,
                     converged=converged, stable=stable, stability_rounds=rounds,
                     inputs=_inputs(case), provenance=provenance, known_states=known,
                     density=density, functional=case.functional,
                     energy_xc=float(terms.get("xc", 0.0)))


# --------------------------------------------------------------------------- storage


def reference_path(case: Case, directory=None) -> Path:
    """``<directory>/<case name>.json`` (directory default: :func:`default_data_dir`)."""
    directory = Path(directory) if directory is not None else default_data_dir()
    return directory / f"{case.name}.json"


def write_reference(reference: Reference, directory=None) -> Path:
    """Write ``reference`` as readable JSON (indent 1); atomic replace. Returns the path.

    With a ``density``, ``<case>.density.npz`` is written first and named, with its
    SHA-256, in the JSON's ``density_file`` entry."""
    directory = Path(directory) if directory is not None else default_data_dir()
    directory.mkdir(parents=True, exist_ok=True)
    path = directory / f"{reference.case}.json"
    if reference.density is not None:
        raw = _density_bytes(reference.density, reference.input_hash)
        name = f"{reference.case}.density.npz"
        tmp_npz = directory / (name + ".tmp")
        tmp_npz.write_bytes(raw)
        os.replace(tmp_npz, directory / name)
        reference = dataclasses.replace(reference, density_file={
            "name": name, "sha256": "sha256:" + hashlib.sha256(raw).hexdigest(),
            "contents": "density, coulomb J[P], exchange K[P] per spin component, packed "
                        "lower triangles, pyscf AO order, Eh"})
    tmp = path.with_suffix(".json.tmp")
    tmp.write_text(json.dumps(reference.to_json(), indent=1) + "\n", encoding="utf-8")
    os.replace(tmp, path)
    return path


def _read_file(case: Case, path: Path) -> Reference:
    if not path.is_file():
        raise ReferenceDataError(f"no stored reference at {path}", case=case.name,
                                 field="reference")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ReferenceDataError(f"{path} is unreadable ({type(exc).__name__}: {exc})"
                                 .splitlines()[0], case=case.name, field="reference") from None
    try:
        ref = Reference.from_json(data)
    except ReferenceDataError as exc:
        raise ReferenceDataError(f"{path} is malformed: {exc}", case=case.name,
                                 field="reference") from None
    problems = tamper_problems(data, ref)
    if problems:
        raise ReferenceTampered(path, "; ".join(problems), case=case.name)
    return ref


def _what_changed(case: Case, ref: Reference) -> str:
    now = _clean(_inputs(case))
    changed = [k for k in now if ref.inputs.get(k) != now[k]]
    if changed:
        return ", ".join(changed) + " changed"
    return "basis definition or reference settings changed"


def load_reference(case: Case, directory=None) -> Reference:
    """Load the stored reference of ``case``; raises a one-line ReferenceDataError when
    the file is missing, unreadable or malformed, belongs to another case, or its input
    hash no longer matches the case (naming what changed); ReferenceTampered (a
    ReferenceDataError) when its content does not match its content hashes or its energy
    terms do not sum to its total (:func:`tamper_problems`)."""
    path = reference_path(case, directory)
    ref = _read_file(case, path)
    if ref.case != case.name:
        raise ReferenceDataError(f"{path} holds the reference of {ref.case!r}", case=case.name,
                                 field="reference")
    expected = input_hash(case)
    if ref.input_hash != expected:
        raise ReferenceDataError(f"hash mismatch in {path} ({_what_changed(case, ref)}; "
                                 f"stored {ref.input_hash[:19]}…, case {expected[:19]}…)",
                                 case=case.name, field="reference")
    if ref.density_file:
        ref = dataclasses.replace(ref, density=_read_density(case, path, ref.density_file,
                                                             expected))
    return ref


def reference_for(case: Case, directory=None, *, write: bool = False
                  ) -> tuple[Reference, str]:
    """The reference of ``case`` and where it came from: ``"stored"`` when a stored file
    matches the input hash, else computed now: ``"written"`` when ``write`` stored it in
    ``directory``, ``"computed"`` otherwise. A stored file that was tampered with or
    corrupted (:class:`ReferenceTampered`) is not computed over: the error is raised, so
    the case fails reference-energy naming the file."""
    try:
        return load_reference(case, directory), "stored"
    except ReferenceTampered:
        raise
    except ReferenceDataError:
        pass
    ref = compute_reference(case)
    if write:
        write_reference(ref, directory)
        return ref, "written"
    return ref, "computed"


def build(cases: Iterable[Case], directory=None, *, force: bool = False
          ) -> list[tuple[str, str]]:
    """Make sure every case has a stored, matching reference in ``directory``.

    Returns ``(case name, what happened)``: ``"kept ..."`` if a matching file exists
    (unless ``force``), else ``"written ..."`` with the energy (Eh), nao and seconds.
    """
    out = []
    for case in cases:
        if not force:
            try:
                ref = load_reference(case, directory)
            except ReferenceDataError:
                pass
            else:
                out.append((case.name, f"kept (hash matches), E = {ref.energy:.10f} Eh"))
                continue
        start = time.perf_counter()
        ref = compute_reference(case)
        write_reference(ref, directory)
        seconds = time.perf_counter() - start
        flags = "" if ref.converged and ref.stable else \
            f" WARNING converged={ref.converged} stable={ref.stable}"
        out.append((case.name, f"written, E = {ref.energy:.10f} Eh, nao = {ref.nao}, "
                               f"{seconds:.1f} s{flags}"))
    return out


def verify(cases: Iterable[Case], directory=None, *, recompute: bool = False
           ) -> list[tuple[str, bool, str]]:
    """Check the stored references: file well-formed, input hash matches, content
    matches its content hashes and the energy terms sum to the total
    (STORED_TERMS_TOLERANCE; else "reference tampered or corrupted: …"), converged and
    stable; with ``recompute`` also recompute and compare the total energy to
    RECOMPUTE_TOLERANCE (Eh).

    Returns ``(case name, ok, one-line message)`` per case.
    """
    out = []
    for case in cases:
        try:
            ref = load_reference(case, directory)
        except ReferenceDataError as exc:
            out.append((case.name, False, str(exc)))
            continue
        problems = []
        if not (ref.converged and ref.stable):
            problems.append(f"converged={ref.converged}, stable={ref.stable}")
        message = f"input and content hashes match, E = {ref.energy:.10f} Eh"
        if recompute:
            new = compute_reference(case)
            diff = new.energy - ref.energy
            if abs(diff) > RECOMPUTE_TOLERANCE:
                problems.append(f"recomputed E = {new.energy:.10f} Eh differs by {diff:.1e} "
                                f"> {RECOMPUTE_TOLERANCE:.0e}")
            else:
                message += f", recomputed within {abs(diff):.1e} Eh"
        if problems:
            out.append((case.name, False, "; ".join(problems)))
        else:
            out.append((case.name, True, message))
    return out


def rehash(cases: Iterable[Case], directory=None) -> list[tuple[str, str]]:
    """Re-store the content hashes of stored references, values untouched: each file is
    read (it must be well-formed and match its case's input hash), and written back
    with :data:`CONTENT_HASH_KEY` recomputed from its values (the energies, arrays and
    everything else exactly as read; JSON floats round-trip exactly). A file whose energy
    terms miss the total by more than STORED_TERMS_TOLERANCE is not rehashed. Returns
    ``(case name, what happened)``. A maintenance step after content hashing was added:
    re-hashing an edited file makes the edit pass, so review the diff of the values."""
    out = []
    for case in cases:
        path = reference_path(case, directory)
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
            ref = Reference.from_json(data)
        except (OSError, ValueError) as exc:
            out.append((case.name, f"not rehashed: {type(exc).__name__}: {exc}"
                        .splitlines()[0]))
            continue
        if ref.case != case.name or ref.input_hash != input_hash(case):
            out.append((case.name, "not rehashed: the file does not match the case's "
                                   "input hash"))
            continue
        problems = [p for p in tamper_problems(data, ref) if p.startswith("energy terms")]
        if problems:
            out.append((case.name, f"not rehashed: {problems[0]}"))
            continue
        if data.get(CONTENT_HASH_KEY) == ref.to_json()[CONTENT_HASH_KEY]:
            out.append((case.name, "kept (content hashes match)"))
            continue
        write_reference(ref, directory)
        out.append((case.name, f"rehashed, E = {ref.energy!r} Eh (values unchanged)"))
    return out
# ------------------------------------------------------------------ in the code's basis

#: References computed in a basis a code gave (``basis`` solution key), by input hash;
#: computed on the fly, never stored (the basis is the code's, not the catalogue's).
_IN_BASIS: dict[str, Reference] = {}


def basis_input_hash(problem, basis_text: str) -> str:
    """``"sha256:<hex>"`` of the inputs of a reference in a given basis: the problem's
    atomic numbers, coordinates (bohr), charge, multiplicity, method, cartesian flag, the
    basis text itself and the reference settings."""
    payload = {"numbers": [int(z) for z in problem.numbers],
               "coordinates": _clean(problem.coordinates), "charge": problem.charge,
               "multiplicity": problem.multiplicity, "method": problem.method,
               "cartesian": problem.cartesian, "basis_text": basis_text,
               "settings": {"conv_tol": CONV_TOL, "conv_tol_grad": CONV_TOL_GRAD,
                            "stability_policy": STABILITY_POLICY}}
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"))
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def reference_in_basis(problem, basis_text: str, *, label: str = "given as 'basis'",
                       provenance: Mapping[str, Any] | None = None) -> Reference:
    """The reference of ``problem`` (bohr) computed in the basis of NWChem-format
    ``basis_text`` by the same pyscf path as :func:`compute_reference` (every guess,
    stability following); cached in memory under :func:`basis_input_hash`, never stored.
    ``label`` is recorded as the reference's basis; ``provenance`` adds entries (e.g. the
    basis_set_exchange version). Raises ValueError (one line) if the text does not parse
    for the problem's elements."""
    from harness.backend.mole import mole_in_basis, pyscf_version

    key = basis_input_hash(problem, basis_text)
    if key in _IN_BASIS:
        return _IN_BASIS[key]
    mol = mole_in_basis(problem, basis_text)
    sol, known = _solve(mol, problem.method)
    terms = dict(sol.terms)
    inputs = {"numbers": [int(z) for z in problem.numbers],
              "coordinates": _clean(problem.coordinates), "charge": problem.charge,
              "multiplicity": problem.multiplicity, "method": problem.method,
              "cartesian": problem.cartesian, "basis": label}
    prov = {"program": "pyscf", "pyscf_version": pyscf_version(),
            "numpy_version": np.__version__, "conv_tol": CONV_TOL,
            "conv_tol_grad": CONV_TOL_GRAD, "symmetry": False, "guess_kept": sol.guess,
            "stability_policy": STABILITY_POLICY, "basis_source": label,
            "stored": False, **dict(provenance or {})}
    ref = Reference(case=problem.name, input_hash=key, method=problem.method, basis=label,
                    cartesian=problem.cartesian, charge=problem.charge,
                    multiplicity=problem.multiplicity, energy=sol.energy,
                    energy_nuclear=terms["nuclear"], energy_one_electron=terms["one_electron"],
                    energy_coulomb=terms["coulomb"], energy_exchange=terms["exchange"],
                    orbital_energies=sol.orbital_energies, occupations=sol.occupations,
                    s_squared=sol.s_squared, dipole=sol.dipole, nao=sol.nao, nmo=sol.nmo,
                    converged=sol.converged, stable=sol.stable, stability_rounds=sol.rounds,
                    inputs=inputs, provenance=prov, known_states=known)
    _IN_BASIS[key] = ref
    return ref
