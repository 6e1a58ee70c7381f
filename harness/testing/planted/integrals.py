"""Planted bugs in reported integrals and convergence histories, and correct variants.

Each function has the plug-in signature ``name(problem) -> dict`` (bohr in, Eh out). They
run the bundled example code (:class:`harness.testing.example_scf.LabSCF`, with a recorder that
keeps the per-iteration energy and convergence measure as ``history``) and report, besides
its usual keys, the integrals it used — ``kinetic``, ``nuclear_attraction`` and
``two_electron`` (chemists' (ij|kl)) — then plant one bug, in the reported integrals or in
the loop. The first docstring line says what is wrong and which checks catch it.

Load one with the plug-in spec ``harness.testing.planted.integrals:<name>``.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from harness.testing.example_scf import LabSCF

#: The oscillating code's density "damping" weight: P_in ← (1 − w) P_new + w P_in with
#: w = −1, i.e. the sign of a ½ damping weight flipped and its size doubled.
FLIPPED_DAMPING = -1.0
#: Iterations the oscillating code runs before giving up.
OSCILLATING_ITERATIONS = 30
#: Fock damping of the stalling code: F_in ← (1 − w) F(P) + w F_in; at w = 0.97 the
#: measure shrinks by only ~3 % per iteration.
HEAVY_DAMPING = 0.97
#: Iterations the stalling code runs before giving up.
STALLING_ITERATIONS = 40
#: Size (Eh) of the bra–ket asymmetric error added to the ERIs: ε (S⊗T − T⊗S).
ASYMMETRY = 1e-4


class _Recording(LabSCF):
    """LabSCF that records (E[P], measure) at every convergence test as its history."""

    def __init__(self, problem, *args, **kwargs):
        super().__init__(problem, *args, **kwargs)
        self.records: list[dict] = []

    def stationarity(self, f, d, c, occ):
        measure = super().stationarity(f, d, c, occ)
        self.records.append({"energy": self.energy(d, f), "error": float(measure)})
        return measure

    def report(self, e, c, occ, d, f, converged, iterations):
        result = super().report(e, c, occ, d, f, converged, iterations)
        result.update(kinetic=self.ints.t, nuclear_attraction=self.ints.v,
                      two_electron=self.ints.eri, history=list(self.records))
        return result


def _run(cls, problem) -> dict:
    return cls(problem).iterate()


# ---------------------------------------------------------------------------------------
# correct variant
# ---------------------------------------------------------------------------------------

def all_integrals_reported(problem) -> dict:
    """Correct: reports S, T, V, H, the ERIs and its iteration record; every check must pass."""
    return _run(_Recording, problem)


# ---------------------------------------------------------------------------------------
# one-electron integrals
# ---------------------------------------------------------------------------------------

class _KineticWithoutHalf(_Recording):
    def __init__(self, problem, *args, **kwargs):
        super().__init__(problem, *args, **kwargs)
        self.ints = dataclasses.replace(self.ints, t=2.0 * self.ints.t)
        self.h = self.core_hamiltonian()


def kinetic_missing_half(problem) -> dict:
    """T = ⟨χ|−∇²|χ⟩ without the ½, used in the SCF and reported: kinetic, core-hamiltonian.

    The SCF converges with the wrong H, so reference-energy fails too; self- and
    energy-consistency are judged with the code's own H (its energy belongs to it) and
    pass: the kinetic check names the culprit, once.
    """
    return _run(_KineticWithoutHalf, problem)


def nuclear_attraction_wrong_sign(problem) -> dict:
    """Reports V = +⟨χ|Σ Z/r|χ⟩, without its minus sign (its H is right): nuclear-attraction."""
    result = _run(_Recording, problem)
    result["nuclear_attraction"] = -result["nuclear_attraction"]
    return result


def overlap_not_positive_definite(problem) -> dict:
    """Reports S with every off-diagonal element doubled: overlap, overlap-definite, basis.

    The bug of symmetrising a full matrix as S + Sᵀ and halving only the diagonal; the
    doubled couplings make S indefinite, and no AO reordering explains it (basis). The SCF
    itself used the right S.
    """
    result = _run(_Recording, problem)
    s = np.asarray(result["overlap"])
    result["overlap"] = 2.0 * s - np.diag(np.diag(s))
    return result


# ---------------------------------------------------------------------------------------
# two-electron integrals
# ---------------------------------------------------------------------------------------

def eri_bra_ket_asymmetric(problem) -> dict:
    """ERIs with (ij|kl) ≠ (kl|ij) by ~1e-4 Eh: two-electron, two-electron-symmetry.

    g + ε (S⊗T − T⊗S) keeps the symmetries within bra and ket but breaks bra–ket exchange
    (as a code that screens bra and ket differently would).
    """
    result = _run(_Recording, problem)
    s, t = np.asarray(result["overlap"]), np.asarray(result["kinetic"])
    result["two_electron"] = result["two_electron"] + ASYMMETRY * (
        np.einsum("ij,kl->ijkl", s, t) - np.einsum("ij,kl->ijkl", t, s))
    return result


def _permutation_count(n: int) -> np.ndarray:
    """For each (i, j, k, l): how many distinct index quadruples its 8 permutations give."""
    i, j, k, l = np.indices((n,) * 4)
    pair_ij, pair_kl = (i != j) + 1, (k != l) + 1
    same_pairs = (np.minimum(i, j) == np.minimum(k, l)) & (np.maximum(i, j) == np.maximum(k, l))
    return pair_ij * pair_kl * np.where(same_pairs, 1, 2)


def eri_degeneracy_left_in(problem) -> dict:
    """ERIs still weighted by their permutational degeneracy (×1, 2, 4 or 8): Schwarz fails.

    The factor a code uses when it loops over unique quartets only; left in the reported
    tensor, it keeps the 8-fold symmetry but breaks |(ij|kl)|² ≤ (ij|ij)(kl|kl).
    """
    result = _run(_Recording, problem)
    g = np.asarray(result["two_electron"])
    result["two_electron"] = g * _permutation_count(g.shape[0])
    return result


def eri_coulomb_sign_flipped(problem) -> dict:
    """(ii|jj) for i ≠ j reported with the wrong sign: two-electron, two-electron-definite.

    Keeps every permutational symmetry and (since |(ij|kl)| is unchanged) the Schwarz
    inequality, but the supermatrix is no longer positive semidefinite.
    """
    result = _run(_Recording, problem)
    g = np.array(result["two_electron"])
    n = g.shape[0]
    i, j = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
    off = i != j
    g[i[off], i[off], j[off], j[off]] *= -1.0
    result["two_electron"] = g
    return result


def eri_physicists_notation(problem) -> dict:
    """ERIs in physicists' order ⟨ij|kl⟩ = (ik|jl) instead of chemists' (ij|kl): two-electron."""
    result = _run(_Recording, problem)
    result["two_electron"] = np.ascontiguousarray(result["two_electron"].transpose(0, 2, 1, 3))
    return result


# ---------------------------------------------------------------------------------------
# convergence histories
# ---------------------------------------------------------------------------------------

class _TwoIterations(_Recording):
    max_iterations = 2


def two_iterations_with_history(problem) -> dict:
    """Stops after 2 iterations, claims converged=True, and reports its history: history.

    The history check names it a false convergence: the harness's stationarity is far
    above tolerance while the code says it converged.
    """
    result = _run(_TwoIterations, problem)
    result["converged"] = True
    return result


class _FlippedDamping(_Recording):
    def iterate(self):
        e, c = self.initial_orbitals()
        occ = self.occupy(e, c)
        d_in = self.density(c, occ)
        for iterations in range(1, OSCILLATING_ITERATIONS + 1):
            e, c = self.orbitals(self.effective_fock(self.fock(d_in), c, occ))
            occ = self.occupy(e, c)
            d = self.density(c, occ)
            f = self.fock(d)
            self.stationarity(f, d, c, occ)  # recorded
            d_in = (1.0 - FLIPPED_DAMPING) * d + FLIPPED_DAMPING * d_in
        return self.report(e, c, occ, d, f, False, OSCILLATING_ITERATIONS)


def damping_sign_flipped(problem) -> dict:
    """Density damping with the weight's sign flipped (P ← 2 P_new − P_in): history (oscillation).

    The loop bounces between two states until its iteration cap and reports
    converged=False and its last (non-stationary) state.
    """
    return _run(_FlippedDamping, problem)


class _HeavyDamping(_Recording):
    max_iterations = STALLING_ITERATIONS

    def iterate(self):
        e, c = self.initial_orbitals()
        occ = self.occupy(e, c)
        f_in = None
        converged = False
        for iterations in range(1, self.max_iterations + 1):
            d = self.density(c, occ)
            f = self.fock(d)
            if self.stationarity(f, d, c, occ) <= self.problem.convergence:
                converged = True
                break
            f_eff = self.effective_fock(f, c, occ)
            f_in = f_eff if f_in is None else (1.0 - HEAVY_DAMPING) * f_eff + HEAVY_DAMPING * f_in
            e, c = self.orbitals(f_in)
            occ = self.occupy(e, c)
        else:  # gave up: report the state of the last orbitals, consistently
            d = self.density(c, occ)
            f = self.fock(d)
        return self.report(e, c, occ, d, f, converged, iterations)


def stalled_by_heavy_damping(problem) -> dict:
    """Fock damping 0.97 without DIIS: the error barely shrinks; history (stalled error).

    Gives up after STALLING_ITERATIONS and says converged=False.
    """
    return _run(_HeavyDamping, problem)


# --------------------------------------------------------------------------- catalogue

def _catalogue():
    from harness.testing.planted import entries

    rhf, uhf = "water-sto-3g-rhf", "oh-sto-3g-uhf"
    not_converged = {"stationarity", "self-consistency", "reference-energy"}
    caught = [
        (kinetic_missing_half, (rhf,), {"kinetic", "core-hamiltonian", "reference-energy"}),
        (nuclear_attraction_wrong_sign, (rhf, uhf), {"nuclear-attraction"}),
        (overlap_not_positive_definite, (rhf,), {"basis", "overlap", "overlap-definite"}),
        (eri_bra_ket_asymmetric, (rhf,), {"two-electron", "two-electron-symmetry"}),
        (eri_degeneracy_left_in, (rhf,), {"two-electron", "two-electron-schwarz",
                                          "two-electron-definite"}),
        (eri_coulomb_sign_flipped, (rhf,), {"two-electron", "two-electron-definite"}),
        (eri_physicists_notation, (rhf, uhf), {"two-electron", "two-electron-symmetry"}),
        (two_iterations_with_history, (rhf,), {"history", "roothaan-hall"} | not_converged),
        (damping_sign_flipped, (rhf,), {"history", "converged-flag", "roothaan-hall"}
         | not_converged),
        (stalled_by_heavy_damping, (rhf,), {"history", "converged-flag", "roothaan-hall"}
         | not_converged),
    ]
    correct = [(all_integrals_reported, (rhf, uhf))]
    return entries(caught, correct)


CATALOGUE = _catalogue()
