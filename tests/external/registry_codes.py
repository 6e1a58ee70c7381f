"""Adapters for independent open-source SCF programs installed from the package registry.

Each ``solve_<code>(problem) -> dict`` is a plug-in: it hands the harness ``Problem``
(coordinates in **bohr**, energies returned in **hartree**) to the code, lets the code do
its own integrals and its own SCF, and returns what the code computed — energy,
coefficients, occupations, orbital energies, density, Fock, overlap and the integrals the
code exposes — in the code's own AO order, normalisation and sign conventions. Nothing
is reordered or rescaled here: detecting AO conventions is the harness's job.

Two ways to give a code its basis:

* by name (``solve_<code>``): the code's own basis data for ``problem.basis``. A basis the
  code does not carry raises :class:`CodeCannotRun` ("no cc-pVDZ in pyqint").
* the harness's basis (``solve_<code>_harness_basis``): the NWChem-format text of the
  exact basis the reference uses — ``problem.basis_nwchem`` when the Problem has it,
  otherwise what ``scf-harness --command`` writes as ``basis.nwchem``
  (``harness.run.external.basis_nwchem(problem.to_pyscf())``) — parsed here and handed
  to the code as its own basis objects.

Codes (see docs/external-codes.md, "Tried on real codes"):

* pyqint (``pip install pyqint``): C++ integrals, Python RHF/UHF with DIIS; cartesian
  Gaussians, each primitive normalised, contractions as given; basis files sto3g, sto6g,
  p321 (3-21G), p631 (6-31G), aug-cc-pVXZ. No ROHF.
* pyquante2 (``pip install pyquante2``): Cython integrals, Python RHF/UHF/ROHF; cartesian
  Gaussians; bases sto-3g, 6-31g, 6-31g**.
* openqp (``pip install openqp``, imported as ``oqp``): Fortran core; bases from its own
  basis-set-exchange files (see that adapter).
"""

from __future__ import annotations

import os

import numpy as np

os.environ.setdefault("OMP_NUM_THREADS", "1")  # the machine is shared; one thread per code

#: Element symbols by atomic number (index 0 unused), H..Ar: every case of the catalogue.
SYMBOLS = ("X", "H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne", "Na", "Mg", "Al",
           "Si", "P", "S", "Cl", "Ar")
LETTERS = "SPDFGHI"


class CodeCannotRun(NotImplementedError):
    """The code has no way to run this case (a basis or a method it does not carry)."""


def cannot_run(reason: str):
    """Raise the harness's 'unsupported' exception if this harness has one, else ours."""
    import harness

    cls = getattr(harness, "Unsupported", None)
    raise (cls or CodeCannotRun)(reason)


# --------------------------------------------------------------------------- basis text


def harness_basis_text(problem) -> str:
    """NWChem-format text of the exact basis the reference uses (full precision)."""
    text = getattr(problem, "basis_nwchem", None)
    if text:
        return text
    from harness.run.external import basis_nwchem

    return basis_nwchem(problem.to_pyscf())


def parse_nwchem(text: str) -> dict[str, list[tuple[int, list[float], list[float]]]]:
    """{symbol: [(l, exponents, coefficients), ...]} from NWChem basis text.

    A general contraction (several coefficient columns) becomes one shell per column;
    an ``SP`` shell becomes an s and a p shell. Shell order as in the file."""
    out: dict[str, list] = {}
    current = None  # (symbol, letters, rows)

    def flush():
        if current is None:
            return
        symbol, letters, rows = current
        exps = [r[0] for r in rows]
        if letters == "SP":
            out.setdefault(symbol, []).append((0, exps, [r[1] for r in rows]))
            out[symbol].append((1, exps, [r[2] for r in rows]))
            return
        l = LETTERS.index(letters)
        for col in range(1, len(rows[0])):
            out.setdefault(symbol, []).append((l, exps, [r[col] for r in rows]))

    for raw in text.splitlines():
        line = raw.split("#")[0].strip()
        if not line or line.upper().startswith(("BASIS", "END")):
            continue
        parts = line.split()
        if parts[0][0].isalpha():
            flush()
            current = (parts[0].capitalize(), parts[1].upper(), [])
        else:
            current[2].append([float(x.replace("D", "E").replace("d", "e")) for x in parts])
    flush()
    return out


def _method_guard(problem, code: str, methods: tuple[str, ...]):
    if problem.method not in methods:
        cannot_run(f"{code} has no {problem.method.upper()}")


# --------------------------------------------------------------------------- pyqint

#: pyqint's own basis files (pyqint/basissets/*.json) for the harness's basis names.
PYQINT_BASES = {"sto-3g": "sto3g", "sto-6g": "sto6g", "3-21g": "p321", "6-31g": "p631",
                "aug-cc-pvdz": "aug-cc-pVDZ", "aug-cc-pvtz": "aug-cc-pVTZ",
                "aug-cc-pvqz": "aug-cc-pVQZ"}
#: Energy-change threshold handed to pyqint's SCF (its only convergence control), Eh.
PYQINT_ENERGY_TOLERANCE = 1e-12


def _pyqint_molecule(problem):
    from pyqint import Molecule

    mol = Molecule(problem.name)
    for z, (x, y, w) in zip(problem.numbers, problem.coordinates):
        mol.add_atom(SYMBOLS[int(z)], float(x), float(y), float(w), unit="bohr")
    mol.set_charge(int(problem.charge))
    return mol


def _pyqint_cgfs(problem):
    """pyqint CGF objects for the harness's basis: cartesian shells in pyqint's own
    order (xx, xy, xz, yy, yz, zz); spherical d and higher through pyqint's
    ``add_spherical_gto`` in its m = -l..l order; p always x, y, z (as pyqint's own
    basis loader builds them)."""
    from pyqint import CGF

    basis = parse_nwchem(harness_basis_text(problem))
    cgfs = []
    for z, xyz in zip(problem.numbers, problem.coordinates):
        pos = [float(v) for v in xyz]
        for l, exps, coefs in basis[SYMBOLS[int(z)]]:
            if problem.cartesian or l < 2:
                powers = sorted(((i, j, l - i - j) for i in range(l + 1)
                                 for j in range(l + 1 - i)), reverse=True)
                for lx, ly, lz in powers:
                    cgf = CGF(pos)
                    for a, c in zip(exps, coefs):
                        cgf.add_gto(c, a, lx, ly, lz)
                    cgfs.append(cgf)
            else:
                for m in range(-l, l + 1):
                    cgf = CGF(pos)
                    for a, c in zip(exps, coefs):
                        cgf.add_spherical_gto(c, a, l, m)
                    cgfs.append(cgf)
    return cgfs


def _pyqint_run(problem, basis):
    from pyqint import HF

    _method_guard(problem, "pyqint", ("rhf", "uhf"))
    mol = _pyqint_molecule(problem)
    hf = HF(mol, basis)
    if problem.method == "rhf":
        res = hf.rhf(tolerance=PYQINT_ENERGY_TOLERANCE, itermax=300)
        n = len(res["orbe"])
        occ = np.array([2.0 if i < problem.n_electrons // 2 else 0.0 for i in range(n)])
        out = {"coefficients": res["orbc"], "occupations": occ,
               "orbital_energies": res["orbe"], "density": res["density"],
               "fock": res["fock"]}
    else:
        res = hf.uhf(problem.multiplicity, tolerance=PYQINT_ENERGY_TOLERANCE, itermax=300)
        n = len(res["orbe_alpha"])
        occ = np.array([[1.0 if i < k else 0.0 for i in range(n)]
                        for k in (problem.n_alpha, problem.n_beta)])
        out = {"coefficients": np.stack([res["orbc_alpha"], res["orbc_beta"]]),
               "occupations": occ,
               "orbital_energies": np.stack([res["orbe_alpha"], res["orbe_beta"]]),
               "density": np.stack([res["density_alpha"], res["density_beta"]]),
               "fock": np.stack([res["fock_alpha"], res["fock_beta"]])}
    out.update(energy=float(res["energy"]), overlap=res["overlap"], kinetic=res["kinetic"],
               nuclear_attraction=res["nuclear"], core_hamiltonian=res["hcore"],
               two_electron=res["tetensor"], iterations=len(res["energies"]))
    return out


def solve_pyqint(problem) -> dict:
    """pyqint with its own basis file for ``problem.basis`` (bohr in, Eh out)."""
    if problem.cartesian is False and problem.basis not in ("sto-3g", "sto-6g", "3-21g",
                                                            "6-31g"):
        # pyqint's shells are cartesian only; a spherical basis with d or higher
        # functions has a different number of functions
        cannot_run(f"pyqint has no spherical {problem.basis} (cartesian shells only)")
    name = PYQINT_BASES.get(problem.basis)
    if name is None:
        cannot_run(f"no {problem.basis} in pyqint")
    return _pyqint_run(problem, name)


def solve_pyqint_harness_basis(problem) -> dict:
    """pyqint with the harness's exact basis (NWChem text → pyqint CGFs), bohr in, Eh out."""
    _method_guard(problem, "pyqint", ("rhf", "uhf"))
    return _pyqint_run(problem, _pyqint_cgfs(problem))


# --------------------------------------------------------------------------- openqp

#: OpenQP's SCF convergence threshold (its density/DIIS error measure), asked tighter
#: than the harness's stationarity so the returned state is the converged one.
OPENQP_CONVERGENCE = 1e-10


def _openqp_unpack(packed, nbf):
    """Square symmetric matrix from OpenQP's packed lower triangle (row-major)."""
    packed = np.asarray(packed, dtype=float).ravel()
    mat = np.zeros((nbf, nbf))
    rows, cols = np.tril_indices(nbf)
    mat[rows, cols] = packed
    mat[cols, rows] = packed
    return mat


def solve_openqp(problem) -> dict:
    """OpenQP (Fortran core) with its own basis data for ``problem.basis``: OpenQP reads
    named bases through the ``basis_set_exchange`` library. The geometry is handed over
    in **ångström** (bohr × a0, ``harness.contract.units``), as OpenQP's input expects."""
    return _openqp_run(problem, harness_basis=False)


def solve_openqp_harness_basis(problem) -> dict:
    """OpenQP with the harness's exact basis: the NWChem text written to ``basis.nw`` and
    given as ``basis=file:basis.nw`` (OpenQP reads it with basis_set_exchange's reader)."""
    return _openqp_run(problem, harness_basis=True)


def _openqp_run(problem, *, harness_basis: bool) -> dict:
    import tempfile

    from harness.contract.units import BOHR_IN_ANGSTROM
    from oqp.openqp import OpenQP

    system = "\n".join(f"{int(z)} " + " ".join(f"{float(v) * BOHR_IN_ANGSTROM:.12f}" for v in xyz)
                       for z, xyz in zip(problem.numbers, problem.coordinates))
    workdir = tempfile.mkdtemp(prefix="openqp-")
    basis = problem.basis
    if harness_basis:
        path = os.path.join(workdir, "basis.nw")
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(harness_basis_text(problem))
        basis = "file:basis.nw"  # relative to the input file: OpenQP names its molden file after it
    cwd = os.getcwd()
    os.chdir(workdir)  # OpenQP writes its log and molden files to the working directory
    try:
        job = OpenQP(project="case", silent=1, usempi=False)
        job.input(system=system, charge=int(problem.charge), basis=basis,
                  method="hf", runtype="energy",
                  ispher="false" if problem.cartesian else "true")
        job.scf(type=problem.method, multiplicity=int(problem.multiplicity),
                conv=OPENQP_CONVERGENCE, maxit=200)
        # OpenQP's own Runner, as job.run() calls it, but with an input-file path: OpenQP
        # resolves "file:" bases relative to it (job.run() passes None and then fails)
        from oqp.pyoqp import Runner

        runner = Runner(project="case", input_file=os.path.join(workdir, "case.inp"),
                        log=job.log, input_dict=job.config_str, silent=1, usempi=False)
        runner.run()
        mol = runner.mol
    finally:
        os.chdir(cwd)
    data = mol.data
    nbf = int(np.asarray(data["OQP::E_MO_A"]).size)

    def square(tag):
        return _openqp_unpack(data[tag], nbf)

    def mos(tag):  # Fortran column-stored MOs → (nao, nmo)
        return np.asarray(data[tag], dtype=float).reshape(nbf, nbf).T

    out = {"energy": float(mol.mol_energy.energy), "overlap": square("OQP::SM"),
           "core_hamiltonian": square("OQP::Hcore"), "kinetic": square("OQP::TM")}
    if problem.method == "rhf":
        occ = np.array([2.0 if i < problem.n_electrons // 2 else 0.0 for i in range(nbf)])
        out.update(coefficients=mos("OQP::VEC_MO_A"), occupations=occ,
                   orbital_energies=np.asarray(data["OQP::E_MO_A"], dtype=float).ravel(),
                   density=square("OQP::DM_A"), fock=square("OQP::FOCK_A"))
    else:
        occ = np.array([[1.0 if i < k else 0.0 for i in range(nbf)]
                        for k in (problem.n_alpha, problem.n_beta)])
        out.update(coefficients=np.stack([mos("OQP::VEC_MO_A"), mos("OQP::VEC_MO_B")]),
                   occupations=occ if problem.method == "uhf" else occ.sum(0),
                   orbital_energies=np.stack([np.asarray(data[t], dtype=float).ravel()
                                              for t in ("OQP::E_MO_A", "OQP::E_MO_B")]),
                   density=np.stack([square("OQP::DM_A"), square("OQP::DM_B")]),
                   fock=np.stack([square("OQP::FOCK_A"), square("OQP::FOCK_B")]))
        if problem.method == "rohf":
            out["coefficients"] = out["coefficients"][0]
            out["orbital_energies"] = out["orbital_energies"][0]
    return out


# --------------------------------------------------------------------------- pyquante2

#: pyquante2's basis names (pyquante2/basis/data.py) for the harness's names.
PYQUANTE2_BASES = {"sto-3g": "sto-3g", "6-31g": "6-31g", "6-31g**": "6-31g**"}
#: Energy-change threshold handed to pyquante2's SCF iterators (their only control), Eh.
PYQUANTE2_ENERGY_TOLERANCE = 1e-12


class _Pyquante2Basis:
    """The attributes of ``pyquante2.basisset`` its integral and SCF code read, built from
    the harness's NWChem text: one ``cgbf`` per cartesian component, in pyquante2's own
    order (x, y, z; xx, xy, xz, yy, yz, zz), each contracted function normalised by
    pyquante2 (``cgbf.normalize``)."""

    def __init__(self, problem):
        from pyquante2.basis.cgbf import cgbf
        from pyquante2.basis.tools import am2pow

        basis = parse_nwchem(harness_basis_text(problem))
        self.name = problem.basis
        self.bfs = []
        for z, xyz in zip(problem.numbers, problem.coordinates):
            origin = tuple(float(v) for v in xyz)
            for l, exps, coefs in basis[SYMBOLS[int(z)]]:
                for power in am2pow[l]:
                    self.bfs.append(cgbf(origin, power, list(exps), list(coefs)))

    def __getitem__(self, i):
        return self.bfs[i]

    def __len__(self):
        return len(self.bfs)


def _pyquante2_run(problem, bfs):
    from pyquante2 import molecule, rhf, rohf, uhf
    from pyquante2.utils import dmat

    geo = molecule([(int(z), *map(float, xyz)) for z, xyz in zip(problem.numbers,
                                                                 problem.coordinates)],
                   units="Bohr", charge=int(problem.charge),
                   multiplicity=int(problem.multiplicity))
    if bfs is None:
        from pyquante2 import basisset

        name = PYQUANTE2_BASES.get(problem.basis)
        if name is None or (not problem.cartesian and problem.basis not in ("sto-3g", "6-31g")):
            cannot_run(f"no {'cartesian' if problem.cartesian else 'spherical'} "
                       f"{problem.basis} in pyquante2")
        bfs = basisset(geo, name)
    solver = {"rhf": rhf, "uhf": uhf, "rohf": rohf}[problem.method](geo, bfs)
    energies = solver.converge(tol=PYQUANTE2_ENERGY_TOLERANCE, maxiters=500)
    i1, i2 = solver.i1, solver.i2
    h = i1.T + i1.V
    out = {"energy": float(solver.energy), "overlap": np.asarray(i1.S),
           "kinetic": np.asarray(i1.T), "nuclear_attraction": np.asarray(i1.V),
           "core_hamiltonian": h, "two_electron": np.asarray(i2._2e_ints),
           "converged": bool(solver.converged), "iterations": len(energies)}
    if problem.method == "rhf":
        c = solver.orbs
        d = dmat(c, problem.n_electrons // 2)
        n = c.shape[1]
        out.update(coefficients=c, orbital_energies=solver.orbe, density=2 * d,
                   occupations=np.array([2.0 if i < problem.n_electrons // 2 else 0.0
                                         for i in range(n)]),
                   # the Fock of the returned density, built with pyquante2's own J/K
                   fock=h + i2.get_2jk(d))
    elif problem.method == "uhf":
        ca, cb = solver.orbsa, solver.orbsb
        da, db = dmat(ca, problem.n_alpha), dmat(cb, problem.n_beta)
        ja, jb = i2.get_j(da), i2.get_j(db)
        n = ca.shape[1]
        out.update(coefficients=np.stack([ca, cb]),
                   orbital_energies=np.stack([solver.orbea, solver.orbeb]),
                   occupations=np.array([[1.0 if i < k else 0.0 for i in range(n)]
                                         for k in (problem.n_alpha, problem.n_beta)]),
                   density=np.stack([da, db]),
                   fock=np.stack([h + ja + jb - i2.get_k(da), h + ja + jb - i2.get_k(db)]))
    else:
        c = solver.orbs
        n = c.shape[1]
        out.update(coefficients=c, orbital_energies=solver.orbe,
                   occupations=np.array([2.0 if i < problem.n_beta else
                                         1.0 if i < problem.n_alpha else 0.0
                                         for i in range(n)]))
    return out


def solve_pyquante2(problem) -> dict:
    """pyquante2 with its own basis data for ``problem.basis`` (bohr in, Eh out)."""
    return _pyquante2_run(problem, None)


def solve_pyquante2_harness_basis(problem) -> dict:
    """pyquante2 with the harness's exact basis (NWChem text → pyquante2 cgbf objects);
    cartesian shells only, so spherical cases with d or higher functions cannot run."""
    basis = parse_nwchem(harness_basis_text(problem))
    if not problem.cartesian and any(l >= 2 for shells in basis.values() for l, _, _ in shells):
        cannot_run(f"pyquante2 has cartesian shells only; {problem.basis} here is spherical")
    return _pyquante2_run(problem, _Pyquante2Basis(problem))
