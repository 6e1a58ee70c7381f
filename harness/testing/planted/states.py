"""Plug-ins that find the wrong stationary state, and codes that find the right one.

Every core invariant holds at any stationary point, so each planted code here passes
the core checks and is caught by "stability", "spin-squared" or "reference-energy" (and
named as a known state of the reference). Each function has the plug-in signature
``name(problem) -> dict`` (bohr in, Eh out) and is built on
:class:`harness.testing.example_scf.LabSCF` by overriding its guess or its occupation rule.

Load one with the plug-in spec ``harness.testing.planted.states:<name>``.
"""

from __future__ import annotations

import numpy as np

from harness.testing.example_scf import BROKEN_SYMMETRY_ANGLE, WOLFSBERG_HELMHOLZ, LabSCF
from harness.testing.planted.core import _MaximumOverlap

#: HOMO/LUMO pairs rotated by ±BROKEN_SYMMETRY_ANGLE in the several-pairs guess: N₂
#: dissociates into two quartet atoms, three electron pairs to uncouple.
BROKEN_PAIRS = 3


def _run(cls, problem) -> dict:
    return cls(problem).iterate()


def _gwh_orbitals(scf: LabSCF):
    """Textbook generalised Wolfsberg–Helmholz orbitals (ε, C), one set, from the AO
    diagonal: G_μμ = H_μμ, G_μν = ½ K (H_μμ + H_νν) S_μν. (The example code averages the
    diagonal over each shell instead, which does not change when the molecule turns.)"""
    hd = np.diag(scf.h)
    g = 0.5 * WOLFSBERG_HELMHOLZ * (hd[:, None] + hd[None, :]) * scf.s
    np.fill_diagonal(g, hd)
    return scf.eigensolve(g)


# ---------------------------------------------------------------------------------------
# planted: wrong state
# ---------------------------------------------------------------------------------------

class _SpinRestrictedStart(LabSCF):
    def guess(self):
        e, c = _gwh_orbitals(self)
        if self.method != "uhf":
            return e, c
        return np.stack([e, e]), np.stack([c, c])


def never_breaks_spin_symmetry(problem) -> dict:
    """UHF started from identical alpha and beta orbitals: stays on the RHF-like saddle.

    Pα = Pβ is preserved by every Roothaan step, so a singlet never leaves the
    spin-restricted solution; stability (and reference-energy, spin-squared) catch it.
    """
    return _run(_SpinRestrictedStart, problem)


class _CoreGuessMaximumOverlap(_MaximumOverlap):
    """Bare core-Hamiltonian guess, aufbau once, then occupations kept by maximum overlap."""

    def guess(self):
        e, c = self.eigensolve(self.h)
        if self.method != "uhf":
            return e, c
        return np.stack([e, e]), np.stack([c, c])

    def occupy(self, e, c):
        if self.method == "uhf":
            return np.stack([self._occupy_spin(e[0], c[0], 0, swap=False),
                             self._occupy_spin(e[1], c[1], 1, swap=False)])
        return self._occupy_spin(e, c, 0, swap=False)


def core_guess_maximum_overlap(problem) -> dict:
    """Core-Hamiltonian guess locked in by maximum-overlap following: converges to an excited state.

    Stationary, so every core invariant passes (ROHF has no aufbau check); stability and
    reference-energy catch it, and it is the reference's known state found from "1e".
    """
    return _run(_CoreGuessMaximumOverlap, problem)


def rohf_answered_with_uhf(problem) -> dict:
    """An ROHF request answered by a UHF calculation: spin-squared and reference-energy.

    Returns the UHF energy, its alpha orbitals as the one orbital set (occupations 2 on
    the n_β lowest, 1 on the next n_α − n_β) and the UHF spin densities and Fock matrices.
    ⟨S²⟩ is not S(S+1), the energy is below the ROHF reference, and the reported densities
    are not those of the orbitals.
    """
    result = LabSCF(problem.replace(method="uhf")).iterate()
    c, e = result["coefficients"][0], result["orbital_energies"][0]
    occ = np.zeros(c.shape[1])
    order = np.argsort(e, kind="stable")
    occ[order[:problem.n_alpha]] = 1.0
    occ[order[:problem.n_beta]] = 2.0
    result.update(coefficients=c, occupations=occ, orbital_energies=e)
    return result


def lab_code_as_shipped(problem) -> dict:
    """The bundled example code unchanged (:func:`harness.testing.example_scf.solve`).

    Its guess uncouples one HOMO/LUMO pair: enough for stretched H₂, not for stretched N₂,
    where it lands on a saddle.
    """
    return _run(LabSCF, problem)


class _AODiagonalGuess(LabSCF):
    def guess_orbitals(self):
        return _gwh_orbitals(self)


def ao_diagonal_guess(problem) -> dict:
    """The example code with the textbook Wolfsberg–Helmholz guess (AO diagonal of H).

    On the ethynyl radical as stored it lands on a saddle (UHF) or on a higher minimum
    (ROHF); turned, on other states (the guess follows the orientation).
    """
    return _run(_AODiagonalGuess, problem)


# ---------------------------------------------------------------------------------------
# correct: the right state
# ---------------------------------------------------------------------------------------

class _SeveralPairs(LabSCF):
    def guess(self):
        e, c = _gwh_orbitals(self)
        if self.method != "uhf":
            return e, c
        ca, cb = c.copy(), c.copy()
        if self.n_alpha == self.n_beta:
            n = self.n_alpha
            for k in range(min(BROKEN_PAIRS, n, c.shape[1] - n)):
                h, lu = n - 1 - k, n + k
                for cs, angle in ((ca, BROKEN_SYMMETRY_ANGLE), (cb, -BROKEN_SYMMETRY_ANGLE)):
                    a, b = cs[:, h].copy(), cs[:, lu].copy()
                    cs[:, h] = np.cos(angle) * a + np.sin(angle) * b
                    cs[:, lu] = -np.sin(angle) * a + np.cos(angle) * b
        return np.stack([e, e]), np.stack([ca, cb])


def broken_symmetry_several_pairs(problem) -> dict:
    """Correct: UHF singlets start with BROKEN_PAIRS HOMO/LUMO pairs rotated by ±45°.

    Reaches the lowest broken-symmetry minimum of stretched N₂ and H₂; every check passes.
    """
    return _run(_SeveralPairs, problem)


class _CoreGuess(LabSCF):
    def guess(self):
        e, c = self.eigensolve(self.h)
        if self.method != "uhf":
            return e, c
        return np.stack([e, e]), np.stack([c, c])


def core_guess(problem) -> dict:
    """Correct for the ethynyl radical: the bare core-Hamiltonian guess, lowest orbitals filled, DIIS.

    Here it reaches the lowest ROHF solution (the lab code's guess finds the higher one);
    every check passes.
    """
    return _run(_CoreGuess, problem)


# --------------------------------------------------------------------------- catalogue

def _catalogue():
    from harness.testing.planted import Planted, note_of

    h2, n2 = "h2-stretched-6-31g-uhf", "n2-stretched-6-31g-uhf"
    c2h_u, c2h_r, nh2_r = "c2h-6-31g-uhf", "c2h-6-31g-rohf", "nh2-sto-3g-rohf"
    wrong_state = {"stability", "reference-energy"}
    #  (function, case, failing checks, hint substring on reference-energy)
    entries = [
        (never_breaks_spin_symmetry, h2, wrong_state | {"spin-squared"}, "known state 1"),
        (never_breaks_spin_symmetry, n2, wrong_state | {"spin-squared"},
         "a saddle point, 0.4449 Eh above"),
        (core_guess_maximum_overlap, nh2_r, wrong_state, "known state 1"),
        (rohf_answered_with_uhf, nh2_r, {"density-consistency", "stationarity",
                                         "self-consistency", "reference-energy",
                                         "spin-squared"},
         "below the reference"),
        (lab_code_as_shipped, n2, wrong_state | {"spin-squared"},
         "a saddle point, 0.1751 Eh above"),
        (ao_diagonal_guess, c2h_u, wrong_state | {"spin-squared"}, "known state 1"),
        (ao_diagonal_guess, c2h_r, {"reference-energy"}, "known state 1"),
        (lab_code_as_shipped, h2, set(), None),
        (lab_code_as_shipped, c2h_u, set(), None),
        (lab_code_as_shipped, c2h_r, set(), None),
        (broken_symmetry_several_pairs, h2, set(), None),
        (broken_symmetry_several_pairs, n2, set(), None),
        (core_guess, c2h_r, set(), None),
    ]
    out = []
    for function, case, fails, hint in entries:
        note = note_of(function)
        out.append(Planted(function.__name__, function, case, frozenset(fails or ()), note,
                           hint=hint, hint_check="reference-energy" if hint else None,
                           no_hint_on=frozenset() if hint else frozenset({"reference-energy"})))
    return tuple(out)


CATALOGUE = _catalogue()
