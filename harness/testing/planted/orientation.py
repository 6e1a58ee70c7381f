"""Planted bugs that show only for some orientations or atom orders.

Both plug-ins are the example SCF code (:class:`harness.testing.example_scf.LabSCF`) with one
planted mistake that is invisible on many catalogue cases as they are stored, because
those cases happen to sit in a convenient frame or list their heaviest atom first. The
metamorphic properties (``harness.testing.metamorphic``) catch them by moving or reordering the
molecule; ``tests/properties/test_metamorphic.py`` shows that hypothesis shrinks each
failure to a minimal transformed molecule. Atomic units: bohr in, Eh out.

Load one with the plug-in spec ``harness.testing.planted.orientation:<name>``.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.testing.example_scf import LabSCF, compute_integrals


def abs_nuclear_repulsion(numbers, coordinates) -> float:
    """The planted formula: Σ_{A<B} Z_A Z_B / |abs(R_A) − abs(R_B)| (Eh, bohr).

    Equal to the true E_nuc exactly when, on every axis, no two nuclei lie on opposite
    sides of the origin; nuclei that are mirror images collapse (the sum is then inf).
    """
    z = np.asarray(numbers, dtype=float)
    r = np.abs(np.asarray(coordinates, dtype=float))
    total = 0.0
    with np.errstate(divide="ignore"):
        for a in range(len(z)):
            for b in range(a):
                total += z[a] * z[b] / np.linalg.norm(r[a] - r[b])
    return float(total)


class _AbsCoordinates(LabSCF):
    def __init__(self, problem, integrals=None):
        ints = integrals if integrals is not None else compute_integrals(problem)
        ints = dataclasses.replace(
            ints, e_nuc=abs_nuclear_repulsion(problem.numbers, problem.coordinates))
        super().__init__(problem, ints)


def nuclear_repulsion_from_abs_coordinates(problem) -> dict:
    """E_nuc from |x|, |y|, |z| of each nucleus: wrong once a coordinate turns negative.

    Right for h2-sto-3g-rhf as stored (both nuclei on the +z axis), wrong after most
    translations; water-sto-3g-rhf as stored has its hydrogens at ±x, which collapse, so
    the energy is infinite and well-formed fails. Caught by rigid-motion invariance.
    """
    return _AbsCoordinates(problem).iterate()


def assumes_heaviest_atom_first(problem) -> dict:
    """Sorts the atomic numbers heaviest first but keeps the coordinates in input order.

    Harmless when the input already lists atoms by non-increasing Z (every catalogue
    case with more than two atoms does, and swapping the two atoms of a diatomic only
    mirrors it), so the plain checks pass on the whole catalogue; with another atom
    order the nuclei are put on the wrong positions. Caught by atom-order invariance
    (from three atoms with two elements on) and by size consistency with the lighter
    fragment first.
    """
    order = np.argsort(-np.asarray(problem.numbers), kind="stable")
    wrong = problem.replace(numbers=np.asarray(problem.numbers)[order])
    result = LabSCF(wrong).iterate()
    return result


def _catalogue():
    from harness.testing.planted import Planted, note_of

    function = nuclear_repulsion_from_abs_coordinates
    note = note_of(function)
    return (Planted(function.__name__, function, "water-sto-3g-rhf",
                    frozenset({"well-formed"}), note),)


#: Entries whose bug the plain checks catch on a stored catalogue case (the abs bug on
#: water, whose hydrogens sit at ±x). ``assumes_heaviest_atom_first`` has no entry: no
#: check fails on any stored case; only the metamorphic properties catch it (see
#: :data:`PROPERTIES`).
CATALOGUE = _catalogue()

#: plug-in name → (the property that catches it, the smallest closed-shell sto-3g case on
#: which one transformation shows it, the kinds of that transformation; see
#: harness.testing.strategies.transform). tests/properties/test_metamorphic.py checks that
#: hypothesis shrinks to exactly these.
PROPERTIES = {
    "nuclear_repulsion_from_abs_coordinates": ("rigid-motion", "h2-sto-3g-rhf", "rot|shift"),
    "assumes_heaviest_atom_first": ("atom-order", "water-sto-3g-rhf", "perm"),
}
