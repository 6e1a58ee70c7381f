"""Shared fixtures for the unit tests: tiny problems and pyscf's converged solutions.

pyscf supplies integrals and the converged solutions used as *input* to our checks;
the checks themselves are the harness's own numpy. Coordinates in bohr, energies in Eh.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from harness.backend.integrals import integrals_for
from harness.contract.problem import Problem

#: Water geometry (bohr) of the RHF/STO-3G worked example in
#: tests/published/SOURCES.md, item 1 (Crawford group, Programming Projects #3).
WATER_NUMBERS = (8, 1, 1)
WATER_COORDS = ((0.0, -0.143225816552, 0.0),
                (1.638036840407, 1.136548822547, 0.0),
                (-1.638036840407, 1.136548822547, 0.0))
#: OH radical, O–H 1.83 bohr (our own choice of a bond length near equilibrium).
OH_NUMBERS = (8, 1)
OH_COORDS = ((0.0, 0.0, 0.0), (0.0, 0.0, 1.83))
#: Triplet methylene, our own bent geometry (bohr): two open-shell orbitals, so
#: rotations inside the open space are not trivial.
CH2_NUMBERS = (6, 1, 1)
CH2_COORDS = ((0.0, 0.0, 0.0), (0.0, 1.62, 1.12), (0.0, -1.90, 0.70))

#: conv_tol for the pyscf runs used as input: far below every tolerance tested.
PYSCF_CONV_TOL = 1e-12


@dataclasses.dataclass(frozen=True)
class Converged:
    """A problem, its AO integrals and pyscf's converged mean-field object."""

    problem: Problem
    ints: object
    mf: object

    def solution(self) -> dict:
        """The full plug-in return value built from pyscf's arrays (ROHF fock = (Fα, Fβ))."""
        mf = self.mf
        fock = mf.get_fock()
        if self.problem.method == "rohf":
            fock = np.stack([fock.focka, fock.fockb])
        return {
            "energy": float(mf.e_tot),
            "coefficients": np.asarray(mf.mo_coeff, dtype=float),
            "occupations": np.asarray(mf.mo_occ, dtype=float),
            "orbital_energies": np.asarray(mf.mo_energy, dtype=float),
            "density": np.asarray(mf.make_rdm1(), dtype=float),
            "fock": np.asarray(fock, dtype=float),
            "overlap": np.asarray(mf.get_ovlp(), dtype=float),
            "core_hamiltonian": np.asarray(mf.get_hcore(), dtype=float),
            "converged": bool(mf.converged),
            "iterations": 7,  # a fixed count, so that messages can be asserted verbatim
        }


def _converge(problem: Problem) -> Converged:
    from pyscf import scf

    mol = problem.to_pyscf()
    kind = {"rhf": scf.RHF, "uhf": scf.UHF, "rohf": scf.ROHF}[problem.method]
    mf = kind(mol)
    mf.conv_tol = PYSCF_CONV_TOL
    mf.conv_tol_grad = 1e-9
    mf.kernel()
    assert mf.converged
    return Converged(problem=problem, ints=integrals_for(problem), mf=mf)


@pytest.fixture(scope="session")
def water_rhf() -> Converged:
    return _converge(Problem.create(name="water-sto-3g-rhf", numbers=WATER_NUMBERS,
                                    coordinates=WATER_COORDS, basis="sto-3g", method="rhf"))


@pytest.fixture(scope="session")
def oh_uhf() -> Converged:
    return _converge(Problem.create(name="oh-sto-3g-uhf", numbers=OH_NUMBERS,
                                    coordinates=OH_COORDS, multiplicity=2, basis="sto-3g",
                                    method="uhf"))


@pytest.fixture(scope="session")
def oh_rohf() -> Converged:
    return _converge(Problem.create(name="oh-sto-3g-rohf", numbers=OH_NUMBERS,
                                    coordinates=OH_COORDS, multiplicity=2, basis="sto-3g",
                                    method="rohf"))


@pytest.fixture(scope="session")
def ch2_rohf() -> Converged:
    return _converge(Problem.create(name="ch2-sto-3g-rohf", numbers=CH2_NUMBERS,
                                    coordinates=CH2_COORDS, multiplicity=3, basis="sto-3g",
                                    method="rohf"))
