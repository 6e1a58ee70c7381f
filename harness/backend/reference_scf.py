"""The reference SCF driver: pyscf RHF/UHF/ROHF from every guess, instabilities followed.

``harness.catalogue.references`` stores, hashes and loads references; this module runs
pyscf for them (and for ``harness.verdict.states``, which follows an instability of a
code's solution). Results come back as plain data (:class:`ReferenceSolution`). Atomic
units: energies in hartree (Eh), dipole in e·bohr (origin at the coordinate origin).
"""

from __future__ import annotations

import dataclasses
import math
import warnings

import numpy as np

from harness.backend import stability as stab

#: pyscf energy convergence (Eh) and orbital-gradient convergence of the references.
CONV_TOL = 1e-10
CONV_TOL_GRAD = 1e-8
#: SCF iterations allowed per run (generous: references are built once).
MAX_CYCLE = 500
#: Rounds of "stability analysis → follow the unstable mode → rerun" before giving up.
MAX_STABILITY_ROUNDS = 10
#: Starting densities tried for every case (pyscf's names; "1e" is the bare core
#: Hamiltonian, which leads some open shells into excited states); UHF singlets also try
#: "broken-symmetry" (alpha HOMO/LUMO rotated by +45°, beta by −45°, on the minao guess
#: orbitals). Earlier guesses win ties, so the order is part of the policy.
GUESSES = ("minao", "atom", "huckel", "1e")
BROKEN_SYMMETRY = "broken-symmetry"
#: UHF singlets also start from the internally stable RHF solution (Pα = Pβ = P/2), so
#: that the spin-restricted stationary point is among the known states.
RESTRICTED = "restricted"
#: Two solutions from different guesses whose energies differ by less than this (Eh)
#: are the same solution; the earlier guess is kept so the choice is reproducible.
SAME_SOLUTION = 1e-8
#: State labels: an empty orbital more than this (Eh) below an occupied one makes the state
#: "non-aufbau" (the aufbau check's tolerance, tolerances.AUFBAU: degenerate frontier
#: orbitals are split by convergence noise only).
LABEL_AUFBAU_SLACK = 1e-6
#: State labels: a UHF singlet with max|Pα − Pβ| below this is "α = β" (spin-restricted
#: like); the reference SCF converges P far tighter than this (CONV_TOL_GRAD).
LABEL_SAME_SPIN_DENSITY = 1e-5


@dataclasses.dataclass(frozen=True)
class FoundState:
    """A converged stationary point met by the driver (the fields of
    ``harness.catalogue.references.KnownState``): energy (Eh), ⟨S²⟩, internally stable or
    not, lowest orbital-Hessian eigenvalue (Eh/rad²), occupation label, how it was found."""

    energy: float
    s_squared: float
    stable: bool
    eigenvalue: float
    label: str
    found_by: str


@dataclasses.dataclass(frozen=True, eq=False)
class ReferenceSolution:
    """The kept solution of :func:`reference_solution`, as plain data (Eh, e·bohr).

    ``guess``/``converged``/``stable``/``rounds``: the kept run; ``guesses`` every guess
    tried in order, ``energy_by_guess`` their energies; ``terms``: nuclear, one_electron,
    coulomb, exchange; ``states``: every converged stationary point met, in order met;
    ``density``: the kept solution's density with a leading spin axis (RHF (1, nao, nao)
    total, UHF/ROHF (alpha, beta)), pyscf AO order.
    """

    guess: str
    converged: bool
    stable: bool
    rounds: int
    guesses: tuple[str, ...]
    energy_by_guess: dict
    energy: float
    terms: dict
    s_squared: float
    dipole: np.ndarray
    orbital_energies: np.ndarray
    occupations: np.ndarray
    nao: int
    nmo: int
    states: tuple[FoundState, ...]
    density: np.ndarray | None = None


#: Kohn–Sham methods and the pyscf classes of each method.
KS_METHODS = ("rks", "uks", "roks")
#: The restricted method whose stable solution starts an unrestricted singlet (RESTRICTED).
RESTRICTED_OF = {"uhf": "rhf", "uks": "rks"}


def _new_scf(mol, method: str, functional: str | None = None):
    """A quiet pyscf SCF object with the reference settings; Kohn–Sham ones integrate on
    the pinned grid (``harness.backend.grid.grid_arrays``, exactly the points and weights
    of ``Problem.grid``) with no density-based grid pruning (small_rho_cutoff = 0)."""
    from pyscf import dft, scf

    if method in KS_METHODS:
        from harness.backend import grid as _grid

        mf = {"rks": dft.rks.RKS, "uks": dft.uks.UKS, "roks": dft.roks.ROKS}[method](mol)
        mf.xc = functional
        coords, weights, _ = _grid.grid_arrays(mol)
        mf.grids = _grid.pyscf_grids(mol, coords, weights)
        mf.small_rho_cutoff = 0.0
    else:
        cls = {"rhf": scf.hf.RHF, "uhf": scf.uhf.UHF, "rohf": scf.rohf.ROHF}[method]
        mf = cls(mol)
    mf.conv_tol = CONV_TOL
    mf.conv_tol_grad = CONV_TOL_GRAD
    mf.max_cycle = MAX_CYCLE
    mf.verbose = 0
    return mf


def _broken_symmetry_density(mf) -> np.ndarray:
    """UHF start: minao guess orbitals with the alpha HOMO/LUMO pair rotated by +45°
    and the beta pair by −45°, so the two spins localise on different sides."""
    dm = mf.get_init_guess(key="minao")
    e, c = mf.eig(mf.get_fock(dm=dm), mf.get_ovlp())
    occ = mf.get_occ(e, c)
    c = np.array(c, copy=True)
    for spin, sign in ((0, 1.0), (1, -1.0)):
        nocc = int(round(occ[spin].sum()))
        if nocc < 1 or nocc >= c.shape[-1]:
            continue
        h, l = c[spin][:, nocc - 1].copy(), c[spin][:, nocc].copy()
        t = sign * math.pi / 4
        c[spin][:, nocc - 1] = math.cos(t) * h + math.sin(t) * l
        c[spin][:, nocc] = -math.sin(t) * h + math.cos(t) * l
    return mf.make_rdm1(c, occ)


def _initial_density(mf, guess: str) -> np.ndarray:
    if guess == BROKEN_SYMMETRY:
        return _broken_symmetry_density(mf)
    if guess == RESTRICTED:
        ks = getattr(mf, "xc", None) if hasattr(mf, "grids") else None
        rhf = _new_scf(mf.mol, "rks" if ks else "rhf", ks)
        _stable_solution(rhf, rhf.get_init_guess(key="minao"))
        dm = 0.5 * np.asarray(rhf.make_rdm1())
        return np.stack([dm, dm])
    with warnings.catch_warnings():  # pyscf's own "atom" guess calls a deprecated helper
        warnings.simplefilter("ignore", DeprecationWarning)
        return mf.get_init_guess(key=guess)


def _converge(mf, dm0) -> None:
    mf.kernel(dm0)
    if not mf.converged:  # fall back on the second-order solver from where DIIS stopped
        second = mf.newton()
        second.kernel(mf.mo_coeff, mf.mo_occ)
        for attr in ("e_tot", "mo_coeff", "mo_occ", "mo_energy", "converged"):
            setattr(mf, attr, getattr(second, attr))


def _s_squared(mf) -> float:
    from pyscf import scf

    if isinstance(mf, scf.uhf.UHF) or isinstance(mf, scf.rohf.ROHF):
        return float(mf.spin_square()[0])
    return 0.0


def _state_label(mf) -> str:
    """Short occupation description: per-spin HOMO character (largest Mulliken share),
    "non-aufbau" if an empty orbital lies below an occupied one, and for UHF whether
    Pα = Pβ (spin-restricted-like) or not."""
    from pyscf import scf

    mol = mf.mol
    s = mf.get_ovlp()
    labels = [" ".join(x.split()) for x in mol.ao_labels()]
    c, e, occ = np.asarray(mf.mo_coeff), np.asarray(mf.mo_energy), np.asarray(mf.mo_occ)
    if c.ndim == 2:
        c, e, occ = c[None], e[None], occ[None]
        names = ("",)
    else:
        names = ("α ", "β ")
    parts, aufbau = [], True
    for cs, es, ns, name in zip(c, e, occ, names):
        filled, empty = np.flatnonzero(ns > 0), np.flatnonzero(ns == 0)
        if filled.size == 0:
            continue
        homo = filled[np.argmax(es[filled])]
        share = cs[:, homo] * (s @ cs[:, homo])
        parts.append(f"{name}HOMO {labels[int(np.argmax(share))]}")
        if empty.size and es[empty].min() < es[filled].max() - LABEL_AUFBAU_SLACK:
            aufbau = False
    if isinstance(mf, scf.uhf.UHF) and mol.spin == 0:
        dm = np.asarray(mf.make_rdm1())
        parts.append("α = β" if np.abs(dm[0] - dm[1]).max() < LABEL_SAME_SPIN_DENSITY
                     else "α ≠ β")
    if not aufbau:
        parts.append("non-aufbau")
    return ", ".join(parts)


def _stable_solution(mf, dm0, guess: str = "", states: list | None = None
                     ) -> tuple[bool, int]:
    """Converge, then follow internal instabilities (``harness.backend.stability.internal_mode``:
    λ < −STABILITY_EIGENVALUE). Returns (stable, rounds used); every converged stationary
    point met is appended to ``states`` as a :class:`FoundState`."""
    _converge(mf, dm0)
    for rounds in range(1, MAX_STABILITY_ROUNDS + 1):
        mode = stab.internal_mode(mf)
        stable = not mode.eigenvalue < -stab.STABILITY_EIGENVALUE
        if states is not None and mf.converged:
            found = guess if rounds == 1 else f"{guess}, followed {rounds - 1}×"
            states.append(FoundState(energy=float(mf.e_tot), s_squared=_s_squared(mf),
                                     stable=stable, eigenvalue=float(mode.eigenvalue),
                                     label=_state_label(mf), found_by=found))
        if stable:
            return True, rounds
        _converge(mf, mf.make_rdm1(stab.rotated_orbitals(mf, mode), mf.mo_occ))
    return False, MAX_STABILITY_ROUNDS


def follow(mol, method: str, mo_coeff, mo_occ) -> tuple[float, float]:
    """pyscf SCF of ``method`` started from the density of the given orbitals (pyscf AO
    order of ``mol``), followed until internally stable as for a reference. Returns
    (total energy in Eh, ⟨S²⟩). Used by ``harness.verdict.states`` to follow an instability of
    a code's solution (pyscf analysing the code's solution, not checking itself)."""
    mf = _new_scf(mol, method)
    _stable_solution(mf, mf.make_rdm1(np.asarray(mo_coeff), np.asarray(mo_occ)))
    return float(mf.e_tot), _s_squared(mf)



def _ks_energy_terms(mf) -> dict[str, float]:
    """Kohn–Sham: E_1, E_J as for HF; E_xc of the density on the pinned grid
    (``harness.backend.grid.xc_on_grid``); the exact-exchange part E_K = the rest of
    pyscf's E_xc + E_K (−¼ Tr(P K_eff) restricted, −½ Σσ Tr(Pσ K_eff[Pσ]) otherwise)."""
    from harness.backend import grid as _grid

    mol = mf.mol
    dm = np.asarray(mf.make_rdm1())
    veff = mf.get_veff(mol, dm)
    d = dm[None] if dm.ndim == 2 else dm
    exc, _, _ = _grid.xc_on_grid(mol, mf.xc, d, mf.grids.coords, mf.grids.weights)
    p = d.sum(axis=0)
    e1 = float(np.einsum("ij,ji->", p, mf.get_hcore()))
    return {"nuclear": float(mol.energy_nuc()), "one_electron": e1,
            "coulomb": float(veff.ecoul), "exchange": float(veff.exc) - exc, "xc": exc}


def _energy_terms(mf) -> dict[str, float]:
    """E_1 = Tr(P h), E_J = ½ Tr(P J[P]), E_K = −½ Σσ Tr(Pσ K[Pσ]) (RHF: −¼ Tr(P K[P]))."""
    if hasattr(mf, "xc") and hasattr(mf, "grids"):
        return _ks_energy_terms(mf)
    mol = mf.mol
    dm = np.asarray(mf.make_rdm1())
    h1e = mf.get_hcore()
    if dm.ndim == 2:
        vj, vk = mf.get_jk(mol, dm)
        p = dm
        ek = -0.25 * np.einsum("ij,ji->", dm, vk)
    else:
        vj, vk = mf.get_jk(mol, dm)
        p = dm[0] + dm[1]
        vj = vj[0] + vj[1]
        ek = -0.5 * (np.einsum("ij,ji->", dm[0], vk[0]) + np.einsum("ij,ji->", dm[1], vk[1]))
    return {"nuclear": float(mol.energy_nuc()),
            "one_electron": float(np.einsum("ij,ji->", p, h1e)),
            "coulomb": float(0.5 * np.einsum("ij,ji->", p, vj)),
            "exchange": float(ek)}




def _solve(mol, method: str, functional: str | None = None):
    """Run every guess through :func:`_stable_solution`; return the kept run, all runs and
    the stationary states met (in order met).

    A run is ``(guess, mf, converged, stable, rounds)``. Kept: the lowest energy among
    the converged stable runs (else the converged ones, else all); ties within
    SAME_SOLUTION Eh go to the earlier guess.
    """
    guesses = list(GUESSES)
    if method in RESTRICTED_OF and mol.spin == 0:
        guesses += [BROKEN_SYMMETRY, RESTRICTED]
    runs, states = [], []
    for guess in guesses:
        mf = _new_scf(mol, method, functional)
        stable, rounds = _stable_solution(mf, _initial_density(mf, guess), guess, states)
        runs.append((guess, mf, bool(mf.converged), stable, rounds))

    def rank(run):
        return (not run[2], not run[3])

    best_class = min(rank(r) for r in runs)
    pool = [r for r in runs if rank(r) == best_class]
    lowest = min(r[1].e_tot for r in pool)
    kept = next(r for r in pool if r[1].e_tot < lowest + SAME_SOLUTION)
    return kept, runs, states


def reference_solution(mol, method: str, functional: str | None = None) -> ReferenceSolution:
    """The reference solution of ``method`` for a pyscf ``Mole`` built in bohr: every
    guess converged and followed until internally stable, the lowest converged stable
    run kept (see :func:`_solve`), as plain data. Kohn–Sham methods need ``functional``
    and run on the pinned grid; ``terms`` then also holds ``xc``."""
    (guess, mf, converged, stable, rounds), runs, states = _solve(mol, method, functional)
    return ReferenceSolution(
        guess=guess, converged=bool(converged), stable=bool(stable), rounds=int(rounds),
        guesses=tuple(r[0] for r in runs),
        energy_by_guess={r[0]: float(r[1].e_tot) for r in runs},
        energy=float(mf.e_tot), terms=_energy_terms(mf), s_squared=_s_squared(mf),
        dipole=np.asarray(mf.dip_moment(unit="AU", verbose=0), dtype=float),
        orbital_energies=np.asarray(mf.mo_energy, dtype=float),
        occupations=np.asarray(mf.mo_occ, dtype=float), nao=int(mol.nao),
        nmo=int(np.shape(mf.mo_coeff)[-1]), states=tuple(states),
        density=np.asarray(mf.make_rdm1(), dtype=float).reshape(-1, mol.nao, mol.nao))


def one_scf_energy(mol, method: str, functional: str | None = None) -> float:
    """Total energy (Eh) of ONE SCF of ``method`` from pyscf's default guess with the
    reference settings (:func:`_new_scf`; Kohn–Sham on the pinned grid): no other guesses,
    no stability following. For outside checks of closed-shell atoms in large bases
    (tests/published), where the full reference search would cost four SCFs each.
    Raises RuntimeError if the SCF does not converge."""
    mf = _new_scf(mol, method, functional)
    mf.kernel()
    if not mf.converged:
        raise RuntimeError(f"{method}/{functional}: SCF not converged")
    return float(mf.e_tot)
