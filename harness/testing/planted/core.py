"""Plug-ins with planted bugs, and correct variants, built on the example SCF code.

Each function here has the plug-in signature ``name(problem) -> dict`` (bohr in, Eh out)
and differs from :func:`harness.testing.example_scf.solve` in one planted way: a subclass of
:class:`harness.testing.example_scf.LabSCF` that overrides one method, or a post-processing of
the correct result. The first docstring line of each says what is wrong and which
harness check should catch it; the correct variants must pass every check.

Load one with the plug-in spec ``harness.testing.planted.core:<name>``.
"""

from __future__ import annotations

import numpy as np

from harness.testing.example_scf import LabSCF
from harness.contract.units import HARTREE_IN_EV

#: Density mixing weight of the damped code: P_in ← (1 − w) P_new + w P_in.
DENSITY_DAMPING = 0.5
#: The damped code stops when the energy changes by less than this (Eh) between iterations.
ENERGY_CHANGE_STOP = 1e-6
#: Fock damping of the slow codes (no DIIS): F_in ← (1 − w) F(P) + w F_in. With w = ½ the
#: measure shrinks by a factor of ~0.5–0.8 per iteration, so it stops just under its target.
FOCK_DAMPING = 0.5
#: Iteration cap of the slow codes (their convergence is linear, not DIIS-accelerated).
SLOW_MAX_ITERATIONS = 1000
#: The looser code stops at this multiple of problem.convergence.
LOOSER_FACTOR = 100.0
#: Orbital energies closer than this (Eh) count as one degenerate set.
DEGENERACY = 1e-5
#: Seed of the random MO phases and rotations (reproducible variants).
SEED = 20240611


def _run(cls, problem) -> dict:
    return cls(problem).iterate()


def _per_spin(result: dict, keys):
    """Views of ``result[key]`` with a leading spin axis (adds one for RHF/ROHF)."""
    out = []
    for key in keys:
        value = np.asarray(result[key])
        out.append(value if value.ndim == (3 if key == "coefficients" else 2) else value[None])
    return out


# ---------------------------------------------------------------------------------------
# planted bugs
# ---------------------------------------------------------------------------------------

class _DoubledExchange(LabSCF):
    def coulomb_exchange(self, d):
        j, k = super().coulomb_exchange(d)
        return j, 2.0 * k


def wrong_exchange_factor(problem) -> dict:
    """K scaled by 2 in Fock and energy: self-consistency, energy-consistency, reference-energy.

    Internally consistent (the code converges its own wrong Fock), so only the checks that
    rebuild F and E from the reported density with independent integrals catch it.
    """
    return _run(_DoubledExchange, problem)


class _NoNuclearRepulsion(LabSCF):
    def energy(self, d, f):
        return super().energy(d, f) - self.ints.e_nuc


def missing_nuclear_repulsion(problem) -> dict:
    """Energy without E_nuc: energy-consistency and reference-energy catch it."""
    return _run(_NoNuclearRepulsion, problem)


class _IgnoresOverlap(LabSCF):
    def eigensolve(self, f):
        return np.linalg.eigh(f)


def eigensolve_ignores_overlap(problem) -> dict:
    """Solves F C = C ε as if S = 1: orthonormality, electron-count, stationarity catch it.

    CᵀC = 1 instead of CᵀSC = 1; the loop never meets its own criterion either, so it
    reports converged=False after MAX_ITERATIONS.
    """
    return _run(_IgnoresOverlap, problem)


class _OneTooMany(LabSCF):
    def occupy(self, e, c):
        occ = super().occupy(e, c)
        spin = occ[0] if occ.ndim == 2 else occ  # UHF: an extra alpha electron
        empty = np.flatnonzero(spin == 0)
        spin[empty[np.argmin(np.asarray(e[0] if e.ndim == 2 else e)[empty])]] = 1.0
        return occ


def one_electron_too_many(problem) -> dict:
    """Occupations sum to N + 1 (a 1 on the LUMO; UHF: alpha LUMO): well-formed refuses it."""
    return _run(_OneTooMany, problem)


class _TwoIterations(LabSCF):
    max_iterations = 2


def two_iterations_claims_converged(problem) -> dict:
    """Stops after 2 iterations but says converged=True: stationarity, self-consistency catch it."""
    result = _run(_TwoIterations, problem)
    result["converged"] = True
    return result


class _MaximumOverlap(LabSCF):
    """Start from the HOMO→LUMO swapped determinant and keep it by maximum overlap."""

    _previous = None

    def occupy(self, e, c):
        if self.method == "uhf":
            occ = np.stack([self._occupy_spin(e[0], c[0], 0, swap=True),
                            self._occupy_spin(e[1], c[1], 1, swap=False)])
        else:
            occ = self._occupy_spin(e, c, 0, swap=True)
        return occ

    def _occupy_spin(self, e, c, spin, swap):
        if self._previous is None:
            self._previous = {}
        if spin not in self._previous:
            occ = self.aufbau_spin(e, spin)
            if swap:
                filled, empty = np.flatnonzero(occ > 0), np.flatnonzero(occ == 0)
                homo, lumo = filled[np.argmax(e[filled])], empty[np.argmin(e[empty])]
                occ[homo], occ[lumo] = occ[lumo], occ[homo]
        else:
            c_old, occ_old = self._previous[spin]
            overlap = (c_old.T @ self.s @ c) ** 2  # |⟨φ_i(old)|φ_j(new)⟩|²
            occ = np.zeros(c.shape[1])
            free = np.ones(c.shape[1], dtype=bool)
            for value in sorted(set(occ_old[occ_old > 0]), reverse=True):
                count = int(np.count_nonzero(occ_old == value))
                weight = np.where(free, overlap[occ_old == value].sum(axis=0), -1.0)
                chosen = np.argsort(-weight, kind="stable")[:count]
                occ[chosen], free[chosen] = value, False
        self._previous[spin] = (c, occ)
        return occ

    def aufbau_spin(self, e, spin):
        if self.method == "uhf":
            return LabSCF.occupy(self, np.stack([e, e]), None)[spin]
        return LabSCF.occupy(self, e, None)


def excited_determinant(problem) -> dict:
    """Converges the HOMO→LUMO swapped determinant: reference-energy and stability catch it.

    Kept by maximum overlap with the previous orbitals; the result is stationary (the
    invariant checks pass) but it is not the ground state.
    """
    return _run(_MaximumOverlap, problem)


class _DampedDensity(LabSCF):
    def iterate(self):
        e, c = self.initial_orbitals()
        occ = self.occupy(e, c)
        d_in = self.density(c, occ)
        e_old = None
        for iterations in range(1, self.max_iterations + 1):
            f = self.fock(d_in)
            energy = self.energy(d_in, f)
            e, c = self.orbitals(self.effective_fock(f, c, occ))
            occ = self.occupy(e, c)
            d_in = (1.0 - DENSITY_DAMPING) * self.density(c, occ) + DENSITY_DAMPING * d_in
            if e_old is not None and abs(energy - e_old) < ENERGY_CHANGE_STOP:
                break
            e_old = energy
        return self.report(e, c, occ, d_in, self.fock(d_in), True, iterations)


def damping_left_in_final_density(problem) -> dict:
    """Reports the 0.5/0.5 mixture of the last two densities: idempotency, density-consistency.

    Stops on an energy change < ENERGY_CHANGE_STOP instead of a gradient criterion.
    """
    return _run(_DampedDensity, problem)


def energies_in_ev(problem) -> dict:
    """Orbital energies reported in eV instead of Eh: roothaan-hall catches it."""
    result = _run(LabSCF, problem)
    result["orbital_energies"] = result["orbital_energies"] * HARTREE_IN_EV
    return result


class _SlowLoop(LabSCF):
    """Damped Roothaan iterations without DIIS, stopping as soon as the measure ≤ target.

    F_in ← (1 − w) F(P) + w F_in with w = FOCK_DAMPING; target = factor × convergence.
    Reported: C and ε of the last F_in, P from C, F = F(P), E = E[P] (consistent).
    """

    max_iterations = SLOW_MAX_ITERATIONS
    factor = 1.0

    def iterate(self):
        target = self.factor * self.problem.convergence
        e, c = self.initial_orbitals()
        occ = self.occupy(e, c)
        f_in = None
        converged = False
        for iterations in range(1, self.max_iterations + 1):
            d = self.density(c, occ)
            f = self.fock(d)
            if self.stationarity(f, d, c, occ) <= target:
                converged = True
                break
            f_eff = self.effective_fock(f, c, occ)
            f_in = f_eff if f_in is None else (1.0 - FOCK_DAMPING) * f_eff + FOCK_DAMPING * f_in
            e, c = self.orbitals(f_in)
            occ = self.occupy(e, c)
        else:
            d = self.density(c, occ)
            f = self.fock(d)
        return self.report(e, c, occ, d, f, converged, iterations)


class _HundredTimesLooser(_SlowLoop):
    factor = LOOSER_FACTOR


def stopped_hundred_times_looser(problem) -> dict:
    """Stops at 100 × problem.convergence (slow damped loop): stationarity, self-consistency.

    The measure ends just under 100 × convergence, above the harness's 10 × convergence.
    """
    return _run(_HundredTimesLooser, problem)


# ---------------------------------------------------------------------------------------
# correct variants
# ---------------------------------------------------------------------------------------

def random_mo_phases(problem) -> dict:
    """Correct: each MO multiplied by ±1 at random (seeded); every check must pass."""
    result = _run(LabSCF, problem)
    c = np.array(result["coefficients"])
    rng = np.random.default_rng(SEED)
    signs = rng.choice([-1.0, 1.0], size=c.shape[:-2] + (c.shape[-1],))
    signs.reshape(-1)[0] = -1.0  # at least one orbital flipped
    result["coefficients"] = c * signs[..., None, :]
    return result


def rotated_degenerate_orbitals(problem) -> dict:
    """Correct: random orthogonal rotations within degenerate occupied and virtual sets.

    Orbital energies, occupations, density and Fock are kept; every check must pass. A set
    is a run of orbitals of one occupation whose energies differ by < DEGENERACY.
    """
    result = _run(LabSCF, problem)
    c, e, occ = _per_spin(result, ("coefficients", "orbital_energies", "occupations"))
    c = c.copy()
    rng = np.random.default_rng(SEED)
    for cs, es, ns in zip(c, e, occ):
        for group in degenerate_sets(es, ns):
            q, r = np.linalg.qr(rng.standard_normal((len(group), len(group))))
            cs[:, group] = cs[:, group] @ (q * np.sign(np.diag(r)))
    result["coefficients"] = c if np.ndim(result["coefficients"]) == 3 else c[0]
    return result


def degenerate_sets(e: np.ndarray, occ: np.ndarray) -> list[np.ndarray]:
    """Index sets (size ≥ 2) of orbitals with equal occupation and energies within DEGENERACY."""
    sets = []
    for value in np.unique(occ):
        idx = np.flatnonzero(occ == value)
        idx = idx[np.argsort(e[idx], kind="stable")]
        start = 0
        for k in range(1, len(idx) + 1):
            if k == len(idx) or e[idx[k]] - e[idx[k - 1]] >= DEGENERACY:
                if k - start >= 2:
                    sets.append(idx[start:k])
                start = k
    return sets


def required_keys_only(problem) -> dict:
    """Correct: returns only energy, coefficients and occupations; every check must pass."""
    result = _run(LabSCF, problem)
    return {key: result[key] for key in ("energy", "coefficients", "occupations")}


def exactly_at_convergence(problem) -> dict:
    """Correct: stops as soon as the measure ≤ problem.convergence (slow damped loop).

    The measure ends just under the requested threshold, so it tests the factor the harness
    allows; every check must pass.
    """
    return _run(_SlowLoop, problem)


def stationarity_of(problem, result: dict) -> float:
    """The example code's convergence measure on a returned result (for the sanity tests)."""
    scf = LabSCF(problem)
    c, occ = np.asarray(result["coefficients"]), np.asarray(result["occupations"])
    d = scf.density(c, occ)
    return scf.stationarity(scf.fock(d), d, c, occ)



# --------------------------------------------------------------------------- catalogue

def _catalogue():
    from harness.testing.planted import entries

    rhf, uhf, rohf = "water-sto-3g-rhf", "oh-sto-3g-uhf", "nh2-sto-3g-rohf"
    stationary = {"stationarity", "self-consistency"}
    overlap_bug = {"converged-flag", "orthonormality", "idempotency", "electron-count",
                   "reference-energy"} | stationary
    caught = [
        (wrong_exchange_factor, (rhf, rohf),
         {"self-consistency", "energy-consistency", "reference-energy"}),
        (wrong_exchange_factor, (uhf,),
         {"self-consistency", "energy-consistency", "reference-energy", "spin-squared"}),
        (missing_nuclear_repulsion, (rhf, uhf, rohf), {"energy-consistency", "reference-energy"}),
        (eigensolve_ignores_overlap, (rhf,), overlap_bug | {"roothaan-hall"}),
        (eigensolve_ignores_overlap, (rohf,), overlap_bug | {"spin-squared"}),
        (one_electron_too_many, (rhf, uhf, rohf), {"well-formed"}),
        (two_iterations_claims_converged, (rhf,), {"roothaan-hall", "reference-energy"} | stationary),
        (two_iterations_claims_converged, (rohf,), {"reference-energy"} | stationary),
        (excited_determinant, (rhf,), {"reference-energy", "aufbau", "stability"}),
        (excited_determinant, (uhf,), {"reference-energy", "stability", "spin-squared"}),
        (excited_determinant, (rohf,), {"reference-energy", "stability"}),
        (damping_left_in_final_density, (rhf, uhf),
         {"idempotency", "density-consistency", "roothaan-hall"} | stationary),
        (energies_in_ev, (rhf, uhf), {"roothaan-hall"}),
        (stopped_hundred_times_looser, (rhf, uhf), {"roothaan-hall"} | stationary),
        (stopped_hundred_times_looser, (rohf,), stationary),
    ]
    correct = [
        (random_mo_phases, (rhf, uhf, rohf)),
        (rotated_degenerate_orbitals, ("methane-sto-3g-rhf", "n2-cc-pvdz-rhf")),
        (required_keys_only, (rhf, uhf, rohf)),
        (exactly_at_convergence, (rhf, uhf, rohf)),
    ]
    return entries(caught, correct)


CATALOGUE = _catalogue()
