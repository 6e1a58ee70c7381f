"""Metamorphic properties of an SCF code: what must not change when the input changes.

Each function runs the plug-in (a callable ``solve(problem)`` or a ``MODULE:FUNCTION``
spec, called in this process) on a case and on transformed variants, and returns a
:class:`PropertyResult` (name, passed, value, tolerance, one-line message):

* :func:`rigid_motion_invariance` — energy and orbital energies unchanged when the
  molecule is rotated and translated;
* :func:`atom_order_invariance` — unchanged when the atoms are listed in another order;
* :func:`variant_invariance` — the same for a drawn :class:`harness.testing.strategies.Variant`;
* :func:`size_consistency` — two closed-shell RHF fragments far apart: E(A⋯B) = E(A) + E(B);
* :func:`unit_consistency` — the molecule read from an XYZ file in ångström (through
  ``harness.catalogue.cases.read_xyz``) gives the energy of the bohr coordinates;
* :func:`guess_independence` — several perturbed starting densities reach one state (or
  the result lists the energies reached).

Atomic units: coordinates in bohr, energies in hartree (Eh).
"""

from __future__ import annotations

import dataclasses
import math
import tempfile
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from harness.catalogue.cases import Case
from harness.contract.problem import DEFAULT_CONVERGENCE
from harness.checks.tolerances import CONVERGENCE_FACTOR
from harness.contract.units import BOHR_IN_ANGSTROM

#: |E − E'| (Eh) allowed between a molecule and a moved or reordered copy. Both runs are
#: by the same code with the same convergence; the energy is stationary, so a residual
#: gradient g enters only as ~g² (1e-10 for g = 1e-5), and the integrals of a rotated
#: molecule agree to rounding: the same size as the energy-consistency tolerance.
INVARIANT_ENERGY = 1e-8
#: Orbital energies are first order in the residual gradient: max|ε − ε'| (Eh) may be
#: CONVERGENCE_FACTOR × convergence (the factor of the derived check tolerances).
ORBITAL_ENERGY_FACTOR = CONVERGENCE_FACTOR
#: |E(A⋯B) − E(A) − E(B)| (Eh) allowed for closed-shell fragments SEPARATION bohr apart.
#: The overlap of the fragments' orbitals is ~e^(−R) and vanishes, but their
#: electrostatic interaction remains: dipole–dipole ≤ 2 μA μB / R³ ≈ 1e-6 Eh for
#: μ ≈ 0.7 e·bohr (water/STO-3G) at R = 100 bohr; 1e-5 leaves a factor of ten.
SIZE_CONSISTENCY = 1e-5
#: Distance (bohr) between the fragments' centroids in :func:`size_consistency`.
SEPARATION = 100.0
#: |E(Å file) − E(bohr)| (Eh): the XYZ file keeps 15 decimals of ångström, so the
#: geometries agree to ~1e-14 bohr and the energies to rounding.
UNIT_CONSISTENCY = 1e-8
#: Two runs whose energies differ by less than this (Eh) reached the same state: the
#: reference-energy tolerance (harness.checks.tolerances.REFERENCE_ENERGY).
SAME_STATE = 1e-6
#: Guesses tried by :func:`guess_independence`, their largest rotation (rad), the seed.
GUESS_COUNT = 4
GUESS_MAX_ANGLE = 0.3
GUESS_SEED = 20240611
#: The default rigid motion of :func:`rigid_motion_invariance`: a rotation vector (rad)
#: about no special axis, and a translation (bohr) small enough that the origin stays
#: among the nuclei of a small molecule, so coordinates of both signs occur.
DEFAULT_ROTATION = (0.4, -1.1, 0.7)
DEFAULT_TRANSLATION = (0.2, -0.1, 0.3)


@dataclasses.dataclass(frozen=True)
class PropertyResult:
    """The verdict of one metamorphic property on one case.

    ``value`` is the measured deviation (Eh) compared with ``tolerance``; ``message`` is
    one line: ``name: quantity = value > tolerance (case → variant), details``.
    ``energies`` holds the energies (Eh) the property compared, in run order.
    """

    name: str
    passed: bool
    value: float
    tolerance: float
    message: str
    energies: tuple[float, ...] = ()


@dataclasses.dataclass(frozen=True)
class Run:
    """What the property needs from one plug-in run: energy (Eh) and orbital energies
    sorted per spin ((1, nmo) or (2, nmo); None when not returned or unreadable)."""

    name: str
    energy: float
    orbital_energies: np.ndarray | None


def resolve_plugin(plugin) -> Callable:
    """A callable plug-in, or the function a ``MODULE:FUNCTION`` spec names."""
    if isinstance(plugin, str):
        from harness.run.plugins import load_plugin

        return load_plugin(plugin)
    if not callable(plugin):
        raise TypeError(f"plugin must be callable or a MODULE:FUNCTION spec, got "
                        f"{type(plugin).__name__}")
    return plugin


def run(plugin, problem) -> Run:
    """Call the plug-in on ``problem`` (bohr) in this process and read its energy (Eh)
    and orbital energies; an energy that is missing or not a number becomes NaN."""
    from harness.contract.solution import extract

    solution = extract(resolve_plugin(plugin)(problem))
    energy = float(solution.energy) if isinstance(solution.energy, float) else math.nan
    e = solution.orbital_energies
    if isinstance(e, np.ndarray) and e.ndim in (1, 2):
        e = np.sort(np.atleast_2d(e), axis=-1)
    else:
        e = None
    return Run(name=problem.name, energy=energy, orbital_energies=e)


def _problem(case: Case, convergence: float, initial_density=None):
    return case.problem(convergence=convergence, initial_density=initial_density)


def _fail_if_nan(value: float, tolerance: float) -> bool:
    return bool(value <= tolerance)  # False for NaN


def compare_runs(name: str, first: Run, second: Run, *, convergence: float,
                 energy_tolerance: float = INVARIANT_ENERGY) -> PropertyResult:
    """Energy within ``energy_tolerance`` and, when both runs returned them, sorted
    orbital energies within ORBITAL_ENERGY_FACTOR × convergence (Eh)."""
    de = abs(first.energy - second.energy)
    where = f"({first.name} → {second.name})"
    energies = (first.energy, second.energy)
    detail = f"E = {first.energy:.10f}, E' = {second.energy:.10f} Eh"
    if not _fail_if_nan(de, energy_tolerance):
        return PropertyResult(name, False, de, energy_tolerance,
                              f"{name}: |E − E'| = {de:.1e} > {energy_tolerance:.1e} {where}, "
                              f"{detail}", energies)
    e1, e2 = first.orbital_energies, second.orbital_energies
    e_tol = ORBITAL_ENERGY_FACTOR * convergence
    if e1 is not None and e2 is not None:
        if e1.shape != e2.shape:
            return PropertyResult(name, False, math.inf, e_tol,
                                  f"{name}: orbital energies have shapes {e1.shape} and "
                                  f"{e2.shape} {where}", energies)
        diff = np.abs(e1 - e2)
        worst = float(diff.max()) if diff.size else 0.0
        if not _fail_if_nan(worst, e_tol):
            spin, k = np.unravel_index(int(np.nanargmax(diff)), diff.shape)
            label = ("alpha " if spin == 0 else "beta ") if e1.shape[0] == 2 else ""
            return PropertyResult(name, False, worst, e_tol,
                                  f"{name}: max|ε − ε'| = {worst:.1e} > {e_tol:.1e} {where}, "
                                  f"{label}orbital {k} (ascending): ε = {e1[spin, k]:.8f}, "
                                  f"ε' = {e2[spin, k]:.8f} Eh", energies)
        orbital = f", max|ε − ε'| = {worst:.1e} ≤ {e_tol:.1e}"
    else:
        orbital = ", orbital energies not returned"
    return PropertyResult(name, True, de, energy_tolerance,
                          f"{name}: |E − E'| = {de:.1e} ≤ {energy_tolerance:.1e} {where}"
                          f"{orbital}", energies)


# --------------------------------------------------------------------------- invariance


def invariance(plugin, case: Case, transformed: Case, *, name: str = "invariance",
               convergence: float = DEFAULT_CONVERGENCE,
               energy_tolerance: float = INVARIANT_ENERGY,
               cache: dict | None = None) -> PropertyResult:
    """Run the plug-in on ``case`` and on ``transformed`` (the same molecule moved or
    reordered, same basis) and compare energies and orbital energies (Eh).

    ``cache``: a dict you own in which the run of ``case`` is kept (keyed by plug-in,
    case name and convergence), so that many variants of one case run it once.
    """
    if transformed.basis != case.basis or sorted(transformed.numbers) != sorted(case.numbers):
        raise ValueError(f"{transformed.name} is not the molecule of {case.name} in the "
                         f"same basis; energies need not agree")
    key = (id(plugin) if not isinstance(plugin, str) else plugin, case.name, convergence)
    if cache is not None and key in cache:
        first = cache[key]
    else:
        first = run(plugin, _problem(case, convergence))
        if cache is not None:
            cache[key] = first
    return compare_runs(name, first, run(plugin, _problem(transformed, convergence)),
                        convergence=convergence, energy_tolerance=energy_tolerance)


def rigid_motion_invariance(plugin, case: Case, *, rotation=DEFAULT_ROTATION,
                            translation=DEFAULT_TRANSLATION,
                            convergence: float = DEFAULT_CONVERGENCE) -> PropertyResult:
    """``rigid-motion``: E and ε of ``case`` equal those of R (r − c) + c + t (rotation
    vector in rad about the centroid c, translation in bohr;
    :func:`harness.testing.strategies.transform`)."""
    from harness.testing.strategies import transform

    moved = transform(case, rotation=rotation, translation=translation)
    return invariance(plugin, case, moved, name="rigid-motion", convergence=convergence)


def atom_order_invariance(plugin, case: Case, *, permutation: Sequence[int] | None = None,
                          convergence: float = DEFAULT_CONVERGENCE) -> PropertyResult:
    """``atom-order``: E and ε unchanged when atom i of the new list is atom
    ``permutation[i]`` of the case (default: the reversed order)."""
    from harness.testing.strategies import transform

    n = len(case.numbers)
    permutation = tuple(range(n))[::-1] if permutation is None else tuple(permutation)
    reordered = transform(case, permutation=permutation)
    return invariance(plugin, case, reordered, name="atom-order", convergence=convergence)


def variant_invariance(plugin, variant, *, convergence: float = DEFAULT_CONVERGENCE,
                       cache: dict | None = None) -> PropertyResult:
    """:func:`invariance` for a :class:`harness.testing.strategies.Variant` that is the same
    molecule (no stretch, no other basis): E and ε of ``variant.case`` equal those of its
    base. Named ``rigid-motion`` (rotation and/or translation only), ``atom-order``
    (permutation only), ``rigid-motion+atom-order`` or ``identity``."""
    if not variant.same_molecule:
        raise ValueError(f"{variant.case.name} changes the molecule or basis; draw it "
                         f"with max_stretch=0 and without bases")
    parts = []
    if {"rot", "shift"} & set(variant.kinds):
        parts.append("rigid-motion")
    if "perm" in variant.kinds:
        parts.append("atom-order")
    return invariance(plugin, variant.base, variant.case, name="+".join(parts) or "identity",
                      convergence=convergence, cache=cache)


# --------------------------------------------------------------------------- size


def separated(a: Case, b: Case, *, separation: float = SEPARATION) -> Case:
    """The case A⋯B: fragment B translated so that its centroid is ``separation`` bohr
    from A's along +x; same basis and method; charges add, both must be singlets."""
    if a.basis != b.basis or a.cartesian != b.cartesian:
        raise ValueError(f"{a.name} and {b.name} must use the same basis")
    if a.method != "rhf" or b.method != "rhf" or a.multiplicity != 1 or b.multiplicity != 1:
        raise ValueError(f"size consistency is defined here for closed-shell RHF "
                         f"fragments; got {a.name} and {b.name}")
    ra, rb = np.asarray(a.coordinates), np.asarray(b.coordinates)
    shift = ra.mean(axis=0) - rb.mean(axis=0) + np.array([separation, 0.0, 0.0])
    return Case(name=f"{a.name}+{b.name}@{separation:g}bohr",
                numbers=tuple(a.numbers) + tuple(b.numbers),
                coordinates=np.vstack([ra, rb + shift]), charge=a.charge + b.charge,
                multiplicity=1, basis=a.basis, cartesian=a.cartesian, method="rhf",
                note=f"{a.name} and {b.name} {separation:g} bohr apart")


def size_consistency(plugin, a: Case, b: Case, *, separation: float = SEPARATION,
                     convergence: float = DEFAULT_CONVERGENCE,
                     tolerance: float = SIZE_CONSISTENCY) -> PropertyResult:
    """``size-consistency``: |E(A⋯B) − E(A) − E(B)| ≤ tolerance (Eh) for closed-shell RHF
    fragments A, B with centroids ``separation`` bohr apart (A first, then B)."""
    pair = separated(a, b, separation=separation)
    ea = run(plugin, _problem(a, convergence)).energy
    eb = run(plugin, _problem(b, convergence)).energy
    eab = run(plugin, _problem(pair, convergence)).energy
    dev = abs(eab - ea - eb)
    ok = _fail_if_nan(dev, tolerance)
    rel = "≤" if ok else ">"
    return PropertyResult("size-consistency", ok, dev, tolerance,
                          f"size-consistency: |E(AB) − E(A) − E(B)| = {dev:.1e} {rel} "
                          f"{tolerance:.1e} ({pair.name}), E(AB) = {eab:.10f}, "
                          f"E(A) + E(B) = {ea + eb:.10f} Eh", (ea, eb, eab))


# --------------------------------------------------------------------------- units


def write_xyz_angstrom(case: Case, path) -> Path:
    """Write the case's geometry as an XYZ file in ångström (Å = bohr × BOHR_IN_ANGSTROM,
    15 decimals), comment line ``units=angstrom``. Returns the path."""
    from harness.backend.mole import element_symbols

    symbols = element_symbols()
    path = Path(path)
    lines = [str(len(case.numbers)), f"units=angstrom source: {case.name}, written by "
             "harness.testing.metamorphic (bohr converted to ångström)"]
    for z, xyz in zip(case.numbers, np.asarray(case.coordinates) * BOHR_IN_ANGSTROM):
        lines.append(f"{symbols[z]:<2} " + " ".join(f"{x:.15f}" for x in xyz))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def unit_consistency(plugin, case: Case, *, xyz_path=None,
                     convergence: float = DEFAULT_CONVERGENCE,
                     tolerance: float = UNIT_CONSISTENCY) -> PropertyResult:
    """``unit-consistency``: the molecule read through ``harness.catalogue.cases.read_xyz`` from an
    XYZ file (default: the case written in ångström by :func:`write_xyz_angstrom`) gives
    the energy of the case's own bohr coordinates, within ``tolerance`` (Eh). The
    largest coordinate difference (bohr) is reported too."""
    from harness.catalogue.cases import read_xyz

    if xyz_path is None:
        with tempfile.TemporaryDirectory(prefix="scf-harness-units-") as folder:
            numbers, coords, _ = read_xyz(write_xyz_angstrom(case, Path(folder) / "mol.xyz"))
        source = "written in Å"
    else:
        numbers, coords, _ = read_xyz(xyz_path)
        source = str(xyz_path)
    if tuple(numbers) != tuple(case.numbers):
        return PropertyResult("unit-consistency", False, math.inf, tolerance,
                              f"unit-consistency: {source} holds atoms {tuple(numbers)}, "
                              f"{case.name} has {tuple(case.numbers)}")
    from_file = dataclasses.replace(case, name=f"{case.name}~xyz", coordinates=coords)
    shift = float(np.abs(np.asarray(coords) - np.asarray(case.coordinates)).max())
    e_bohr = run(plugin, _problem(case, convergence)).energy
    e_file = run(plugin, _problem(from_file, convergence)).energy
    dev = abs(e_file - e_bohr)
    ok = _fail_if_nan(dev, tolerance)
    rel = "≤" if ok else ">"
    return PropertyResult("unit-consistency", ok, dev, tolerance,
                          f"unit-consistency: |E(xyz) − E(bohr)| = {dev:.1e} {rel} "
                          f"{tolerance:.1e} ({case.name}, {source}), max|Δr| = {shift:.1e} "
                          f"bohr, E(xyz) = {e_file:.10f}, E(bohr) = {e_bohr:.10f} Eh",
                          (e_bohr, e_file))


# --------------------------------------------------------------------------- guesses


def states(energies: Sequence[float], same: float = SAME_STATE) -> list[tuple[float, int]]:
    """Group energies (Eh) that differ by less than ``same`` from their group's lowest:
    [(lowest energy of the group, count)], ascending. NaNs form no group."""
    groups: list[list[float]] = []
    for e in sorted(e for e in energies if not math.isnan(e)):
        if groups and e - groups[-1][0] < same:
            groups[-1].append(e)
        else:
            groups.append([e])
    return [(g[0], len(g)) for g in groups]


def guess_independence(plugin, case: Case, *, count: int = GUESS_COUNT,
                       max_angle: float = GUESS_MAX_ANGLE, seed: int = GUESS_SEED,
                       convergence: float = DEFAULT_CONVERGENCE,
                       same: float = SAME_STATE) -> PropertyResult:
    """``guess-independence``: from ``count`` starting densities — the core-Hamiltonian
    guess rotated between occupation classes by at most ``max_angle`` rad (random,
    seeded; :func:`harness.testing.strategies.rotated_density`) — the plug-in reaches one state:
    all energies within ``same`` (Eh) of each other. Otherwise the message lists the
    energies reached and how often. ``value`` is the spread max E − min E (Eh)."""
    from harness.testing.strategies import (core_guess, occupation_classes, rotated_density,
                                    rotation_pairs, scaled_angles)

    problem = _problem(case, convergence)
    _, c = core_guess(problem)
    sizes = [len(rotation_pairs(l)[0]) for l in occupation_classes(problem, c.shape[1])]
    rng = np.random.default_rng(seed)
    energies = []
    for _ in range(count):
        angles = scaled_angles([rng.uniform(-1.0, 1.0, m) for m in sizes], max_angle)
        guess = problem.replace(initial_density=rotated_density(problem, c, angles))
        energies.append(run(plugin, guess).energy)
    found = states(energies, same)
    finite = [e for e in energies if not math.isnan(e)]
    spread = (max(finite) - min(finite)) if len(finite) == len(energies) else math.nan
    ok = len(found) == 1 and _fail_if_nan(spread, same)
    reached = ", ".join(f"{e:.10f} ({n}×)" for e, n in found)
    if len(finite) < len(energies):
        reached += f", {len(energies) - len(finite)} without an energy"
    rel = "≤" if ok else ">"
    return PropertyResult("guess-independence", ok, spread, same,
                          f"guess-independence: max E − min E = {spread:.1e} {rel} {same:.1e} "
                          f"({case.name}, {count} guesses rotated ≤ {max_angle:g} rad), "
                          f"{len(found)} state{'s' if len(found) != 1 else ''} reached: "
                          f"E = {reached} Eh", tuple(energies))
