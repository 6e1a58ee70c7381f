"""J and K of the code's density, built once per case and shared by every check.

Two routes, chosen per case (:func:`coulomb_exchange`):

* **difference** — when the reference carries its density and exact J/K
  (``harness.catalogue.references.ReferenceDensity``), the method is RHF or UHF, and the
  fitted tensor fits in memory: with ΔPσ = Pσ − Pσ_ref,

      J[Pσ] = J[Pσ_ref] + J̃[ΔPσ],   K[Pσ] = K[Pσ_ref] + K̃[ΔPσ]

  where J̃, K̃ are density-fitted (``harness.backend.fitting``). Both maps are linear, so
  the fitting error is that of ΔP alone. The energy uses the form that is exact to first
  order in ΔP (``harness.checks.energy.energy_terms_from_difference``): only
  ½ Tr(ΔP J̃[ΔP]) and its exchange partner carry fitting error.
* **exact** — pyscf's integral-direct J/K of P (the fallback, and the only route for
  ROHF, for cases without a stored reference density, and whenever the bound fails).

**Rule and error bound.** ε = FITTED_RELATIVE_ERROR bounds the relative error of a fitted
J̃/K̃ of a difference density in the Frobenius norm, in the Löwdin basis for the Fock
matrix (‖X(J̃ − J)X‖_F ≤ ε ‖X J J X‖_F, X = S^(-1/2)) and in the AO basis for the energy.
Write ρ = ε/(1 − ε) (the same bound relative to the fitted matrix) and c = ½ (RHF), 1
(UHF). In the Löwdin basis the commutator is [A, P'] with P' = S^½ Pσ S^½ = n_occ Q, Q a
projector (columns of 2-norm ≤ 1), n_occ = 2 (RHF) or 1 (UHF), so an error A = XδFX of
the Fock matrix moves each element by at most 2 n_occ max_i ‖A_i‖₂ ≤ 2 n_occ ‖A‖₂:

    e_C = max_σ 2 n_occ ρ (‖X J̃[ΔP] X‖₂ + c ‖X K̃[ΔPσ] X‖₂)   (self-consistency)

and, the energy error being ½ Tr(ΔP δJ) − c/2 Σσ Tr(ΔPσ δKσ) (Cauchy–Schwarz):

    e_E = ρ (½ ‖ΔP‖_F ‖J̃[ΔP]‖_F + ½ c Σσ ‖ΔPσ‖_F ‖K̃[ΔPσ]‖_F)    (energy-consistency)

The difference route is kept only when e_C ≤ BOUND_FRACTION × the self-consistency
tolerance and e_E ≤ BOUND_FRACTION × the energy-consistency tolerance (the tightest
tolerances these J/K feed, both as in force, overrides included); else J/K are rebuilt
exactly. Both bounds are linear in ΔP (e_E quadratic), so a code converged to the
requested threshold passes the rule and a planted wrong density falls back. The
stationarity of the code's own Fock matrix does not use J/K; the energy-error-bound
(tolerance 1e-6 Eh, quadratic in the gradient g) changes by ≲ 2 e_C/|g| of its value.
Eh and bohr throughout.
"""

from __future__ import annotations

import dataclasses

import numpy as np

#: Relative error of a density-fitted J̃[D] or K̃[D] for a difference density
#: D = P_code − P_ref, taken as ~3.6× the worst measured by ``ci/fit_error.py`` (pyscf
#: 2.14, 2026-12-03; 7 cases from water to benzene, RHF and UHF, 39 differences D of
#: pyscf iterates with commutator ≤ 1e-4 and the converged density, auxiliary basis
#: harness.backend.fitting.AUXILIARY_BASIS): worst 2.8e-2 (J̃, Löwdin basis, spectral
#: norm, LiH and hydroxide), K̃ ≤ 1.1e-2; AO Frobenius norm ≤ 1.3e-2. J̃ is the worse:
#: a difference density has no smooth core part for the fit to capture. Before
#: 2026-12-03: 0.05 for pyscf's JKFIT basis, whose worst is 1.8e-2 on the same set.
FITTED_RELATIVE_ERROR = 0.1

#: The fitted route is kept only while its error bound is at most this fraction of the
#: tolerance it feeds, so that it can move no verdict by more than a tenth of its margin.
BOUND_FRACTION = 0.1


@dataclasses.dataclass(frozen=True)
class CoulombExchange:
    """J per spin component ``j`` (ns, nao, nao), K per component ``k``, how they were
    built (``route``: "exact" or "difference"), why, and for the difference route the
    reference density ``d_ref`` and J/K of it and of ΔP (for the energy) and the bounds
    ``fock_error`` (e_C) and ``energy_error`` (e_E), Eh."""

    j: np.ndarray
    k: np.ndarray
    route: str
    reason: str
    d_ref: np.ndarray | None = None
    j_ref: np.ndarray | None = None
    k_ref: np.ndarray | None = None
    j_diff: np.ndarray | None = None
    k_diff: np.ndarray | None = None
    fock_error: float = 0.0
    energy_error: float = 0.0

    @property
    def j_total(self) -> np.ndarray:
        """J of the total density, (nao, nao)."""
        return self.j.sum(axis=0)


def error_bounds(method: str, delta: np.ndarray, j_diff: np.ndarray, k_diff: np.ndarray,
                 x: np.ndarray, eps: float = FITTED_RELATIVE_ERROR) -> tuple[float, float]:
    """(e_C, e_E) of the module docstring for density differences ``delta`` (leading spin
    axis), fitted ``j_diff``/``k_diff`` per component and the Löwdin X = S^(-1/2) ``x``."""
    c = 0.5 if method == "rhf" else 1.0
    n_occ = 2.0 if method == "rhf" else 1.0
    rho = eps / (1.0 - eps)
    jd = j_diff.sum(axis=0)
    def spectral(m):  # symmetric: largest |eigenvalue|
        return float(np.abs(np.linalg.eigvalsh(x @ (0.5 * (m + m.T)) @ x)).max())

    jx = spectral(jd)
    e_c = max(2.0 * n_occ * rho * (jx + c * spectral(ks)) for ks in k_diff)
    e_e = rho * (0.5 * float(np.linalg.norm(delta.sum(axis=0))) * float(np.linalg.norm(jd))
                 + 0.5 * c * sum(float(np.linalg.norm(dl)) * float(np.linalg.norm(ks))
                                 for dl, ks in zip(delta, k_diff)))
    return e_c, e_e


def coulomb_exchange(problem, ints, d: np.ndarray, reference, x: np.ndarray, *,
                     fock_tolerance: float, energy_tolerance: float) -> CoulombExchange:
    """J and K per component of the checks' density ``d`` (leading spin axis, pyscf AO
    order), by the difference route when the rule of the module docstring allows it,
    else exactly. ``x``: the Löwdin X; tolerances: self-consistency and energy-consistency
    (Eh-based, as the checks use them)."""
    def exact(reason):
        vj, vk = ints.jk_components(d)
        return CoulombExchange(j=vj, k=vk, route="exact", reason=reason)

    rd = getattr(reference, "density", None)
    if rd is None:
        return exact("the reference carries no density")
    if problem.method not in ("rhf", "uhf"):
        return exact(f"no difference route for {problem.method.upper()}")
    if getattr(reference, "case", problem.name) != problem.name or rd.density.shape != d.shape:
        return exact("the reference density does not match the case")
    delta = d - rd.density
    fitted = ints.fitted_jk_components(delta)
    if fitted is None:
        return exact("the fitted tensor would exceed the memory cap")
    jd, kd = fitted
    e_c, e_e = error_bounds(problem.method, delta, jd, kd, x)
    if e_c > BOUND_FRACTION * fock_tolerance or e_e > BOUND_FRACTION * energy_tolerance:
        return exact(f"|ΔP| too large for the fitted difference (bounds {e_c:.1e} on the "
                     f"commutator, {e_e:.1e} Eh on the energy)")
    return CoulombExchange(j=rd.coulomb + jd, k=rd.exchange + kd, route="difference",
                           reason="J/K(P_ref) stored, fitted J/K(ΔP)", d_ref=rd.density,
                           j_ref=rd.coulomb, k_ref=rd.exchange, j_diff=jd, k_diff=kd,
                           fock_error=e_c, energy_error=e_e)
