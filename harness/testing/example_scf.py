"""The bundled example SCF code: a lab's in-house SCF program (RHF, UHF, ROHF; Kohn–Sham
RKS, UKS, ROKS).

Scenario: a research group has written its own SCF code and wants its numbers checked
before they go into a paper. This module is that code. It is written independently of
the harness checks (it imports nothing from ``harness.checks``) and uses pyscf for one
thing only: the integrals over the basis functions (overlap, kinetic, nuclear
attraction, electron repulsion) and the nuclear repulsion energy. Everything else — the
Fock matrices, the generalised eigenproblem, the guess, DIIS, the ROHF effective Fock,
the convergence measure — is numpy/scipy below. Kohn–Sham: pyscf (through
``harness.backend.grid.XCEvaluator``) also evaluates the functional — E_xc and V_xc of a
density — on the problem's pinned grid (``problem.grid``), or on a pyscf grid of another
level in own-grid mode (:func:`solve_own_grid`); the SCF loop stays this code's.

Atomic units throughout: coordinates in bohr, energies and Fock matrices in hartree (Eh).

Plug-in entry point: :func:`solve` (``harness.testing.example_scf:solve``). The work is done by
the class :class:`LabSCF`, whose steps are separate methods so that a variant can
replace exactly one of them (``tests/quality/broken_codes.py`` plants bugs that way).

Notation: S overlap, H core Hamiltonian, P (d) density, F (f) Fock matrix, C (c)
orbital coefficients (columns), ε (e) orbital energies, n (occ) occupations,
(μν|λσ) two-electron integrals in chemists' notation.
"""

from __future__ import annotations

import dataclasses

import numpy as np

#: Eigenvalues of S below this are dropped by the canonical orthogonalisation, so the
#: number of orbitals nmo may be smaller than the number of basis functions nao.
LINEAR_DEPENDENCE = 1e-8

#: Largest number of Fock builds before the code gives up (and reports converged=False).
MAX_ITERATIONS = 200

#: Number of Fock/error pairs kept by DIIS.
DIIS_SIZE = 8

#: The constant K of the generalised Wolfsberg–Helmholz guess
#: G_μν = ½ K (H_μμ + H_νν) S_μν.
WOLFSBERG_HELMHOLZ = 1.75

#: Rotation angle (rad) between HOMO and LUMO in the broken-symmetry UHF guess:
#: +45° for alpha, −45° for beta.
BROKEN_SYMMETRY_ANGLE = np.pi / 4


@dataclasses.dataclass(frozen=True)
class Integrals:
    """AO integrals of one problem (Eh; pyscf AO order).

    s overlap S_μν, t kinetic T_μν, v nuclear attraction V_μν, eri (μν|λσ) as a full
    (nao, nao, nao, nao) array, e_nuc the nuclear repulsion energy Σ_{A<B} Z_A Z_B / R_AB,
    shells the AO offsets of the shells (shell I holds AOs shells[I] … shells[I+1] − 1).
    """

    s: np.ndarray
    t: np.ndarray
    v: np.ndarray
    eri: np.ndarray
    e_nuc: float
    shells: tuple[int, ...]


def compute_integrals(problem) -> Integrals:
    """The integrals of ``problem`` (coordinates in bohr), from pyscf's integral library.

    The two-electron integrals are computed with 8-fold symmetry and unpacked to the full
    tensor; that costs nao⁴ doubles (1.4 GB at nao = 114), fine up to ~120 AO.
    """
    from harness.backend.integrals import full_integrals

    s, t, v, eri, e_nuc, shells = full_integrals(problem)
    return Integrals(s=s, t=t, v=v, eri=eri, e_nuc=e_nuc, shells=shells)


def canonical_orthogonaliser(s: np.ndarray, threshold: float = LINEAR_DEPENDENCE) -> np.ndarray:
    """X = U σ^(-1/2) over the eigenpairs (σ, U) of S with σ > threshold; shape (nao, nmo).

    XᵀSX = 1, so F C = S C ε becomes the ordinary eigenproblem (XᵀFX) C' = C' ε, C = X C'.
    """
    sigma, u = np.linalg.eigh(s)
    keep = sigma > threshold
    return u[:, keep] / np.sqrt(sigma[keep])


def lowdin_powers(s: np.ndarray, threshold: float = LINEAR_DEPENDENCE):
    """(S^(1/2), S^(-1/2), Π): symmetric (Löwdin) powers of S on the kept eigenvectors.

    Π = U Uᵀ over the kept eigenvectors is the identity of the Löwdin basis (the unit
    matrix when nothing is dropped).
    """
    sigma, u = np.linalg.eigh(s)
    keep = sigma > threshold
    u, sigma = u[:, keep], sigma[keep]
    return (u * np.sqrt(sigma)) @ u.T, (u / np.sqrt(sigma)) @ u.T, u @ u.T


def coulomb(eri: np.ndarray, d: np.ndarray) -> np.ndarray:
    """J_μν = Σ_λσ (μν|λσ) P_λσ."""
    n = d.shape[0]
    return (eri.reshape(n * n, n * n) @ d.reshape(n * n)).reshape(n, n)


def exchange(eri: np.ndarray, d: np.ndarray) -> np.ndarray:
    """K_μν = Σ_λσ (μλ|νσ) P_λσ."""
    return np.einsum("ikjl,kl->ij", eri, d)


def density(c: np.ndarray, occ: np.ndarray) -> np.ndarray:
    """P_μν = Σ_i n_i C_μi C_νi (works per spin on stacked (2, nao, nmo) input too)."""
    return np.einsum("...mi,...i,...ni->...mn", c, occ, c)


def commutator(f: np.ndarray, d: np.ndarray, s_half: np.ndarray,
               s_inv_half: np.ndarray) -> np.ndarray:
    """F'P' − P'F' with F' = S^(-1/2) F S^(-1/2), P' = S^(1/2) P S^(1/2).

    Equal to S^(-1/2) (F P S − S P F) S^(-1/2); zero at a stationary point.
    """
    fp = s_inv_half @ f @ s_inv_half
    dp = s_half @ d @ s_half
    return fp @ dp - dp @ fp


class DIIS:
    """Pulay's commutator DIIS: F_next = Σ_i c_i F_i minimising |Σ_i c_i e_i| with Σ c_i = 1.

    The coefficients solve [[B, −1], [−1ᵀ, 0]] [c, λ] = [0, −1] with B_ij = ⟨e_i, e_j⟩.
    Keeps the last ``size`` pairs; the history belongs to one SCF run.
    """

    def __init__(self, size: int = DIIS_SIZE):
        self.size = size
        self.focks: list[np.ndarray] = []
        self.errors: list[np.ndarray] = []

    def extrapolate(self, f: np.ndarray, error: np.ndarray) -> np.ndarray:
        self.focks.append(f)
        self.errors.append(error.ravel())
        del self.focks[:-self.size], self.errors[:-self.size]
        m = len(self.focks)
        if m < 2:
            return f
        b = -np.ones((m + 1, m + 1))
        b[m, m] = 0.0
        e = np.array(self.errors)
        b[:m, :m] = e @ e.T
        rhs = np.zeros(m + 1)
        rhs[m] = -1.0
        coef = np.linalg.lstsq(b, rhs, rcond=None)[0][:m]
        return np.einsum("i,i...->...", coef, np.array(self.focks))


class LabSCF:
    """Hartree–Fock for one :class:`harness.contract.problem.Problem` (RHF, UHF or ROHF).

    Shapes: RHF and ROHF orbitals c (nao, nmo), energies e and occupations occ (nmo,);
    UHF c (2, nao, nmo), e and occ (2, nmo) (alpha first). Densities: RHF the total
    P (nao, nao); UHF and ROHF (2, nao, nao) = (Pα, Pβ). Fock matrices likewise:
    RHF F = H + J(P) − ½K(P); UHF/ROHF Fσ = H + J(Pα + Pβ) − K(Pσ). Eh throughout.

    Each step is a method; :meth:`iterate` runs the SCF and returns the plug-in dict.
    """

    max_iterations = MAX_ITERATIONS
    diis_size = DIIS_SIZE

    def __init__(self, problem, integrals: Integrals | None = None,
                 grid_level: int | None = None):
        self.problem = problem
        self.ks = bool(getattr(problem, "functional", None))
        # Kohn–Sham methods share the orbital structure of rhf/uhf/rohf
        self.method = problem.shape_method if self.ks else problem.method
        self.grid_level = grid_level
        self.n_alpha = problem.n_alpha
        self.n_beta = problem.n_beta
        self.ints = integrals if integrals is not None else compute_integrals(problem)
        self.s = self.ints.s
        self.h = self.core_hamiltonian()
        self.x = canonical_orthogonaliser(self.s)
        self.s_half, self.s_inv_half, self.identity = lowdin_powers(self.s)
        self.xc = self.eri_lr = None
        if self.ks:
            from harness.backend.grid import XCEvaluator, long_range_eri

            self.xc = XCEvaluator(problem, level=grid_level)
            cx = self.xc.coefficients
            if cx.omega != 0.0 and cx.alpha != cx.hyb:
                self.eri_lr = long_range_eri(problem, cx.omega)
        self._ks_cache = None

    # -- Fock matrix and energy ---------------------------------------------------------

    def core_hamiltonian(self) -> np.ndarray:
        """H = T + V (kinetic plus nuclear attraction), Eh."""
        return self.ints.t + self.ints.v

    def coulomb_exchange(self, d: np.ndarray):
        """(J(P), K(P)) for one density P (nao, nao); see :func:`coulomb`, :func:`exchange`."""
        return coulomb(self.ints.eri, d), exchange(self.ints.eri, d)

    def exact_exchange(self, d: np.ndarray) -> np.ndarray:
        """Kohn–Sham K_eff = hyb·K + (alpha − hyb)·K_lr(ω) of one density (pyscf's
        convention for the functional's exact-exchange coefficients)."""
        cx = self.xc.coefficients
        k = cx.hyb * exchange(self.ints.eri, d) if cx.hyb else np.zeros_like(d)
        if self.eri_lr is not None:
            k = k + (cx.alpha - cx.hyb) * exchange(self.eri_lr, d)
        return k

    def ks_parts(self, d: np.ndarray):
        """(J, K_eff per component, E_xc, V_xc) of a Kohn–Sham density, the last one
        cached (the energy reuses the Fock build's parts)."""
        if self._ks_cache is not None and self._ks_cache[0] is d:
            return self._ks_cache[1]
        comps = d[None] if self.method == "rhf" else d
        j = coulomb(self.ints.eri, comps.sum(axis=0))
        k = np.stack([self.exact_exchange(x) for x in comps])
        exc, vxc = self.xc(comps)
        self._ks_cache = (d, (j, k, exc, vxc))
        return j, k, exc, vxc

    def fock(self, d: np.ndarray) -> np.ndarray:
        """RHF: F = H + J(P) − ½K(P). UHF/ROHF: Fσ = H + J(Pα+Pβ) − K(Pσ), as (2, nao, nao).
        Kohn–Sham: K → K_eff, plus V_xc (RKS: F = H + J − ½K_eff + V_xc)."""
        if self.ks:
            j, k, _, vxc = self.ks_parts(d)
            if self.method == "rhf":
                return self.h + j - 0.5 * k[0] + vxc[0]
            return np.stack([self.h + j - k[s] + vxc[s] for s in (0, 1)])
        if self.method == "rhf":
            j, k = self.coulomb_exchange(d)
            return self.h + j - 0.5 * k
        ja, ka = self.coulomb_exchange(d[0])
        jb, kb = self.coulomb_exchange(d[1])
        return np.stack([self.h + ja + jb - ka, self.h + ja + jb - kb])

    def energy(self, d: np.ndarray, f: np.ndarray) -> float:
        """E = ½ Tr[P(H + F)] + E_nuc (RHF); ½ Σσ Tr[Pσ(H + Fσ)] + E_nuc (UHF/ROHF), Eh.
        Kohn–Sham: E = Tr(PH) + ½Tr(PJ) − ¼Tr(P K_eff) (RKS; −½ Σσ Tr(Pσ K_eff,σ)) + E_xc
        + E_nuc."""
        if self.ks:
            j, k, exc, _ = self.ks_parts(d)
            comps = d[None] if self.method == "rhf" else d
            p = comps.sum(axis=0)
            ek = -0.25 * np.sum(p * k[0]) if self.method == "rhf" else \
                -0.5 * sum(np.sum(x * y) for x, y in zip(comps, k))
            return float(np.sum(p * self.h) + 0.5 * np.sum(p * j) + ek + exc) + self.ints.e_nuc
        if self.method == "rhf":
            e_el = 0.5 * np.sum(d * (self.h + f))
        else:
            e_el = 0.5 * sum(np.sum(ds * (self.h + fs)) for ds, fs in zip(d, f))
        return float(e_el) + self.ints.e_nuc

    # -- orbitals -----------------------------------------------------------------------

    def eigensolve(self, f: np.ndarray):
        """Solve F C = S C ε by canonical orthogonalisation: (XᵀFX) C' = C' ε, C = X C'.

        Returns (ε ascending, C) with C (nao, nmo), CᵀSC = 1.
        """
        e, cp = np.linalg.eigh(self.x.T @ f @ self.x)
        return e, self.x @ cp

    def orbitals(self, f: np.ndarray):
        """Eigen-solve the matrix to diagonalise: one matrix (RHF/ROHF) or one per spin (UHF)."""
        if self.method == "uhf":
            (ea, ca), (eb, cb) = self.eigensolve(f[0]), self.eigensolve(f[1])
            return np.stack([ea, eb]), np.stack([ca, cb])
        return self.eigensolve(f)

    def occupy(self, e: np.ndarray, c: np.ndarray) -> np.ndarray:
        """Aufbau occupations by orbital energy.

        RHF: 2 on the n/2 lowest; ROHF: 2 on the n_β lowest, 1 on the next n_α − n_β;
        UHF: 1 on the n_α (n_β) lowest alpha (beta) orbitals.
        """
        def lowest(energies, count, value):
            occ = np.zeros(energies.shape[-1])
            occ[np.argsort(energies, kind="stable")[:count]] = value
            return occ

        if self.method == "uhf":
            return np.stack([lowest(e[0], self.n_alpha, 1.0), lowest(e[1], self.n_beta, 1.0)])
        occ = lowest(e, self.n_alpha, 1.0)
        occ[np.argsort(e, kind="stable")[:self.n_beta]] = 2.0
        return occ

    def density(self, c: np.ndarray, occ: np.ndarray) -> np.ndarray:
        """RHF: P = C n Cᵀ (total). UHF: Pσ = Cσ nσ Cσᵀ. ROHF: Pα on occ ≥ 1, Pβ on occ = 2."""
        if self.method == "rohf":
            return np.stack([density(c, (occ >= 1).astype(float)),
                             density(c, (occ >= 2).astype(float))])
        return density(c, occ)

    def guess_orbitals(self):
        """One set of orbitals (ε, C): the generalised Wolfsberg–Helmholz guess, in a form
        that does not depend on how the molecule is oriented.

        Diagonalise G with G_μν = ½ K (h_I + h_J) S_μν for μ in shell I, ν in another
        shell J, and G = H within each shell, K = WOLFSBERG_HELMHOLZ; h_I = tr(S_II⁻¹ H_II)
        / n_I is the shell's mean diagonal. Each block of G then turns with its shells
        exactly as S and H do. (The textbook form uses H_μμ in place of h_I; when the
        molecule turns, the p, d, … components mix, H_μμ changes, and an open shell can
        converge to another state. The bare core Hamiltonian leads open shells such as OH
        and NH₂ into excited states; this guess reaches their ground states.)
        """
        shells = self.ints.shells
        hd = np.empty(self.s.shape[0])
        for a, b in zip(shells[:-1], shells[1:]):
            hd[a:b] = np.trace(np.linalg.solve(self.s[a:b, a:b], self.h[a:b, a:b])) / (b - a)
        g = 0.5 * WOLFSBERG_HELMHOLZ * (hd[:, None] + hd[None, :]) * self.s
        for a, b in zip(shells[:-1], shells[1:]):
            g[a:b, a:b] = self.h[a:b, a:b]
        return self.eigensolve(g)

    def guess(self):
        """Initial orbitals (ε, C): :meth:`guess_orbitals`; for UHF with n_α = n_β the
        HOMO and LUMO are rotated by +45° (alpha) and −45° (beta), so that a singlet can
        reach a broken-symmetry solution when that is lower (it returns to the restricted
        solution otherwise).
        """
        e, c = self.guess_orbitals()
        if self.method != "uhf":
            return e, c
        ca, cb = c.copy(), c.copy()
        homo = self.n_alpha - 1
        if self.n_alpha == self.n_beta and 0 <= homo < c.shape[1] - 1:
            for cs, angle in ((ca, BROKEN_SYMMETRY_ANGLE), (cb, -BROKEN_SYMMETRY_ANGLE)):
                h, lu = cs[:, homo].copy(), cs[:, homo + 1].copy()
                cs[:, homo] = np.cos(angle) * h + np.sin(angle) * lu
                cs[:, homo + 1] = -np.sin(angle) * h + np.cos(angle) * lu
        return np.stack([e, e]), np.stack([ca, cb])

    def initial_orbitals(self):
        """Orbitals from ``problem.initial_density`` when given, else :meth:`guess`.

        From a density, RHF/UHF: diagonalise F(P). ROHF: the natural orbitals of Pα + Pβ,
        i.e. the eigenvectors U of Xᵀ S (Pα + Pβ) S X (C = X U), ordered by decreasing
        occupation ν and returned with −ν in place of orbital energies, so that the aufbau
        rule fills the closed, then the open shells of the given density first (the
        effective Fock needs these spaces from the first iteration on).
        """
        d0 = self.problem.initial_density
        if d0 is None:
            return self.guess()
        d0 = self.checked_density(d0)
        if self.method == "rohf":
            sx = self.s @ self.x
            nu, u = np.linalg.eigh(sx.T @ (d0[0] + d0[1]) @ sx)
            return -nu[::-1], self.x @ u[:, ::-1]
        return self.orbitals(self.fock(d0))

    def checked_density(self, d0) -> np.ndarray:
        """``initial_density`` in this method's layout: total P (RHF), (Pα, Pβ) otherwise.

        A total density given to UHF/ROHF is split evenly, (½P, ½P); a spin pair given to
        RHF is summed. Any other shape raises ``ValueError``.
        """
        d0 = np.asarray(d0, dtype=float)
        nao = self.s.shape[0]
        if d0.shape not in ((nao, nao), (2, nao, nao)):
            raise ValueError(f"initial_density has shape {d0.shape}, expected ({nao}, {nao}) "
                             f"or (2, {nao}, {nao})")
        if self.method == "rhf":
            return d0 if d0.ndim == 2 else d0[0] + d0[1]
        return d0 if d0.ndim == 3 else np.stack([0.5 * d0, 0.5 * d0])

    # -- ROHF effective Fock ------------------------------------------------------------

    def effective_fock(self, f: np.ndarray, c: np.ndarray, occ: np.ndarray) -> np.ndarray:
        """The matrix to diagonalise: F (RHF), (Fα, Fβ) (UHF), or the ROHF effective Fock.

        ROHF (Roothaan's form), in the basis of the current orbitals with Fc = ½(Fα + Fβ):

                     closed  open  virtual
            closed     Fc     Fβ     Fc
            open       Fβ     Fc     Fα
            virtual    Fc     Fα     Fc

        back-transformed to the AO basis as S C R Cᵀ S. Its off-diagonal blocks are the
        ROHF gradient, so its eigenvectors are stationary exactly when the closed–virtual
        block of Fα + Fβ, the closed–open block of Fβ and the open–virtual block of Fα
        vanish.
        """
        if self.method != "rohf":
            return f
        fa, fb = c.T @ f[0] @ c, c.T @ f[1] @ c
        r = 0.5 * (fa + fb)
        closed, open_ = occ >= 2, occ == 1
        virtual = ~(closed | open_)
        r[np.ix_(closed, open_)] = fb[np.ix_(closed, open_)]
        r[np.ix_(open_, closed)] = fb[np.ix_(open_, closed)]
        r[np.ix_(open_, virtual)] = fa[np.ix_(open_, virtual)]
        r[np.ix_(virtual, open_)] = fa[np.ix_(virtual, open_)]
        sc = self.s @ c
        return sc @ r @ sc.T

    # -- convergence --------------------------------------------------------------------

    def diis_error(self, f_eff: np.ndarray, d: np.ndarray) -> np.ndarray:
        """DIIS error vector: F'P' − P'F' (RHF, per spin for UHF; ROHF: F_eff with Pα + Pβ)."""
        args = (self.s_half, self.s_inv_half)
        if self.method == "rhf":
            return commutator(f_eff, d, *args)
        if self.method == "uhf":
            return np.stack([commutator(f_eff[0], d[0], *args), commutator(f_eff[1], d[1], *args)])
        return commutator(f_eff, d[0] + d[1], *args)

    def stationarity(self, f: np.ndarray, d: np.ndarray, c: np.ndarray, occ: np.ndarray) -> float:
        """The convergence measure (README, "stationarity"), in the Löwdin basis (Eh).

        RHF: max|F'P' − P'F'| with the total density. UHF: the largest over σ of
        max|F'σP'σ − P'σF'σ|. ROHF: with projectors D' = S^½ C Cᵀ S^½ on the closed
        (Dc'), open (Do') and virtual (Dv' = 1 − Dc' − Do') spaces, the largest element of
        Dc'(F'α + F'β)Dv', Dc'F'βDo' and Do'F'αDv'.
        """
        args = (self.s_half, self.s_inv_half)
        if self.method == "rhf":
            return float(np.abs(commutator(f, d, *args)).max())
        if self.method == "uhf":
            return float(max(np.abs(commutator(f[s], d[s], *args)).max() for s in (0, 1)))
        sh, sih = args
        dc = sh @ density(c, (occ >= 2).astype(float)) @ sh
        do = sh @ density(c, (occ == 1).astype(float)) @ sh
        dv = self.identity - dc - do
        fa, fb = sih @ f[0] @ sih, sih @ f[1] @ sih
        blocks = (dc @ (fa + fb) @ dv, dc @ fb @ do, do @ fa @ dv)
        return float(max(np.abs(b).max() for b in blocks))

    # -- the SCF loop -------------------------------------------------------------------

    def iterate(self) -> dict:
        """Run the SCF; return the plug-in dict (see :func:`solve`).

        Each iteration builds P from the current orbitals, F(P), and the measure; below
        ``problem.convergence`` the code takes one more plain step (diagonalise the
        current F — ROHF: the effective Fock — without DIIS, rebuild P, F(P) and E[P])
        and stops if the measure of that final state is still below the threshold
        (else DIIS resumes). So what is reported is mutually consistent: P from the
        reported C and occupations, F = F(P), E = E[P].
        """
        conv = self.problem.convergence
        e, c = self.initial_orbitals()
        occ = self.occupy(e, c)
        diis = DIIS(self.diis_size)
        converged = polishing = False
        iterations = 0
        for iterations in range(1, self.max_iterations + 1):
            d = self.density(c, occ)
            f = self.fock(d)
            measure = self.stationarity(f, d, c, occ)
            if polishing and measure <= conv:
                converged = True
                break
            polishing = measure <= conv
            f_eff = self.effective_fock(f, c, occ)
            f_next = diis.extrapolate(f_eff, self.diis_error(f_eff, d))
            if polishing:
                f_next = f_eff
            e, c = self.orbitals(f_next)
            occ = self.occupy(e, c)
        else:  # never converged: report the last consistent state
            d = self.density(c, occ)
            f = self.fock(d)
        return self.report(e, c, occ, d, f, converged, iterations)

    def report(self, e, c, occ, d, f, converged: bool, iterations: int) -> dict:
        """The plug-in dict: energy (Eh, incl. E_nuc), orbitals, density, Fock, S, H, flags
        (Kohn–Sham also E_xc, V_xc and, on its own grid, ``grid = "own"``)."""
        out = self._report(e, c, occ, d, f, converged, iterations)
        if self.ks:
            _, _, exc, vxc = self.ks_parts(d)
            out["xc_energy"] = exc
            out["xc_potential"] = vxc[0] if self.method == "rhf" else vxc
            if self.grid_level is not None:
                out["grid"] = "own"
        return out

    def _report(self, e, c, occ, d, f, converged: bool, iterations: int) -> dict:
        return {
            "energy": self.energy(d, f),
            "coefficients": c,
            "occupations": occ,
            "orbital_energies": e,
            "density": d,
            "fock": f,
            "overlap": self.s,
            "core_hamiltonian": self.h,
            "converged": bool(converged),
            "iterations": int(iterations),
        }


def solve(problem) -> dict:
    """The plug-in function: Hartree–Fock for ``problem`` (bohr in, Eh out).

    Returns ``energy`` (total, incl. nuclear repulsion, Eh), ``coefficients``
    ((nao, nmo) RHF/ROHF, (2, nao, nmo) UHF), ``occupations`` (0/1/2, or (2, nmo) 0/1),
    ``orbital_energies`` (ROHF: of the effective Fock), ``density`` (RHF total;
    UHF/ROHF (2, nao, nao)), ``fock`` (RHF F; UHF/ROHF (Fα, Fβ)), ``overlap``,
    ``core_hamiltonian``, ``converged`` and ``iterations`` (number of Fock builds).
    """
    return LabSCF(problem).iterate()


#: Own-grid mode of the example code: pyscf's grid level 2 (coarser than the pinned
#: level 3; the harness then derives its XC tolerances from a measured grid sensitivity).
OWN_GRID_LEVEL = 2


def solve_own_grid(problem, level: int = OWN_GRID_LEVEL) -> dict:
    """:func:`solve` integrating the functional on a pyscf grid of ``level`` instead of
    ``problem.grid``; the solution says ``grid = "own"``."""
    return LabSCF(problem, grid_level=level).iterate()
