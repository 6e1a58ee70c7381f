"""Same-density diagnosis: which term of a failing solution is wrong.

From the density P the checks used (the code's reported density, or C n Cᵀ), pyscf
rebuilds every term of the Hartree–Fock Fock matrix and energy in the same basis; our
numpy compares them with what the code reported and names the wrong term:

1. Fock fit: the code's Fσ as a least-squares combination of T, V, J and K of P;
2. energy split: E − E[P] compared with E_nuc, E_K, E_J + E_K, ...;
3. electron count: Tr(P S) compared with N/2, 2N, N ± 2;
4. orbital energies: ε compared with the Rayleigh quotients cᵀFc / cᵀSc.

A hint is given only for a check that failed and only when the evidence is sharp (the
named constants below); otherwise none — no hint is better than a wrong one.
Atomic units throughout: bohr, hartree (Eh), electrons. Pure: no I/O.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from harness.contract.solution import Solution

import dataclasses
from typing import Mapping

import numpy as np

from harness.checks import energy as _energy
from harness.checks.spin import density_by_spin, density_from_orbitals, fock_by_spin
from harness.checks.spin import orbitals_by_spin
from harness.contract.results import fixed
from harness.contract.units import ANGSTROM_IN_BOHR, BOHR_IN_ANGSTROM, HARTREE_IN_EV

# --------------------------------------------------------------------------- constants

#: A Fock fit is confident only if ‖F − Σ c_k R_k‖ / ‖F‖ (upper triangle) is at most this:
#: a Fock matrix built from the same density with other integral code reproduces ours to
#: ~1e-10 relative; anything above 1e-6 means F is not a fixed combination of the terms
#: of this density (e.g. the Fock of another iterate), and then no coefficient is trusted.
FIT_RESIDUAL = 1e-6
#: A fitted coefficient matches a signature when it is within this of the signature's
#: value; the buggy factors named here (0, ½, 2, −1, ...) are ≥ 0.25 apart.
COEFFICIENT_MATCH = 1e-3
#: Largest propagated uncertainty ‖r‖·‖row k of A⁺‖ of a coefficient in a confident fit:
#: a tenth of COEFFICIENT_MATCH, so noise cannot move a coefficient onto a signature.
COEFFICIENT_UNCERTAINTY = 1e-4
#: Condition number of the column-normalised regressor matrix above which the terms are
#: not separable (collinear); double precision leaves ~1e-16·cond in the coefficients.
MAX_CONDITION = 1e6
#: A fit needs at least this many upper-triangle elements per regressor (fewer: an
#: almost exactly determined system fits anything, e.g. H₂ in a minimal basis).
EQUATIONS_PER_TERM = 3
#: Columns with a norm below this fraction of the largest are empty (e.g. J(Pβ) with no
#: beta electrons) and their coefficient is undetermined.
EMPTY_COLUMN = 1e-12

#: |E − E[P] − signature| (Eh) for an energy signature to match: both sides are computed
#: from the same density, so only integral accuracy (~1e-10 Eh) and the code's rounding
#: enter; 1e-6 Eh is the precision of published SCF energies.
ENERGY_MATCH = 1e-6
#: A matched energy signature is used only when every other candidate is at least this
#: far (Eh) from E − E[P]: e.g. for two electrons E_J + E_K = −E_K exactly, and then
#: neither "two-electron energy double counted" nor "exchange energy missing" is said.
ENERGY_SEPARATION = 1e-4
#: The "energy of another iterate" guess is offered only for |E − E[P]| below this (Eh):
#: successive SCF iterates differ by up to millihartrees, larger gaps are something else.
ITERATE_ENERGY = 1e-2

#: |Tr(P S) − signature| (electrons) for a count signature to match: exact up to rounding.
COUNT_MATCH = 1e-6

#: max|ε − ε_signature| (Eh) over the orbitals compared for an orbital-energy signature:
#: the Rayleigh quotient of converged orbitals agrees with ε to second order in the
#: gradient, far below 1e-5 Eh for any code that passes stationarity.
ORBITAL_MATCH = 1e-5
#: Smallest constant virtual-orbital shift (Eh) named a level shift: ten times the match.
MIN_SHIFT = 10 * ORBITAL_MATCH
#: A constant shift is recognised only on at least this many virtual orbitals of a spin
#: (a single virtual orbital's error is always "constant").
MIN_SHIFTED_VIRTUALS = 2


#: The name of the UHF/ROHF Fock-fit signature Fσ = … − K(Pα + Pβ) (or −½K(Pα + Pβ)).
TOTAL_DENSITY_EXCHANGE = "exchange built from the total density instead of each spin's density"

#: Stale density (density-consistency): the reported orbitals count as eigenvectors of
#: F[P_reported] when max|X(F[P] Pc S − S Pc F[P])X| (Pc = C n Cᵀ, Eh) is at most this.
#: Orbitals obtained by diagonalising F[P] give ~1e-13; a code that diagonalised some
#: other matrix (a DIIS extrapolation, a damped Fock) leaves ≥ 1e-6 at any density that
#: fails density-consistency (1e-5), so 1e-8 separates the two with room on both sides.
STALE_ORBITALS_STATIONARY = 1e-8

#: Coordinates read as ångström (basis): the code's overlap counts as that of the
#: molecule scaled by 1/0.529177 when max|S_code − S(R × 1.8897)| is at most this.
#: Overlaps of one molecule agree to ~1e-14 between programs (common practice); an older
#: CODATA bohr (relative change ~1e-9) moves S by ~1e-9; any other geometry or basis
#: misses by ≥ 1e-3.
GEOMETRY_OVERLAP_MATCH = 1e-6

#: Screening (self-consistency): a screened rebuild F_τ[P] (two-electron integrals below
#: τ left out by one of SCREENING_SCHEMES) explains the code's Fock when
#: max|F − F_τ[P]| ≤ SCREENING_EXPLAINED × max|F − F[P]|: the same τ and scheme
#: reproduce F to rounding (~1e-14 relative), a neighbouring τ of the grid still leaves
#: ≥ 10 % of the difference, and the Fock of another iterate is not reproduced by any τ.
SCREENING_EXPLAINED = 1e-2
#: Thresholds τ (Eh) tried: 1, 2 and 5 × 10^k for k = −10 … −1 (the values codes use).
SCREENING_THRESHOLDS = tuple(m * 10.0 ** k for k in range(-10, 0) for m in (1, 2, 5))
#: Largest basis for the screening test: it holds the full (μν|λσ) array (nao⁴ doubles,
#: 20 MB at 40 AO) and rebuilds J and K once per (scheme, τ).
SCREENING_MAX_NAO = 40
#: How integrals are screened: each (μν|λσ) by its magnitude; by its Schwarz bound
#: √((μν|μν)(λσ|λσ)) per AO pair; by that bound's largest value over shell pairs.
SCREENING_SCHEMES = ("magnitude", "Schwarz bound per AO pair", "Schwarz bound per shell pair")


# --------------------------------------------------------------------------- results


@dataclasses.dataclass(frozen=True)
class Diagnosis:
    """Hints for failing checks (check name → one line) and the numbers behind them.

    ``analysis`` is JSON-serialisable: ``fock_fit``, ``energy``, ``electron_count``,
    ``orbital_energies`` (each present when computed). Energies in Eh.
    """

    hints: dict
    analysis: dict


@dataclasses.dataclass(frozen=True)
class FockFit:
    """Least-squares fit F ≈ Σ_k c_k R_k over the upper triangle of one Fock matrix.

    ``coefficients`` are NaN for empty regressors; ``residual`` is relative to ‖F‖;
    ``condition`` is that of the column-normalised regressor matrix; ``uncertainty`` the
    propagated coefficient uncertainty ‖r‖·‖row k of A⁺‖. ``separable`` is False when the
    regressors are collinear or too few elements are available (coefficients then NaN).
    """

    names: tuple
    coefficients: tuple
    residual: float
    condition: float
    uncertainty: tuple
    separable: bool

    @property
    def confident(self) -> bool:
        """Residual ≤ FIT_RESIDUAL and every determined coefficient's uncertainty small."""
        unc = [u for u in self.uncertainty if np.isfinite(u)]
        return bool(self.separable and self.residual <= FIT_RESIDUAL
                    and all(u <= COEFFICIENT_UNCERTAINTY for u in unc) and unc)

    def to_json(self) -> dict:
        return {"terms": list(self.names), "coefficients": [_num(c) for c in self.coefficients],
                "residual": _num(self.residual), "condition": _num(self.condition),
                "uncertainty": [_num(u) for u in self.uncertainty],
                "separable": self.separable, "confident": self.confident}


def _num(x):
    x = float(x)
    return x if np.isfinite(x) else None


# --------------------------------------------------------------------------- Fock fit


def fock_fit(f: np.ndarray, regressors: Mapping[str, np.ndarray]) -> FockFit:
    """Least squares F ≈ Σ_k c_k R_k over the upper-triangle elements (i ≤ j).

    min_c ‖a − A c‖ with a = F_ij, A_ik = (R_k)_ij; solved on unit-norm columns by SVD.
    residual = ‖a − A c‖ / ‖a‖; condition = σ_max/σ_min of the normalised A; uncertainty
    of c_k = ‖a − A c‖ · ‖(A⁺)_k‖. Empty columns (norm < EMPTY_COLUMN × the largest) get
    NaN. Not separable (all NaN) when condition > MAX_CONDITION or fewer than
    EQUATIONS_PER_TERM elements per regressor. Units: those of F (Eh).
    """
    names = tuple(regressors)
    iu = np.triu_indices(f.shape[-1])
    a = np.asarray(f)[iu]
    cols = np.stack([np.asarray(regressors[n])[iu] for n in names], axis=1)
    norms = np.linalg.norm(cols, axis=0)
    live = norms > EMPTY_COLUMN * norms.max()
    nan = tuple(float("nan") for _ in names)
    scale = float(np.linalg.norm(a)) or 1.0
    if a.size < EQUATIONS_PER_TERM * int(live.sum()):
        return FockFit(names, nan, float("nan"), float("inf"), nan, False)
    an = cols[:, live] / norms[live]
    u, sv, vt = np.linalg.svd(an, full_matrices=False)
    condition = float(sv[0] / sv[-1]) if sv[-1] > 0 else float("inf")
    if condition > MAX_CONDITION:
        return FockFit(names, nan, float("nan"), condition, nan, False)
    pinv = (vt.T / sv) @ u.T  # (k, m)
    cn = pinv @ a
    r = float(np.linalg.norm(a - an @ cn))
    c = np.full(len(names), np.nan)
    unc = np.full(len(names), np.nan)
    c[live] = cn / norms[live]
    unc[live] = r * np.linalg.norm(pinv, axis=1) / norms[live]
    return FockFit(names, tuple(map(float, c)), r / scale, condition, tuple(map(float, unc)),
                   True)


def fock_terms(method: str, t, v, j, k, merged: bool) -> list[tuple[str, dict, dict]]:
    """Per spin: (label, regressors, expected coefficients) for :func:`fock_fit`.

    j, k: J(Pσ), K(Pσ) per density component ((1, …) RHF with P total; (2, …) UHF/ROHF).
    RHF F = T + V + J(P) − ½K(P). UHF/ROHF Fα = T + V + J(Pα) + J(Pβ) − K(Pα) (β alike).
    ``merged`` (Pα ≈ Pβ): regressors T, V, J(P) = J(Pα) + J(Pβ), K(Pσ); Fσ = T+V+J(P)−K(Pσ).
    """
    if method == "rhf":
        return [("Fock", {"T": t, "V": v, "J": j[0], "K": k[0]},
                 {"T": 1.0, "V": 1.0, "J": 1.0, "K": -0.5})]
    if merged:
        terms = {"T": t, "V": v, "J(P)": j[0] + j[1], "K(Pσ)": 0.5 * (k[0] + k[1])}
        expected = {"T": 1.0, "V": 1.0, "J(P)": 1.0, "K(Pσ)": -1.0}
        return [("Fα", terms, expected), ("Fβ", terms, expected)]
    terms = {"T": t, "V": v, "J(Pα)": j[0], "J(Pβ)": j[1], "K(Pα)": k[0], "K(Pβ)": k[1]}
    return [("Fα", terms, {"T": 1.0, "V": 1.0, "J(Pα)": 1.0, "J(Pβ)": 1.0,
                           "K(Pα)": -1.0, "K(Pβ)": 0.0}),
            ("Fβ", terms, {"T": 1.0, "V": 1.0, "J(Pα)": 1.0, "J(Pβ)": 1.0,
                           "K(Pα)": 0.0, "K(Pβ)": -1.0})]


def fit_fock(method: str, f, t, v, j, k) -> list[tuple[str, FockFit, dict]]:
    """Per-spin fits (label, fit, expected) of the code's F (leading spin axis, Eh).

    UHF/ROHF: when the six separate terms do not give a confident fit for every spin —
    typically a closed-shell-like density, Pα ≈ Pβ, where J(Pα) ≈ J(Pβ) and K(Pα) ≈ K(Pβ)
    are collinear — the merged terms T, V, J(P), K(Pσ) = ½(K(Pα) + K(Pβ)) are fitted and
    used if they fit confidently (they describe F within the stated residual).
    """
    def run(merged):
        return [(label, fock_fit(fs, terms), exp)
                for (label, terms, exp), fs in zip(fock_terms(method, t, v, j, k, merged), f)]

    fits = run(False)
    if method != "rhf" and not all(fit.confident for _, fit, _ in fits):
        merged = run(True)
        if all(fit.confident for _, fit, _ in merged):
            return merged
    return fits


def fock_signatures(label: str, expected: Mapping[str, float]) -> dict[str, list[dict]]:
    """Named bugs as coefficient vectors (each name may have several variants).

    RHF: "exchange scaled by 2" K = −1; "no exchange" K = 0; "core Hamiltonian missing
    kinetic energy" T = 0; "missing nuclear attraction" V = 0. UHF (own spin σ, other σ'):
    "exchange scaled by 2" K(Pσ) = −2; "no exchange" K(Pσ) = 0; "Coulomb from one spin
    only" J(Pσ') = 0 or J(Pσ) = 0; "exchange built from the total density instead of each
    spin's density" (TOTAL_DENSITY_EXCHANGE) K(Pσ') = −1 (K(Pα + Pβ)) or K(Pσ) = K(Pσ')
    = −½ (½K(Pα + Pβ), the RHF formula applied to each spin).
    Merged UHF: K(Pσ) = −2 is "exchange scaled by 2 or built from the total density",
    J(P) = ½ "Coulomb from one spin only".
    """
    def variant(**changes):
        out = dict(expected)
        out.update({key.replace("_", " "): value for key, value in changes.items()})
        return out

    sig = {"core Hamiltonian missing kinetic energy": [variant(T=0.0)],
           "missing nuclear attraction": [variant(V=0.0)]}
    if "K" in expected:
        sig["exchange scaled by 2"] = [variant(K=-1.0)]
        sig["no exchange"] = [variant(K=0.0)]
        return sig
    if "K(Pσ)" in expected:
        sig["exchange scaled by 2 or built from the total density (Pα ≈ Pβ: not separable)"] = [
            {**expected, "K(Pσ)": -2.0}]
        sig["no exchange"] = [{**expected, "K(Pσ)": 0.0}]
        sig["Coulomb from one spin only (Pα ≈ Pβ: not separable)"] = [{**expected, "J(P)": 0.5}]
        return sig
    own, other = ("α", "β") if label == "Fα" else ("β", "α")
    sig["exchange scaled by 2"] = [{**expected, f"K(P{own})": -2.0}]
    sig["no exchange"] = [{**expected, f"K(P{own})": 0.0}]
    sig["Coulomb from one spin only"] = [{**expected, f"J(P{other})": 0.0},
                                         {**expected, f"J(P{own})": 0.0}]
    sig[TOTAL_DENSITY_EXCHANGE] = [{**expected, f"K(P{other})": -1.0},
                                   {**expected, f"K(P{own})": -0.5, f"K(P{other})": -0.5}]
    return sig


def matches(fit: FockFit, target: Mapping[str, float]) -> bool:
    """Every determined coefficient within COEFFICIENT_MATCH of ``target``."""
    c = dict(zip(fit.names, fit.coefficients))
    known = [n for n in fit.names if np.isfinite(c[n])]
    return bool(known) and all(abs(c[n] - target[n]) <= COEFFICIENT_MATCH for n in known)


def fock_signature(fit: FockFit, label: str, expected: Mapping[str, float]) -> str | None:
    """The one named signature this confident fit matches (None: none, several, or the
    named one differs from the expected only in undetermined coefficients)."""
    if not fit.confident or matches(fit, expected):
        return None
    found = [name for name, variants in fock_signatures(label, expected).items()
             if any(matches(fit, v) for v in variants)]
    return found[0] if len(found) == 1 else None


def describe_fit(fit: FockFit, label: str, expected: Mapping[str, float]) -> str:
    """E.g. "Fock ≈ 1.00 T + 1.00 V + 1.00 J − 1.00 K (expected −0.50 K), residual 3e-12"."""
    parts = []
    for name, c in zip(fit.names, fit.coefficients):
        if not np.isfinite(c):
            continue
        sign = "−" if c < 0 and round(abs(c), 2) > 0 else "+"
        parts.append((sign, f"{fixed(abs(c), 2)} {name}"))
    text = (parts[0][0] if parts[0][0] == "−" else "") + parts[0][1]
    text += "".join(f" {s} {p}" for s, p in parts[1:])
    off = [f"{'−' if expected[n] < 0 else ''}{fixed(abs(expected[n]), 2)} {n}"
           for n, c in zip(fit.names, fit.coefficients)
           if np.isfinite(c) and abs(c - expected[n]) > COEFFICIENT_MATCH]
    exp = f" (expected {', '.join(off)})" if off else ""
    return f"{label} ≈ {text}{exp}, residual {fit.residual:.0e}"


def fock_hint(fits: list[tuple[str, FockFit, dict]]) -> str | None:
    """One line from the per-spin fits: a named signature when every spin is confident and
    the named spins agree, else the fitted form when some coefficient deviates; None when
    a spin is not confident or everything is as expected."""
    if not fits or not all(fit.confident for _, fit, _ in fits):
        return None
    deviating = [(label, fit, exp) for label, fit, exp in fits if not matches(fit, exp)]
    if not deviating:
        return None
    names = {fock_signature(fit, label, exp) for label, fit, exp in deviating}
    forms = "; ".join(describe_fit(fit, label, exp) for label, fit, exp in deviating)
    if len(names) == 1 and None not in names:
        return f"{names.pop()}: {forms}"
    return forms


# --------------------------------------------------------------------------- energy


def nuclear_repulsion(charges: np.ndarray, coordinates: np.ndarray) -> float:
    """E_nuc = Σ_{A<B} Z_A Z_B / |R_A − R_B| (coordinates in bohr, Eh)."""
    z = np.asarray(charges, dtype=float)
    r = np.asarray(coordinates, dtype=float)
    dist = np.linalg.norm(r[:, None] - r[None], axis=-1)
    iu = np.triu_indices(len(z), 1)
    return float(np.sum(z[iu[0]] * z[iu[1]] / dist[iu]))


def energy_candidates(terms: _energy.EnergyTerms, e_kinetic: float, e_attraction: float,
                      e_nuc_angstrom: float) -> dict[str, float]:
    """What E − E[P] would be for each named energy bug (Eh).

    nuclear repulsion missing −E_nuc; counted twice +E_nuc; coordinates read as ångström
    E_nuc(R × 1.8897…) − E_nuc; two-electron energy double counted (E = Tr(PF) + E_nuc)
    E_J + E_K; exchange energy doubled E_K; exchange energy missing −E_K; kinetic energy
    missing −Tr(PT); nuclear-attraction energy missing −Tr(PV).
    """
    return {
        "nuclear repulsion missing": -terms.nuclear,
        "nuclear repulsion counted twice": terms.nuclear,
        "coordinates read as ångström": e_nuc_angstrom - terms.nuclear,
        "two-electron energy double counted (E = Tr(PF) + E_nuc: missing ½)":
            terms.coulomb + terms.exchange,
        "exchange energy doubled": terms.exchange,
        "exchange energy missing": -terms.exchange,
        "kinetic energy missing": -e_kinetic,
        "nuclear-attraction energy missing": -e_attraction,
    }


#: Energy signatures and the Fock-fit signature that the same bug leaves in the Fock matrix.
FOCK_FOR_ENERGY = {"exchange energy doubled": "exchange scaled by 2",
                   "exchange energy missing": "no exchange",
                   "kinetic energy missing": "core Hamiltonian missing kinetic energy",
                   "nuclear-attraction energy missing": "missing nuclear attraction"}


def unique_match(value: float, candidates: Mapping[str, float], match: float,
                 separation: float) -> str | None:
    """The candidate within ``match`` of ``value`` when every other is beyond ``separation``."""
    close = [n for n, x in candidates.items() if abs(value - x) <= match]
    if len(close) != 1:
        return None
    others = [abs(value - x) for n, x in candidates.items() if n != close[0]]
    return close[0] if all(o > separation for o in others) else None


def energy_hint(name: str, diff: float, candidates: Mapping[str, float],
                terms: _energy.EnergyTerms, e_nuc_angstrom: float) -> str:
    """One line with the evidence for a matched energy signature (Eh)."""
    head = f"{name}: E − E[P] = {fixed(diff, 6, sign=True)} Eh"
    if name == "coordinates read as ångström":
        return (f"{name}: E − E_elec[P] = {fixed(diff + terms.nuclear, 6)} Eh = E_nuc at the "
                f"coordinates × {ANGSTROM_IN_BOHR:.4f} ({fixed(e_nuc_angstrom, 6)} Eh; "
                f"expected E_nuc = {fixed(terms.nuclear, 6)} Eh)")
    what = {"nuclear repulsion missing": f"−E_nuc ({fixed(terms.nuclear, 6)} Eh)",
            "nuclear repulsion counted twice": f"+E_nuc ({fixed(terms.nuclear, 6)} Eh)",
            "exchange energy doubled": f"E_K ({fixed(terms.exchange, 6)} Eh)",
            "exchange energy missing": f"−E_K (E_K = {fixed(terms.exchange, 6)} Eh)",
            "kinetic energy missing": f"−Tr(PT) ({fixed(-candidates[name], 6)} Eh)",
            "nuclear-attraction energy missing": f"−Tr(PV) ({fixed(-candidates[name], 6)} Eh)"}
    if name.startswith("two-electron"):
        return (f"{name}: E − E[P] = {fixed(diff, 6, sign=True)} Eh = E_J + E_K "
                f"({fixed(terms.coulomb, 6)} + {fixed(terms.exchange, 6)} Eh)")
    return f"{head} = {what[name]}"


# --------------------------------------------------------------------------- counts


def count_signature(method: str, counts, expected) -> str | None:
    """Name a wrong electron count Tr(PσS) (electrons).

    RHF (total P): N/2 "alpha density reported as total?", 2N "density doubled?",
    N + 2 / N − 2 "one doubly occupied orbital too many / too few". UHF/ROHF: one spin
    off by exactly one electron, the other right: "one orbital too many / too few".
    Unique within COUNT_MATCH, else None.
    """
    counts = [float(x) for x in counts]
    if method == "rhf":
        n, total = expected[0], counts[0]
        cand = {f"the density integrates to N/2 = {n / 2:g}: alpha density reported as "
                f"total?": n / 2,
                f"the density integrates to 2N = {2 * n:g}: density doubled (occupation 2 "
                f"applied twice?)": 2 * n,
                f"the density integrates to N + 2 = {n + 2:g}: one doubly occupied orbital "
                f"too many in the density (off by one in the occupied orbitals?)": n + 2,
                f"the density integrates to N − 2 = {n - 2:g}: one doubly occupied orbital "
                f"too few in the density (off by one in the occupied orbitals?)": n - 2}
        name = unique_match(total, cand, COUNT_MATCH, 0.5)
        return f"{name} (Tr(PS) = {fixed(total, 6)})" if name else None
    off = [k for k in range(len(counts)) if abs(counts[k] - expected[k]) > COUNT_MATCH]
    if len(off) != 1:
        return None
    k = off[0]
    spin = ("alpha", "beta")[k]
    delta = counts[k] - expected[k]
    if abs(abs(delta) - 1.0) > COUNT_MATCH:
        return None
    word = "many" if delta > 0 else "few"
    return (f"the {spin} density integrates to N{'αβ'[k]} {'+' if delta > 0 else '−'} 1 = "
            f"{fixed(counts[k], 6)}: one {spin} orbital too {word} in the density "
            f"(off by one in the occupied orbitals?)")


# --------------------------------------------------------------------------- orbitals


def rayleigh_quotients(f: np.ndarray, c: np.ndarray, s: np.ndarray) -> np.ndarray:
    """r_i = c_iᵀ F c_i / c_iᵀ S c_i per spin ((ns, nmo), Eh)."""
    num = np.einsum("spi,spq,sqi->si", c, f, c)
    den = np.einsum("spi,pq,sqi->si", c, s, c)
    return num / den


def orbital_signature(eps: np.ndarray, r: np.ndarray, occ: np.ndarray) -> str | None:
    """Name a systematic orbital-energy error (eps, r, occ all (ns, nmo), Eh).

    "orbital energies in eV": max|ε/27.2114 − r| ≤ ORBITAL_MATCH. "level shift left in the
    virtual orbital energies": occupied max|ε − r| ≤ ORBITAL_MATCH and, on each spin with
    ≥ MIN_SHIFTED_VIRTUALS virtuals, ε − r constant within ORBITAL_MATCH and the same
    shift on every spin, |shift| ≥ MIN_SHIFT.
    """
    dev = np.abs(eps - r).max()
    if dev <= ORBITAL_MATCH:
        return None
    ev = np.abs(eps / HARTREE_IN_EV - r).max()
    if ev <= ORBITAL_MATCH:
        return (f"orbital energies in eV: ε / r = {HARTREE_IN_EV:.4f} (eV per Eh) with "
                f"r = cᵀFc, max|ε/{HARTREE_IN_EV:.4f} − r| = {ev:.0e} Eh")
    filled = occ > 0
    if np.abs(eps - r)[filled].max() > ORBITAL_MATCH:
        return None
    shifts = []
    for es, rs, fs in zip(eps, r, filled):
        delta = (es - rs)[~fs]
        if delta.size < MIN_SHIFTED_VIRTUALS:
            continue
        if delta.max() - delta.min() > ORBITAL_MATCH:
            return None
        shifts.append(float(delta.mean()))
    if not shifts or max(shifts) - min(shifts) > ORBITAL_MATCH or abs(shifts[0]) < MIN_SHIFT:
        return None
    return (f"level shift of {fixed(shifts[0], 2)} Eh left in the virtual orbital energies: "
            f"ε − cᵀFc = {fixed(shifts[0], 6, sign=True)} Eh on every virtual orbital, "
            f"occupied agree to {np.abs(eps - r)[filled].max():.0e} Eh")


# --------------------------------------------------------------------------- stale density


def stale_density_hint(method: str, d: np.ndarray, built: np.ndarray, rebuilt: np.ndarray,
                       s: np.ndarray, results) -> tuple[str | None, dict]:
    """(hint, numbers) for a reported density that is not C n Cᵀ of the reported orbitals.

    Given only when density-consistency failed while idempotency and electron-count
    passed (P is a density of the right size) and, RHF/UHF, the orbitals' density
    Pc = C n Cᵀ commutes with F[P] of the *reported* P: max|X(F[P] Pc S − S Pc F[P])X|
    ≤ STALE_ORBITALS_STATIONARY — the orbitals came from diagonalising F[P], so P is the
    density they were computed from, not the one rebuilt from them. ROHF: none (its
    orbitals diagonalise an effective Fock that depends on the orbitals themselves).
    d, built, rebuilt: (ns, nao, nao); Eh.
    """
    if method == "rohf" or not (_failed(results, "density-consistency")
                                and _passed(results, "idempotency")
                                and _passed(results, "electron-count")):
        return None, {}
    from harness.checks import orthonormal as _orth
    from harness.checks import stationarity as _stat

    low = _orth.lowdin(s)
    orbitals = _stat.commutator(rebuilt, built, s, low).value
    own = _stat.commutator(rebuilt, d, s, low).value
    diff = float(np.abs(d - built).max())
    numbers = {"max|P - CnC^T|": diff, "orbitals vs F[P]": orbitals, "P vs F[P]": own}
    if not orbitals <= STALE_ORBITALS_STATIONARY:
        return None, numbers
    return (f"density not rebuilt from the final orbitals: the reported P is a density "
            f"(PSP = P, Tr(PS) = N) but differs from C n Cᵀ of the reported orbitals by "
            f"{diff:.1e}, and those orbitals diagonalise F[P] (max|X(F[P] CnCᵀ S − S CnCᵀ "
            f"F[P])X| = {orbitals:.0e} Eh): P is the density they were computed from — "
            f"rebuild P from the final orbitals (stale density of an earlier iterate?)"), numbers


# --------------------------------------------------------------------------- geometry


def geometry_hint(problem, s_code) -> tuple[str | None, dict]:
    """(hint, numbers) when the code's overlap is that of the molecule with its bohr
    coordinates read as ångström, R × 1/0.529177 (ANGSTROM_IN_BOHR):
    max|S_code − S(R × ANGSTROM_IN_BOHR)| ≤ GEOMETRY_OVERLAP_MATCH (S_code in pyscf's AO
    order, same size). The overlap is built by ``harness.backend.integrals``."""
    from harness.backend.integrals import overlap

    s_code = np.asarray(s_code, dtype=float)
    stretched = problem.replace(coordinates=np.asarray(problem.coordinates) * ANGSTROM_IN_BOHR)
    s_scaled = overlap(stretched.to_pyscf())
    if s_scaled.shape != s_code.shape:
        return None, {}
    gap = float(np.abs(s_code - s_scaled).max())
    numbers = {"max|S - S(R x 1/0.529177)|": gap}
    if not gap <= GEOMETRY_OVERLAP_MATCH:
        return None, numbers
    return (f"coordinates read as ångström: the code's overlap is that of the molecule with "
            f"its bohr coordinates read as ångström (max|S − S(R × {ANGSTROM_IN_BOHR:.4f})| = "
            f"{gap:.0e}): convert bohr ↔ ångström (1 bohr = {BOHR_IN_ANGSTROM:.6f} Å)"), numbers


def geometry_hints(problem, sol, results) -> tuple[dict[str, str], dict]:
    """({check: hint}, numbers): the :func:`geometry_hint` on the failed basis and overlap
    checks of ``results`` (name → CheckResult) when the basis check failed and the code
    reported an overlap; the numbers of the comparison whenever it was made."""
    if not _failed(results, "basis") or not isinstance(sol.overlap, np.ndarray):
        return {}, {}
    hint, numbers = geometry_hint(problem, sol.overlap)
    hints = {n: hint for n in ("basis", "overlap") if hint and _failed(results, n)}
    return hints, numbers


# --------------------------------------------------------------------------- screening


def screening_masks(eri: np.ndarray, ao_loc, threshold: float):
    """Kept-integral masks of :data:`SCREENING_SCHEMES` at ``threshold`` (Eh), in order:
    |(μν|λσ)| ≥ τ; q_μν q_λσ ≥ τ with q_μν = √|(μν|μν)|; Q_IJ Q_KL ≥ τ with Q_IJ the
    largest q_μν over μ in shell I, ν in shell J (``ao_loc``: first AO of each shell)."""
    n = eri.shape[0]
    q = np.sqrt(np.abs(np.einsum("ijij->ij", eri)))
    yield np.abs(eri) >= threshold
    yield (np.multiply.outer(q, q) >= threshold)
    shell = np.repeat(np.arange(len(ao_loc) - 1), np.diff(ao_loc))
    qs = np.zeros((len(ao_loc) - 1,) * 2)
    np.maximum.at(qs, (shell[:, None].repeat(n, 1), shell[None, :].repeat(n, 0)), q)
    qa = qs[shell][:, shell]
    yield np.multiply.outer(qa, qa) >= threshold


def screened_fock(eri: np.ndarray, keep: np.ndarray, h: np.ndarray, d: np.ndarray):
    """F_τ[P] from the kept integrals: RHF H + J − ½K, UHF Hσ + J − K(Pσ), (ns, nao, nao).

    J_μν = Σ (μν|λσ) P_λσ, K_μν = Σ (μλ|νσ) P_λσ over the kept (μν|λσ) only."""
    g = np.where(keep, eri, 0.0)
    n = h.shape[0]
    j = (g.reshape(n * n, n * n) @ d.sum(axis=0).reshape(n * n)).reshape(n, n)
    k = np.einsum("ikjl,skl->sij", g, d)
    if len(d) == 1:
        return (h + j - 0.5 * k[0])[None]
    return np.stack([h + j - k[0], h + j - k[1]])


def screened_energy(d: np.ndarray, h: np.ndarray, f: np.ndarray, e_nuc: float) -> float:
    """E = ½ Σσ Tr[Pσ (H + Fσ)] + E_nuc (RHF: one component, the total P), Eh."""
    return float(0.5 * sum(np.einsum("pq,qp->", ds, h + fs) for ds, fs in zip(d, f))) + e_nuc


def screening_hint(method: str, f_code: np.ndarray, rebuilt: np.ndarray, d: np.ndarray,
                   ints, results) -> tuple[str | None, dict, np.ndarray | None]:
    """(hint, numbers, F_τ[P]) when the code's Fock is F[P] built with screening too loose.

    Tried only when self-consistency failed but stationarity passed (the code's F is
    stationary for its own P: converged, but on another Fock) and nao ≤ SCREENING_MAX_NAO.
    For each scheme of SCREENING_SCHEMES and τ of SCREENING_THRESHOLDS, F_τ[P] is
    rebuilt; the hint names the (scheme, τ) with the smallest max|F − F_τ[P]| when that is
    ≤ SCREENING_EXPLAINED × max|F − F[P]|. RHF/UHF/ROHF (Fα, Fβ); Eh.
    """
    nao = rebuilt.shape[-1]
    if not (_failed(results, "self-consistency") and _passed(results, "stationarity")) \
            or nao > SCREENING_MAX_NAO:
        return None, {}, None
    from harness.backend.integrals import shell_structure

    eri = ints.eri()
    ao_loc = shell_structure(ints.mol).ao_loc
    exact = float(np.abs(f_code - rebuilt).max())
    best = (np.inf, None, None)
    # from the loosest τ down; masks grow as τ falls, so an equal kept count is the same mask
    # (the largest τ giving a mask is the one named)
    seen: dict[str, int] = {}
    for tau in sorted(SCREENING_THRESHOLDS, reverse=True):
        for scheme, keep in zip(SCREENING_SCHEMES, screening_masks(eri, ao_loc, tau)):
            kept = int(keep.sum())
            if kept == keep.size or seen.get(scheme) == kept:
                continue
            seen[scheme] = kept
            gap = float(np.abs(f_code - screened_fock(eri, keep, ints.h, d)).max())
            if gap < best[0]:
                best = (gap, scheme, tau)
    gap, scheme, tau = best
    numbers = {"max|F - F[P]|": exact, "max|F - F_tau[P]|": None if scheme is None else gap,
               "scheme": scheme, "tau": tau}
    if scheme is None or not gap <= SCREENING_EXPLAINED * exact:
        return None, numbers, None
    what = {"magnitude": "magnitude |(μν|λσ)|",
            "Schwarz bound per AO pair": "Schwarz bound √((μν|μν)(λσ|λσ))",
            "Schwarz bound per shell pair": "shell-pair Schwarz bound"}[scheme]
    return (f"integral screening too loose: the code's Fock differs from F[P] by up to "
            f"{exact:.1e} Eh, and F[P] built without the two-electron integrals whose "
            f"{what} < {tau:.0e} Eh reproduces it to {gap:.0e} Eh: tighten the screening "
            f"threshold (typically 1e-10 or below)"), numbers, \
        screened_fock(eri, list(screening_masks(eri, ao_loc, tau))[
            SCREENING_SCHEMES.index(scheme)], ints.h, d)


# --------------------------------------------------------------------------- diagnose


def density_for_checks(method: str, sol: Solution) -> np.ndarray:
    """The density the checks use, with a leading spin axis: the reported one, else C n Cᵀ
    (RHF (1, nao, nao) total; UHF/ROHF (2, nao, nao) alpha, beta)."""
    if sol.density is not None:
        return density_by_spin(method, sol.density)
    return density_from_orbitals(*orbitals_by_spin(method, sol.coefficients,
                                                   sol.occupations))


def _failed(results: Mapping, name: str) -> bool:
    r = results.get(name)
    return r is not None and r.passed is False


def _passed(results: Mapping, name: str) -> bool:
    r = results.get(name)
    return r is not None and r.passed is True


def diagnose(problem, sol: Solution, ints, d: np.ndarray, results, *, reference=None,
             jk=None, xc=None) -> Diagnosis:
    """Hints for the failing checks of one solution, from the same density ``d``.

    ``sol`` is the extracted solution (pyscf AO order), ``ints`` the AOIntegrals,
    ``d`` the checks' density ((1, nao, nao) RHF total; (2, …) UHF/ROHF), ``results``
    check name → CheckResult (a sequence of CheckResults is accepted). Only the count is
    diagnosed unless electron-count passed (the terms of a density of the wrong size
    would explain nothing). ``reference``: the
    reference (an object with ``.energy``) or E_ref in Eh, used to carry an energy hint to
    reference-energy when E[P] itself agrees with E_ref. ``jk``: (J, K) of ``d`` as evaluate
    computed them, to save a J/K build: J per component (ns, nao, nao) — then nothing is
    rebuilt — or J of the total density (nao, nao) with K per component.
    Kohn–Sham problems: the rebuilt Fock and E[P] are the KS ones (``harness.verdict.xc``;
    ``xc``: the pinned XCPieces of ``d`` as evaluate computed them), and the Fock fit and
    the energy signatures are those of ``harness.verdict.xc_diagnosis``.
    Bohr and Eh throughout. Pure: no I/O.
    """
    if not isinstance(results, Mapping):
        results = {r.name: r for r in results}
    hints: dict[str, str] = {}
    analysis: dict = {}
    failing = {n for n, r in results.items() if r.passed is False}
    if not failing or "well-formed" in failing:
        return Diagnosis(hints, analysis)

    method = problem.shape_method  # rks/uks/roks share rhf/uhf/rohf's array shapes
    d = np.asarray(d, dtype=float)
    s = ints.s
    geometry, numbers = geometry_hints(problem, sol, results)
    hints.update(geometry)
    if numbers:
        analysis["geometry"] = numbers
    t = ints.kinetic()
    v = ints.h - t  # H = T + V

    # electron count first: the other diagnoses assume P is the code's density
    counts = np.einsum("spq,qp->s", d, s)
    expected = (problem.n_electrons,) if method == "rhf" else (problem.n_alpha, problem.n_beta)
    analysis["electron_count"] = {"traces": [float(x) for x in counts],
                                  "expected": [int(x) for x in expected]}
    if _failed(results, "electron-count"):
        hint = count_signature(method, counts, expected)
        if hint:
            hints["electron-count"] = hint
    if not _passed(results, "electron-count"):
        return Diagnosis(hints, analysis)  # the terms of a density of the wrong size say nothing

    # J and K per density component
    if jk is not None and np.ndim(jk[0]) == 3:  # J per component given: nothing to build
        j, vk = np.asarray(jk[0]), np.asarray(jk[1])
        vj_total = j.sum(axis=0)
    elif jk is not None and (len(d) == 1):
        vj_total, vk = np.asarray(jk[0]), np.asarray(jk[1])
        j = vj_total[None]
    else:
        if jk is not None:  # UHF/ROHF: K known, J per spin needs J(Pα) only
            vj_total, vk = np.asarray(jk[0]), np.asarray(jk[1])
            ja = ints.j(d[0])
            j = np.stack([ja, vj_total - ja])
        else:
            j, vk = ints.jk_components(d)
            vj_total = j.sum(axis=0)

    ks = bool(getattr(problem, "is_kohn_sham", False))
    if ks:
        from harness.verdict import xc as _xc
        from harness.verdict import xc_diagnosis as _xd

        rebuilt, ks_terms, xc = _xc.fock_and_energy_terms(problem, d, ints, vj_total, vk, xc)
    else:
        rebuilt = _energy.fock_from_terms(ints.h, vj_total, vk, len(d))
    built = density_from_orbitals(*orbitals_by_spin(method, sol.coefficients,
                                                    sol.occupations))
    hint, numbers = stale_density_hint(method, d, built, rebuilt, s, results)
    if numbers:
        analysis["stale_density"] = numbers
    if hint:
        hints["density-consistency"] = hint

    # 1. Fock fit
    fock_note = None
    screening = None
    if sol.fock is not None and ks:
        f = fock_by_spin(method, sol.fock)
        fock_note, analysis["fock_fit"] = _xd.ks_fock_diagnosis(problem, ints, d, f,
                                                                vj_total, vk, xc)
        if fock_note:
            for name in ("stationarity", "self-consistency"):
                if _failed(results, name):
                    hints[name] = fock_note
    elif sol.fock is not None:
        f = fock_by_spin(method, sol.fock)
        fits = fit_fock(method, f, t, v, j, vk)
        merged = "J(P)" in fits[0][2]
        analysis["fock_fit"] = {label: {**fit.to_json(), "expected": [exp[n] for n in fit.names]}
                                for label, fit, exp in fits}
        analysis["fock_fit"]["merged_spins"] = merged
        fock_note = fock_hint(fits)
        if fock_note:
            for name in ("stationarity", "self-consistency"):
                if _failed(results, name):
                    hints[name] = fock_note
        if fock_note is None:
            hint, numbers, f_tau = screening_hint(method, f, rebuilt, d, ints, results)
            if numbers:
                analysis["screening"] = numbers
            if hint:
                hints["self-consistency"] = hint
                screening = (hint, f_tau)

    # 2. energy split
    terms = ks_terms if ks else _energy.energy_terms(d, ints.h, vj_total, vk, ints.e_nuc)
    p = d.sum(axis=0)
    e_kin = float(np.einsum("pq,qp->", p, t))
    e_att = float(np.einsum("pq,qp->", p, v))
    e_nuc_ang = nuclear_repulsion(np.asarray(problem.numbers, dtype=float),
                                  np.asarray(problem.coordinates) * ANGSTROM_IN_BOHR)
    e = float(sol.energy)
    diff = e - terms.total
    cand = energy_candidates(terms, e_kin, e_att, e_nuc_ang)
    analysis["energy"] = {"E": e, "E[P]": terms.total, "E - E[P]": diff,
                          "E_nuc": terms.nuclear, "E_one": terms.one_electron,
                          "E_kinetic": e_kin, "E_nuclear_attraction": e_att,
                          "E_J": terms.coulomb, "E_K": terms.exchange,
                          "E_nuc_if_coordinates_read_as_angstrom": e_nuc_ang}
    e_ref = getattr(reference, "energy", reference)
    if e_ref is not None:
        analysis["energy"]["E_ref"] = float(e_ref)
        analysis["energy"]["E[P] - E_ref"] = terms.total - float(e_ref)
    if ks:
        analysis["energy"]["E_xc"] = terms.xc
    ks_cand = (_xd.ks_energy_candidates(problem, ints, d, xc, terms,
                                        analysis.get("fock_fit", {}).get("c_x"))
               if ks and _failed(results, "energy-consistency") else {})
    cand.update({n: value for n, (value, _) in ks_cand.items()})
    if _failed(results, "energy-consistency"):
        name = unique_match(diff, cand, ENERGY_MATCH, ENERGY_SEPARATION)
        hint = None
        if name in ks_cand:
            hint = f"{name}: E − E[P] = {fixed(diff, 6, sign=True)} Eh = {ks_cand[name][1]}"
        elif name:
            hint = energy_hint(name, diff, cand, terms, e_nuc_ang)
            fock_word = FOCK_FOR_ENERGY.get(name)
            if fock_word and fock_note and fock_note.startswith(fock_word):
                hint += "; consistent with the Fock fit"
        elif screening is not None:
            e_tau = screened_energy(d, ints.h, screening[1], ints.e_nuc)
            analysis["screening"]["E_tau[P]"] = e_tau
            if abs(e - e_tau) <= ENERGY_MATCH:
                hint = (f"{screening[0].split(':')[0]}: E − E[P] = {fixed(diff, 6, sign=True)} "
                        f"Eh, and E = E_τ[P] of the same screened integrals to "
                        f"{abs(e - e_tau):.0e} Eh (see self-consistency)")
        elif abs(diff) <= ITERATE_ENERGY and _failed(results, "self-consistency"):
            sc = results["self-consistency"].value
            hint = (f"guess: energy belongs to another iterate? E − E[P] = {diff:+.2e} Eh is "
                    f"small and matches no term, and the density is not self-consistent "
                    f"(self-consistency {sc:.1e})")
        if hint:
            hints["energy-consistency"] = hint
            ref = results.get("reference-energy")
            if (name and e_ref is not None and _failed(results, "reference-energy")
                    and ref.tolerance is not None
                    and abs(terms.total - float(e_ref)) <= ref.tolerance):
                hints["reference-energy"] = (f"{hint}; E[P] agrees with E_ref to "
                                             f"{abs(terms.total - float(e_ref)):.1e} Eh")

    if ks and e_ref is not None and _failed(results, "reference-energy"):
        # the definition mismatch, said plainly, replaces a generic energy hint
        hint = _xd.vwn_reference_hint(problem, ints, d, xc, e, float(e_ref))
        if hint:
            hints["reference-energy"] = hint

    # 3. orbital energies
    if sol.orbital_energies is not None and method != "rohf":
        c, occ = orbitals_by_spin(method, sol.coefficients, sol.occupations)
        eps = np.asarray(sol.orbital_energies, dtype=float)
        eps = eps[None] if method == "rhf" else eps
        f = (fock_by_spin(method, sol.fock) if sol.fock is not None
             else rebuilt)
        r = rayleigh_quotients(f, c, s)
        analysis["orbital_energies"] = {
            "fock": "reported" if sol.fock is not None else "rebuilt",
            "max|eps - r|": float(np.abs(eps - r).max()),
            "ratio eps/r (least squares)": float(np.sum(eps * r) / np.sum(r * r))}
        hint = orbital_signature(eps, r, occ)
        if hint:
            for name in ("roothaan-hall", "aufbau"):
                if _failed(results, name):
                    hints[name] = hint
    return Diagnosis(hints, analysis)
