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
(:func:`input_hash`); a stored reference is used only while the hash still matches.
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
#: |E_recomputed − E_stored| allowed by ``verify(..., recompute=True)`` (Eh).
RECOMPUTE_TOLERANCE = 1e-9

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
    actually uses (``mol._basis``) and the reference settings (conv_tol,
    conv_tol_grad, stability policy); Kohn–Sham cases also the functional, KS_POLICY,
    the pinned grid's description and content hash. Not hashed: the pyscf, libxc or
    numpy version.
    """
    mol = case.mole()
    payload = _inputs(case)
    payload["basis_contents"] = _clean(mol._basis)
    payload["settings"] = {"conv_tol": CONV_TOL, "conv_tol_grad": CONV_TOL_GRAD,
                           "stability_policy": STABILITY_POLICY}
    if case.functional:
        payload["settings"].update(_ks_settings(case, mol))
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"))
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


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
        """A JSON-ready dict (floats at full precision), tagged with REFERENCE_FORMAT."""
        data = self._to_json()
        if self.functional:  # Kohn–Sham keys only where they mean something
            data["functional"] = self.functional
            data["energies"]["xc"] = _clean(self.energy_xc)
        return data

    def _to_json(self) -> dict[str, Any]:
        return _clean({
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
        })

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
                     functional=case.functional, energy_xc=float(terms.get("xc", 0.0)))


# --------------------------------------------------------------------------- storage


def reference_path(case: Case, directory=None) -> Path:
    """``<directory>/<case name>.json`` (directory default: :func:`default_data_dir`)."""
    directory = Path(directory) if directory is not None else default_data_dir()
    return directory / f"{case.name}.json"


def write_reference(reference: Reference, directory=None) -> Path:
    """Write ``reference`` as readable JSON (indent 1); atomic replace. Returns the path."""
    directory = Path(directory) if directory is not None else default_data_dir()
    directory.mkdir(parents=True, exist_ok=True)
    path = directory / f"{reference.case}.json"
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
        return Reference.from_json(data)
    except ReferenceDataError as exc:
        raise ReferenceDataError(f"{path} is malformed: {exc}", case=case.name,
                                 field="reference") from None


def _what_changed(case: Case, ref: Reference) -> str:
    now = _clean(_inputs(case))
    changed = [k for k in now if ref.inputs.get(k) != now[k]]
    if changed:
        return ", ".join(changed) + " changed"
    return "basis definition or reference settings changed"


def load_reference(case: Case, directory=None) -> Reference:
    """Load the stored reference of ``case``; raises a one-line ReferenceDataError when
    the file is missing, unreadable or malformed, belongs to another case, or its input
    hash no longer matches the case (naming what changed)."""
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
    return ref


def reference_for(case: Case, directory=None, *, write: bool = False
                  ) -> tuple[Reference, str]:
    """The reference of ``case`` and where it came from: ``"stored"`` when a stored file
    matches the input hash, else computed now: ``"written"`` when ``write`` stored it in
    ``directory``, ``"computed"`` otherwise."""
    try:
        return load_reference(case, directory), "stored"
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
    """Check the stored references: file well-formed, hash matches, energy terms sum to
    the total (ENERGY_SUM_TOLERANCE), converged and stable; with ``recompute`` also
    recompute and compare the total energy to RECOMPUTE_TOLERANCE (Eh).

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
        gap = ref.energy - ref.energy_terms_sum
        if abs(gap) > ENERGY_SUM_TOLERANCE:
            problems.append(f"energy terms miss the total by {gap:.1e} Eh")
        if not (ref.converged and ref.stable):
            problems.append(f"converged={ref.converged}, stable={ref.stable}")
        message = f"hash matches, E = {ref.energy:.10f} Eh"
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
