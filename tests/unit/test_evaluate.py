"""Tests of ``harness.verdict.evaluate.evaluate``: every check on whole solutions.

Input: pyscf's own converged solutions of tiny molecules (water RHF, OH UHF and ROHF,
all STO-3G; for ROHF the reported Fock is (Fα, Fβ)). Each planted perturbation must fail
the check meant to catch it. Atomic units (bohr, Eh).
"""

from __future__ import annotations

import types

import numpy as np
import pytest
from scipy.optimize import brentq

from harness.checks.energy import energy_terms, fock_from_terms
from harness.verdict.evaluate import evaluate
from harness.contract.results import Status
from harness.contract.solution import extract
from harness.checks.tolerances import CHECK_NAMES, CONVERGENCE_FACTOR, Tolerances

#: Water RHF/STO-3G total energy, Crawford group Programming Projects #3 output
#: (tests/published/SOURCES.md, item 1). Used as the stored reference.
WATER_PUBLISHED_ENERGY = -74.942079928192

ROHF_CONVENTION = "ROHF orbital energies depend on a canonicalisation convention"


def reference(e_total: float, s_squared: float = 0.0):
    """A stand-in for a ``harness.catalogue.references.Reference``: evaluate reads its total
    energy ``energy`` (Eh), ``s_squared`` and ``known_states``."""
    return types.SimpleNamespace(energy=float(e_total), s_squared=float(s_squared),
                                 known_states=())


#: The core checks, which every complete solution exercises (the integral, history and
#: basis checks are not applicable when their keys are absent).
CORE = ("well-formed", "converged-flag", "overlap", "orthonormality", "idempotency",
        "electron-count", "density-consistency", "stationarity", "self-consistency",
        "roothaan-hall", "energy-consistency", "reference-energy", "aufbau")


def all_pass(r: dict, core=CORE) -> bool:
    """No check failed, and every one of ``core`` passed."""
    return not failures(r) and all(r[n].status is Status.PASSED for n in core)


def run(conv, sol: dict, ref=None, tolerances=None) -> dict:
    """evaluate() on a raw solution dict; results keyed by check name."""
    results = evaluate(conv.problem, extract(sol), ref, tolerances, conv.ints)
    assert tuple(r.name for r in results) == CHECK_NAMES
    return {r.name: r for r in results}


def failures(results: dict) -> set[str]:
    return {n for n, r in results.items() if r.status is Status.FAILED}


def statuses(results: dict) -> dict[str, Status]:
    return {n: r.status for n, r in results.items()}


def core_density(conv) -> np.ndarray:
    """Core-guess RHF density: the lowest n/2 eigenvectors of H C = S C ε, doubly occupied."""
    ints = conv.ints
    w, u = np.linalg.eigh(ints.s)
    x = (u / np.sqrt(w)) @ u.T
    _, cp = np.linalg.eigh(x @ ints.h @ x)
    c = x @ cp[:, : conv.problem.n_electrons // 2]
    return 2.0 * c @ c.T


def water_rotated(conv, theta: float) -> dict:
    """Water solution with HOMO (4) rotated into LUMO (5) by θ, everything else made
    consistent with the rotated orbitals: density, Fock F[P] and energy E[P]."""
    ints = conv.ints
    c = np.array(conv.mf.mo_coeff)
    ci, ca = c[:, 4].copy(), c[:, 5].copy()
    c[:, 4] = np.cos(theta) * ci + np.sin(theta) * ca
    c[:, 5] = -np.sin(theta) * ci + np.cos(theta) * ca
    p = 2.0 * c[:, :5] @ c[:, :5].T
    vj, vk = ints.jk(p[None])
    f = fock_from_terms(ints.h, vj, vk, 1)[0]
    e = energy_terms(p[None], ints.h, vj, vk, ints.e_nuc).total
    return {"energy": e, "coefficients": c, "occupations": conv.mf.mo_occ, "density": p,
            "fock": f}


def stationarity_of(conv, theta: float) -> float:
    return run(conv, water_rotated(conv, theta))["stationarity"].value


# --------------------------------------------------------------------------- passing solutions


class TestConvergedSolutionsPass:
    def test_water_rhf_passes_every_check(self, water_rhf):
        """pyscf's water RHF solution with every key passes all 13 core checks."""
        r = run(water_rhf, water_rhf.solution(), reference(WATER_PUBLISHED_ENERGY))
        assert all_pass(r), failures(r)
        assert all(r[n].passed is True for n in CORE)

    def test_oh_uhf_passes_every_check(self, oh_uhf):
        """pyscf's OH UHF solution passes all 13 core checks and spin-squared."""
        r = run(oh_uhf, oh_uhf.solution(),
                reference(oh_uhf.mf.e_tot, oh_uhf.mf.spin_square()[0]))
        assert all_pass(r, CORE + ("spin-squared",)), failures(r)

    def test_oh_rohf_passes_every_applicable_check(self, oh_rohf):
        """pyscf's OH ROHF solution with fock = (Fα, Fβ) passes; roothaan-hall and aufbau
        do not apply to ROHF."""
        r = run(oh_rohf, oh_rohf.solution(), reference(oh_rohf.mf.e_tot))
        na = {"roothaan-hall", "aufbau"}
        assert {n for n in CORE if r[n].status is Status.NOT_APPLICABLE} == na
        assert all(r[n].status is Status.PASSED for n in CORE if n not in na)
        assert failures(r) == set()
        assert r["aufbau"].message == (
            f"aufbau: not applicable (oh-sto-3g-rohf): {ROHF_CONVENTION}")

    def test_rohf_with_another_canonicalisation_passes(self, oh_rohf):
        """ROHF orbitals re-canonicalised in each space by Fα (not ½(Fα+Fβ)) still pass."""
        mf = oh_rohf.mf
        f = mf.get_fock()
        c = np.array(mf.mo_coeff)
        for mask in (mf.mo_occ == 2, mf.mo_occ == 1, mf.mo_occ == 0):
            _, u = np.linalg.eigh(c[:, mask].T @ f.focka @ c[:, mask])
            c[:, mask] = c[:, mask] @ u
        sol = oh_rohf.solution()
        sol["coefficients"] = c
        del sol["density"]  # rebuilt from the new orbitals
        r = run(oh_rohf, sol)
        assert failures(r) == set()
        assert r["stationarity"].value < 1e-8

    def test_messages_verbatim(self, water_rhf, oh_uhf):
        """The first line of a few passing checks, word for word."""
        r = run(water_rhf, water_rhf.solution(), reference(WATER_PUBLISHED_ENERGY))
        assert r["well-formed"].message == (
            "well-formed: keys, shapes and occupations valid (water-sto-3g-rhf)")
        assert r["converged-flag"].message == (
            "converged-flag: the code reports converged=True (water-sto-3g-rhf) "
            "after 7 iterations")
        assert r["overlap"].message == (
            "overlap: your S differs by up to 0.0e+00; at your density that moves E by "
            "0.0e+00 Eh ≤ 1e-07 (water-sto-3g-rhf)")
        u = run(oh_uhf, oh_uhf.solution())
        assert u["reference-energy"].message == (
            "reference-energy: not applicable (oh-sto-3g-uhf): no reference")

    def test_fewer_orbitals_than_basis_functions(self, water_rhf, oh_uhf):
        """Dropping the last virtual orbital (nmo = nao − 1) still passes everything."""
        sol = water_rhf.solution()
        for key in ("coefficients", "occupations", "orbital_energies"):
            sol[key] = sol[key][..., :-1]
        assert sol["coefficients"].shape == (7, 6)
        r = run(water_rhf, sol, reference(WATER_PUBLISHED_ENERGY))
        assert all_pass(r), failures(r)
        sol = oh_uhf.solution()
        for key in ("coefficients", "occupations", "orbital_energies"):
            sol[key] = sol[key][..., :-1]
        r = run(oh_uhf, sol)
        assert failures(r) == set()

    def test_required_keys_only(self, water_rhf):
        """With only energy, coefficients and occupations, the checks needing other keys
        are not applicable (passed is None) and the rest pass."""
        full = water_rhf.solution()
        sol = {k: full[k] for k in ("energy", "coefficients", "occupations")}
        r = run(water_rhf, sol, reference(WATER_PUBLISHED_ENERGY))
        na = {"converged-flag", "overlap", "density-consistency", "stationarity",
              "roothaan-hall", "aufbau"}
        for name in na:
            assert r[name].status is Status.NOT_APPLICABLE, name
            assert r[name].passed is None
            assert r[name].value is None
        assert {n for n in CORE if r[n].status is Status.PASSED} == set(CORE) - na
        assert failures(r) == set()
        assert r["stationarity"].message == (
            "stationarity: not applicable (water-sto-3g-rhf): no 'fock' key")
        assert r["aufbau"].message == (
            "aufbau: not applicable (water-sto-3g-rhf): no 'orbital_energies' key")


# --------------------------------------------------------------------------- planted errors


class TestPerturbationsFailTheRightCheck:
    def test_doubled_exchange_in_the_reported_fock(self, water_rhf):
        """F = H + J − K (K doubled) fails stationarity (and Roothaan–Hall, which uses the
        reported Fock) while self-consistency, computed from the density, passes."""
        ints = water_rhf.ints
        sol = water_rhf.solution()
        vj, vk = ints.jk(sol["density"][None])
        sol["fock"] = ints.h + vj - vk[0]
        r = run(water_rhf, sol, reference(WATER_PUBLISHED_ENERGY))
        assert failures(r) == {"stationarity", "roothaan-hall"}
        assert r["self-consistency"].status is Status.PASSED
        assert r["self-consistency"].value < 1e-8
        assert r["stationarity"].value > 1e-2
        assert r["stationarity"].message.startswith(
            "stationarity: max|X(FPS − SPF)X| = ")
        assert " > 1.0e-05 (water-sto-3g-rhf), Löwdin element (" in r["stationarity"].message

    def test_energy_off_by_one_hartree(self, water_rhf):
        """E + 1.0 Eh fails energy-consistency (and the reference energy) by 1.0 Eh."""
        sol = water_rhf.solution()
        sol["energy"] += 1.0
        r = run(water_rhf, sol, reference(WATER_PUBLISHED_ENERGY))
        assert failures(r) == {"energy-consistency", "reference-energy"}
        assert r["energy-consistency"].value == pytest.approx(1.0, abs=1e-9)
        assert r["energy-consistency"].message == (
            "energy-consistency: |E − E[P]| = 1.0e+00 > 1.0e-08 (water-sto-3g-rhf), "
            "E = -73.9420799282, E[P] = -74.9420799282 Eh")
        assert r["reference-energy"].message == (
            "reference-energy: |E − E_ref| = 1.0e+00 > 1.0e-06 (water-sto-3g-rhf), "
            "E = -73.9420799282 Eh is 1.000e+00 Eh above E_ref = -74.9420799282 Eh")

    def test_density_mixed_with_the_core_guess(self, water_rhf):
        """½(P + P_core) keeps the electron count but fails idempotency and
        density-consistency (and every check evaluated on that density)."""
        sol = water_rhf.solution()
        sol["density"] = 0.5 * (sol["density"] + core_density(water_rhf))
        r = run(water_rhf, sol, reference(WATER_PUBLISHED_ENERGY))
        assert {"idempotency", "density-consistency"} <= failures(r)
        # (P/2)S(P/2) − P/2 of a 50/50 mixture is ¼(D₁SD₂ + D₂SD₁ − D₁ − D₂) ≠ 0.
        assert r["idempotency"].value > 1e-2
        assert r["idempotency"].message.startswith(
            "idempotency: max|(P/2)S(P/2) − P/2| = ")
        assert r["density-consistency"].message.startswith(
            "density-consistency: max|P − CnCᵀ| = ")
        # The energy, stationarity and self-consistency are those of the reported density.
        assert failures(r) == {"idempotency", "density-consistency", "stationarity",
                               "self-consistency", "energy-consistency"}
        for name in ("orthonormality", "electron-count", "overlap", "roothaan-hall", "aufbau",
                     "reference-energy"):
            assert r[name].status is Status.PASSED, name

    def test_extra_electrons_fail_well_formed_and_skip_the_rest(self, water_rhf, oh_uhf):
        """Occupying the LUMO fails well-formed; every other check is skipped."""
        sol = water_rhf.solution()
        sol["occupations"] = np.array([2.0, 2, 2, 2, 2, 2, 0])
        r = run(water_rhf, sol, reference(WATER_PUBLISHED_ENERGY))
        assert r["well-formed"].status is Status.FAILED
        assert r["well-formed"].message == (
            "well-formed: 'occupations' sum to 12 electrons, expected 10 (water-sto-3g-rhf)")
        assert all(r[n].status is Status.SKIPPED and r[n].passed is None
                   for n in CHECK_NAMES if n not in ("basis", "well-formed"))
        assert r["orthonormality"].message == (
            "orthonormality: skipped (water-sto-3g-rhf): the solution is malformed")
        sol = oh_uhf.solution()
        sol["occupations"] = np.array(sol["occupations"])
        sol["occupations"][0, 5] = 1.0
        u = run(oh_uhf, sol)
        assert u["well-formed"].message == (
            "well-formed: 'occupations' sum to 6 alpha and 4 beta electrons, expected 5 and 4 "
            "(oh-sto-3g-uhf)")
        assert statuses(u) == {"basis": Status.PASSED, "well-formed": Status.FAILED,
                               **{n: Status.SKIPPED for n in CHECK_NAMES[2:]}}

    def test_several_malformations_are_counted(self, water_rhf):
        """Two problems: the first leads the message, the count is the value."""
        sol = water_rhf.solution()
        sol["occupations"] = np.array([2.0, 2, 2, 2, 2, 2, 0])
        sol["overlap"] = np.eye(3)
        r = run(water_rhf, sol)
        assert r["well-formed"].value == 2.0
        assert r["well-formed"].message == (
            "well-formed: 'occupations' sum to 12 electrons, expected 10 (water-sto-3g-rhf) "
            "(and 1 more: 'overlap' has shape (3, 3), expected (7, 7))")

    def test_wrong_overlap_fails_overlap(self, water_rhf):
        """A reported overlap with its H–H element off by 1e-4 fails only the overlap check."""
        sol = water_rhf.solution()
        s = np.array(sol["overlap"])
        s[5, 6] = s[6, 5] = s[5, 6] + 1e-4
        sol["overlap"] = s
        r = run(water_rhf, sol)
        assert failures(r) == {"overlap"}
        assert r["overlap"].message.startswith(
            "overlap: your S differs by up to 1.0e-04; at your density that moves E by ")
        assert r["overlap"].message.endswith(
            " Eh > 1e-07 (water-sto-3g-rhf), AO element (5, 6) = (1 H 1s, 2 H 1s)")

    def test_converged_false_fails_the_flag(self, oh_uhf):
        """converged=False fails converged-flag only."""
        sol = oh_uhf.solution()
        sol["converged"] = False
        r = run(oh_uhf, sol)
        assert failures(r) == {"converged-flag"}
        assert r["converged-flag"].message == (
            "converged-flag: the code reports converged=False (oh-sto-3g-uhf) after 7 iterations")

    @staticmethod
    def rohf_rotated(conv, i: int, a: int, theta: float) -> dict:
        """ROHF solution with orbital i rotated into a by θ; densities, (Fα, Fβ) and energy
        rebuilt from the rotated orbitals."""
        ints, mf = conv.ints, conv.mf
        c = np.array(mf.mo_coeff)
        ci, ca = c[:, i].copy(), c[:, a].copy()
        c[:, i] = np.cos(theta) * ci + np.sin(theta) * ca
        c[:, a] = -np.sin(theta) * ci + np.cos(theta) * ca
        d = np.stack([c[:, mf.mo_occ > 0.5] @ c[:, mf.mo_occ > 0.5].T,
                      c[:, mf.mo_occ > 1.5] @ c[:, mf.mo_occ > 1.5].T])
        vj, vk = ints.jk(d)
        return {"energy": energy_terms(d, ints.h, vj, vk, ints.e_nuc).total, "coefficients": c,
                "occupations": mf.mo_occ, "density": d, "fock": fock_from_terms(ints.h, vj, vk, 2)}

    def test_rohf_closed_open_rotation_fails_stationarity(self, oh_rohf):
        """The closed σ orbital 2 rotated 0.01 rad into the open π orbital 4 fails
        stationarity and self-consistency (same value: the Fock is rebuilt)."""
        r = run(oh_rohf, self.rohf_rotated(oh_rohf, 2, 4, 0.01))
        assert failures(r) == {"stationarity", "self-consistency", "energy-error-bound"}
        assert r["stationarity"].value > 1e-4
        assert r["stationarity"].value == pytest.approx(r["self-consistency"].value, rel=1e-12)
        assert r["stationarity"].message.startswith("stationarity: max ROHF gradient block = ")

    def test_rohf_rotation_about_the_bond_axis_still_passes(self, oh_rohf):
        """Rotating the closed π orbital 3 into the open π orbital 4 (OH lies on z) turns
        the molecule's π system about the bond: another solution, so it passes."""
        c = oh_rohf.mf.mo_coeff
        assert np.max(np.abs(c[[0, 1, 4, 5]][:, [3, 4]])) < 1e-12  # π: px, py only
        r = run(oh_rohf, self.rohf_rotated(oh_rohf, 3, 4, 0.3))
        assert failures(r) == set()
        assert r["stationarity"].value < 1e-8


# --------------------------------------------------------------------------- the convergence edge


class TestStationarityAtTheConvergenceEdge:
    """Rotate the converged water orbitals HOMO→LUMO by θ, solved so that the measured
    commutator is exactly k × problem.convergence; the tolerance is 10 × convergence."""

    @staticmethod
    def angle_for(conv, k: float) -> float:
        target = k * conv.problem.convergence
        return brentq(lambda t: stationarity_of(conv, t) - target, 0.0, 0.05, xtol=1e-14,
                      rtol=1e-13)

    @pytest.mark.parametrize("k, passes", [(1.0, True), (9.9, True), (10.1, False),
                                           (100.0, False)])
    def test_both_sides_of_the_tolerance(self, water_rhf, k, passes):
        """k × convergence passes for k < 10 and fails for k > 10, in stationarity and
        self-consistency alike; every other check still passes."""
        assert CONVERGENCE_FACTOR == 10.0
        theta = self.angle_for(water_rhf, k)
        sol = water_rotated(water_rhf, theta)
        r = run(water_rhf, sol)
        conv = water_rhf.problem.convergence
        assert r["stationarity"].value == pytest.approx(k * conv, rel=1e-9)
        assert r["stationarity"].tolerance == pytest.approx(10 * conv)
        assert r["self-consistency"].value == pytest.approx(k * conv, rel=1e-6)
        expected = set() if passes else {"stationarity", "self-consistency"}
        assert failures(r) == expected
        assert r["stationarity"].passed is passes
        assert sol["energy"] > water_rhf.mf.e_tot  # above the minimum

    def test_hundredfold_message_and_angle(self, water_rhf):
        """At 100× the angle is ~100× that at 1× (linear regime) and the message says where."""
        t1, t100 = self.angle_for(water_rhf, 1.0), self.angle_for(water_rhf, 100.0)
        assert t100 / t1 == pytest.approx(100.0, rel=1e-3)
        r = run(water_rhf, water_rotated(water_rhf, t100))
        assert r["stationarity"].message.startswith(
            "stationarity: max|X(FPS − SPF)X| = 1.0e-04 > 1.0e-05 (water-sto-3g-rhf), "
            "Löwdin element (")

    def test_override_moves_the_edge(self, water_rhf):
        """A stationarity override of 1e-3 lets the 100× solution pass that check."""
        theta = self.angle_for(water_rhf, 100.0)
        tol = Tolerances({"stationarity": 1e-3})
        r = run(water_rhf, water_rotated(water_rhf, theta), tolerances=tol)
        assert r["stationarity"].status is Status.PASSED
        assert r["stationarity"].tolerance == 1e-3
        assert r["self-consistency"].status is Status.FAILED

    def test_looser_problem_convergence_moves_the_edge(self, water_rhf):
        """With convergence 1e-4 the same 100×(1e-6) solution passes (tolerance 1e-3)."""
        theta = self.angle_for(water_rhf, 100.0)
        loose = water_rhf.problem.replace(convergence=1e-4)
        results = evaluate(loose, extract(water_rotated(water_rhf, theta)), None, None,
                           water_rhf.ints)
        assert all(r.status is not Status.FAILED for r in results)
