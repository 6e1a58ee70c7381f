"""Planted accelerators: convergence accelerators with a planted flaw, and what the
bench must report for each. Not part of the self-test catalogue (``CATALOGUE``): the
entries are in :data:`ACCELERATORS` and are run by ``tests/bench``.

Each class follows the protocol of :mod:`harness.bench.accelerators` and is built on the
example commutator DIIS (:class:`harness.bench.example_accelerator.CommutatorDIIS`); the first
docstring line says what is wrong and how the bench shows it. Fock matrices in Eh.
Bench one with ``scf-harness bench harness.testing.planted.accelerators:<Class>``.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.bench.example_accelerator import CommutatorDIIS

#: Fraction of the core Hamiltonian the kicking accelerator adds to every Fock matrix.
KICK = 1e-4
#: Over-relaxation of the overshooting accelerator on open shells:
#: F_next = F_diis + OVERSHOOT (F_diis − F_previous).
OVERSHOOT = 1.5


class KickedDIIS(CommutatorDIIS):
    """Adds KICK × H (the core Hamiltonian) to every Fock matrix it returns, a leftover
    term: a converged state is not kept (fixed-point property fails), no run converges.

    The orbitals settle where F + KICK·H is stationary, a gradient of order
    KICK·|[H, P]| away from the SCF solution. The term transforms like F, so the runs
    stay deterministic and basis-independent: only the fixed point is wrong.
    """

    name = "kicked-diis"

    def step(self, iterate):
        return super().step(iterate) + KICK * np.asarray(iterate.core_hamiltonian)[None]


class OvershootingDIIS(CommutatorDIIS):
    """On open shells (two components), over-relaxes the DIIS Fock by OVERSHOOT × the last
    change: the run oscillates and never converges; closed shells are untouched.

    A plausible bug: a "momentum" term meant to speed up slow open-shell cases, applied
    without a safeguard.
    """

    name = "overshooting-diis"

    def reset(self, problem):
        super().reset(problem)
        self.previous = None

    def step(self, iterate):
        f = super().step(iterate)
        if f.shape[0] == 2:
            if self.previous is not None:
                f = f + OVERSHOOT * (f - self.previous)
            self.previous = f
        return f


class MaximumOverlapDIIS(CommutatorDIIS):
    """Occupies by maximum overlap with a HOMO → LUMO promoted start: converges, to an
    excited state (the bench reports "other state ΔE = …").

    Returns densities (``returns = "density"``): on the first call it diagonalises the
    Fock and occupies the LUMO instead of the HOMO (per component; RHF: the pair); from
    then on it diagonalises the DIIS Fock and occupies the orbitals with the largest
    overlap with the previously occupied space (the maximum-overlap rule), so it follows
    that excited determinant to self-consistency. Written for RHF and UHF.
    """

    name = "maximum-overlap-diis"
    returns = "density"

    def reset(self, problem):
        super().reset(problem)
        self.occupied = None
        self.counts = None
        if problem is not None:
            if problem.method == "uhf":
                self.counts = [(problem.n_alpha, 1.0), (problem.n_beta, 1.0)]
            elif problem.method == "rhf":
                self.counts = [(problem.n_alpha, 2.0)]
            else:
                self.counts = [(problem.n_alpha, 1.0)]

    def _orbitals(self, f, s):
        w, u = np.linalg.eigh(s)
        x = u[:, w > 1e-8] / np.sqrt(w[w > 1e-8])
        e, cp = np.linalg.eigh(x.T @ f @ x)
        return x @ cp

    def step(self, iterate):
        s = np.asarray(iterate.overlap)
        f = super().step(iterate)
        out = []
        if self.occupied is None:
            self.occupied = []
            for fk, (n, _) in zip(f, self.counts):
                c = self._orbitals(fk, s)
                pick = list(range(n - 1)) + [n]  # HOMO → LUMO
                self.occupied.append(c[:, pick])
        for k, fk in enumerate(f):
            n, value = self.counts[k]
            c = self._orbitals(fk, s)
            overlap = np.sum((self.occupied[k].T @ s @ c) ** 2, axis=0)
            pick = np.sort(np.argsort(-overlap, kind="stable")[:n])
            self.occupied[k] = c[:, pick]
            out.append(value * self.occupied[k] @ self.occupied[k].T)
        return np.array(out)


@dataclasses.dataclass(frozen=True)
class PlantedAccelerator:
    """One planted accelerator (or correct variant) and what the bench must report.

    case: the catalogue case it is benched on. converges: every run converges (True),
    none does (False). ground_state: every converged run is in the ground state.
    failing_properties: properties that must fail (others may fail too for a planted
    flaw; for a correct variant, the empty set means every property must hold). worse:
    the verdict must say it is worse than the best baseline (fewer ground-state or
    converged runs).
    """

    name: str
    factory: type
    case: str
    converges: bool
    ground_state: bool
    failing_properties: frozenset
    worse: bool
    note: str

    @property
    def spec(self) -> str:
        return f"{self.factory.__module__}:{self.factory.__name__}"


ACCELERATORS = (
    PlantedAccelerator("example-diis", CommutatorDIIS, "water-sto-3g-rhf", True, True,
                       frozenset(), False, "the example accelerator: passes"),
    PlantedAccelerator("kicked-diis", KickedDIIS, "water-sto-3g-rhf", False, False,
                       frozenset({"fixed-point"}), True,
                       "perturbs a converged state: never converges, fixed point fails"),
    PlantedAccelerator("overshooting-diis", OvershootingDIIS, "oh-sto-3g-uhf", False, False,
                       frozenset({"fixed-point"}), True, "diverges on an open-shell case"),
    PlantedAccelerator("overshooting-diis-closed", OvershootingDIIS, "water-sto-3g-rhf",
                       True, True, frozenset(), False,
                       "the same on a closed shell, where it is plain DIIS: passes"),
    PlantedAccelerator("maximum-overlap-diis", MaximumOverlapDIIS, "water-sto-3g-rhf", True,
                       False, frozenset({"fixed-point"}), True,
                       "converges to an excited state; handed the ground state, leaves it "
                       "(on water it also takes a different number of builds in another "
                       "basis: observed, not analysed)"),
)
