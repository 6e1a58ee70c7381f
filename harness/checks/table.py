"""The declared table of checks: one :class:`CheckSpec` per check, in the order
``harness.verdict.evaluate`` returns them and the terminal table shows them.

Each entry names what the check needs from the solution, which methods it applies to,
its tolerance (a named module constant, or a rule derived from the problem's
convergence), why the tolerance has that size and what the check measures. The
tolerance constants themselves stay next to the code that uses them, each documented
with its reason there; an entry names them as ``"module:NAME"`` and reads them on use,
so this module imports nothing beyond the standard library.

``python -m harness.checks.table --markdown`` prints the table as Markdown (the text of
docs/checks.md; a test keeps the two equal). Energies in hartree (Eh), λ in Eh/rad².
"""

from __future__ import annotations

import argparse
import dataclasses
import importlib
import sys

ALL_METHODS = ("rhf", "uhf", "rohf")

_TOL = "harness.checks.tolerances"
_STATES = "harness.verdict.states"
_HISTORY = "harness.checks.history"
_WELL = "harness.checks.wellformed"


def resolve(constant: str):
    """The value of a ``"module:NAME"`` constant."""
    module, _, name = constant.partition(":")
    return getattr(importlib.import_module(module), name)


@dataclasses.dataclass(frozen=True)
class Fixed:
    """A tolerance that does not depend on the convergence: the module constant
    ``constant`` (``"module:NAME"``)."""

    constant: str

    @property
    def name(self) -> str:
        return self.constant.partition(":")[2]

    def value(self, convergence: float | None = None, factor: float | None = None) -> float:
        return float(resolve(self.constant))

    def describe(self) -> str:
        return f"{self.value():.0e} (`{self.name}`)"


@dataclasses.dataclass(frozen=True)
class Derived:
    """A tolerance of ``factor`` × the problem's convergence; the factor is the module
    constant ``factor_constant`` unless given (``Tolerances(factor=...)``)."""

    factor_constant: str = f"{_TOL}:CONVERGENCE_FACTOR"

    @property
    def name(self) -> str:
        return self.factor_constant.partition(":")[2]

    def value(self, convergence: float, factor: float | None = None) -> float:
        f = float(resolve(self.factor_constant)) if factor is None else factor
        return f * convergence

    def describe(self) -> str:
        return f"{float(resolve(self.factor_constant)):g} × convergence (`{self.name}`)"


@dataclasses.dataclass(frozen=True)
class CheckSpec:
    """One check. ``column``: its header in the terminal's verdict table. ``needs``: the
    solution keys it reads beyond the required ones (not applicable without them).
    ``methods``: the methods it applies to. ``tolerance``: :class:`Fixed`, :class:`Derived`
    or None (a check with nothing to tolerate). ``reason``: why the tolerance has that
    size. ``summary``: what it checks, with the formula. ``also``: further named
    thresholds (``"module:NAME"``) the check uses that ``--tol`` does not replace."""

    name: str
    column: str
    needs: tuple[str, ...]
    methods: tuple[str, ...]
    tolerance: Fixed | Derived | None
    reason: str
    summary: str
    also: tuple[str, ...] = ()


_DERIVED_REASON = ("vanishes only at self-consistency; codes measure the gradient in "
                   "different bases and norms (within ~5×), so a code stopped exactly at "
                   "the requested convergence passes and one 100× looser fails")
_INTEGRAL_REASON = ("a tenth of the reference-energy tolerance: integrals this good cannot "
                    "move E out of the agreement asked of it; the element size alone says "
                    "nothing about the cost; a real error (missing ½, wrong sign, "
                    "physicists' order) moves E by ≥ 1 Eh")
_EFFECT = ("first-order energy effect at the code's density (Hellmann–Feynman), in Eh; "
           "also fails when an element is off by more than INTEGRAL_ELEMENT_BOUND")
_BOUND = f"{_TOL}:INTEGRAL_ELEMENT_BOUND"
_DEFINITE_REASON = ("a Gram matrix has no negative eigenvalue beyond rounding (~1e-13); "
                    "the bound is on the negative side because nearly dependent bases have "
                    "eigenvalues approaching 0⁺")

CHECKS: tuple[CheckSpec, ...] = (
    CheckSpec("basis", "AO", ("overlap",), ALL_METHODS,
              Fixed("harness.verdict.conventions:CONVENTION_MATCH"),
              "analytic overlap integrals of one basis agree to ~1e-14 between "
              "programs; a different basis misses by ≥ 1e-4 (an overlap off only at "
              "integral accuracy is the code's own metric, weighed by the overlap check)",
              "the code's AO convention maps onto pyscf's: max|Mᵀ S_ref M − S_code| ≤ tol "
              "for a per-shell signed, scaled permutation M",
              ("harness.verdict.evaluate:SAME_ORDER_INACCURATE_OVERLAP",)),
    CheckSpec("well-formed", "form", (), ALL_METHODS, Fixed(f"{_WELL}:SYMMETRY"),
              "a code that symmetrises nothing still meets it to rounding",
              "required keys present, shapes and occupations valid, values finite, "
              "square matrices symmetric: max|A − Aᵀ| ≤ tol",
              (f"{_WELL}:OCCUPATION_ROUNDING",)),
    CheckSpec("converged-flag", "conv", ("converged",), ALL_METHODS, None,
              "a flag: nothing to tolerate",
              "the code reports converged = True"),
    CheckSpec("overlap", "ovlp", ("overlap",), ALL_METHODS, Fixed(f"{_TOL}:OVERLAP"),
              _INTEGRAL_REASON,
              f"|δE| = |Tr(W δS)|, δS = S − S_ref against pyscf's overlap, W the "
              f"energy-weighted density: {_EFFECT}", (_BOUND,)),
    CheckSpec("orthonormality", "orth", (), ALL_METHODS, Fixed(f"{_TOL}:ORTHONORMALITY"),
              "eigensolvers reach ~1e-14·cond(S), cond(S) < 1e5 for the shipped bases; a "
              "real normalisation error is ≥ 1e-2",
              "max|CᵀSC − 1| per spin"),
    CheckSpec("idempotency", "idem", (), ALL_METHODS, Fixed(f"{_TOL}:IDEMPOTENCY"),
              "exact for orthonormal orbitals, so bounded by orthonormality; admits "
              "density-DIIS codes",
              "max|PSP − P| per spin (P/2 for an RHF total density)"),
    CheckSpec("electron-count", "nelec", (), ALL_METHODS, Fixed(f"{_TOL}:ELECTRON_COUNT"),
              "exact up to rounding for any correct density",
              "|Tr(PS) − N| per spin, in electrons"),
    CheckSpec("density-consistency", "dens", ("density",), ALL_METHODS, Derived(),
              _DERIVED_REASON,
              "max|P − P[C, n]|: the reported density is the one built from the orbitals "
              "and occupations"),
    CheckSpec("stationarity", "stat", ("fock",), ALL_METHODS, Derived(), _DERIVED_REASON,
              "max|X(FPS − SPF)X| with the code's F, X = S^-1/2 (ROHF: the ROHF "
              "stationarity conditions)"),
    CheckSpec("self-consistency", "self", (), ALL_METHODS, Derived(), _DERIVED_REASON,
              "max|X(FPS − SPF)X| with F rebuilt from the code's P (ROHF: the ROHF "
              "conditions)"),
    CheckSpec("roothaan-hall", "RH", ("orbital_energies",), ("rhf", "uhf"), Derived(),
              _DERIVED_REASON,
              "max|X(FC − SCε)| per spin: the orbitals are eigenvectors of the Fock matrix"),
    CheckSpec("energy-consistency", "Econs", (), ALL_METHODS,
              Fixed(f"{_TOL}:ENERGY_CONSISTENCY"),
              "both sides use the same density, so only integral accuracy enters",
              "|E − E[P]| in Eh, E[P] the Hartree–Fock energy of the code's density "
              "(H, J, K from pyscf's integrals)"),
    CheckSpec("reference-energy", "Eref", (), ALL_METHODS, Fixed(f"{_TOL}:REFERENCE_ENERGY"),
              "a microhartree, the precision quoted for published SCF energies",
              "|E − E_ref| in Eh against the stored pyscf reference"),
    CheckSpec("aufbau", "aufb", ("orbital_energies",), ("rhf", "uhf"), Fixed(f"{_TOL}:AUFBAU"),
              "degenerate frontier orbitals are split only by convergence noise",
              "ε_HOMO − ε_LUMO ≤ tol per spin, in Eh"),
    CheckSpec("stability", "stab", (), ALL_METHODS, Fixed(f"{_STATES}:STABILITY_EIGENVALUE"),
              "pyscf's threshold for the same decision; minima have λ ≳ 1e-2 except exact "
              "zero modes (|λ| ≲ 1e-8)",
              "lowest orbital-Hessian eigenvalue λ ≥ −tol (Eh/rad²), else following its "
              "mode must not lower E",
              (f"{_STATES}:FOLLOWING_LOWERING", f"{_STATES}:STATIONARY_GRADIENT_LIMIT")),
    CheckSpec("spin-squared", "S²", (), ("uhf", "rohf"), Fixed(f"{_STATES}:SPIN_SQUARED_UHF"),
              "⟨S²⟩ is off to first order in the orbital error (≲ 2e-4 when converged); "
              "distinct UHF states differ by ≥ 0.01",
              "UHF: |⟨S²⟩ − ⟨S²⟩_ref| ≤ tol; ROHF: |⟨S²⟩ − S(S+1)| ≤ SPIN_SQUARED_ROUNDING "
              "(unless overridden)",
              (f"{_STATES}:SPIN_SQUARED_ROUNDING",)),
    CheckSpec("energy-error-bound", "Eerr", (), ALL_METHODS,
              Fixed(f"{_STATES}:ENERGY_ERROR_BOUND"),
              "the reference-energy tolerance: the energy must not be able to move by more "
              "than the agreement asked of it",
              "½ gᵀH⁻¹g (diagonal orbital Hessian) ≤ tol, in Eh: energy still to gain",
              (f"{_STATES}:ERROR_BOUND_GRADIENT_LIMIT", f"{_STATES}:CURVATURE_FLOOR")),
    CheckSpec("kinetic", "T", ("kinetic",), ALL_METHODS, Fixed(f"{_TOL}:KINETIC"),
              _INTEGRAL_REASON, f"|δE| = |Tr(P δT)| against pyscf's kinetic matrix: {_EFFECT}",
              (_BOUND,)),
    CheckSpec("nuclear-attraction", "V", ("nuclear_attraction",), ALL_METHODS,
              Fixed(f"{_TOL}:NUCLEAR_ATTRACTION"), _INTEGRAL_REASON,
              f"|δE| = |Tr(P δV)| against pyscf's nuclear attraction: {_EFFECT}",
              (_BOUND,)),
    CheckSpec("core-hamiltonian", "H", ("core_hamiltonian",), ALL_METHODS,
              Fixed(f"{_TOL}:CORE_HAMILTONIAN"), _INTEGRAL_REASON,
              f"|δE| = |Tr(P δH)| against pyscf's core Hamiltonian T + V: {_EFFECT}",
              (_BOUND,)),
    CheckSpec("overlap-definite", "S>0", ("overlap",), ALL_METHODS,
              Fixed(f"{_TOL}:OVERLAP_DEFINITE"), _DEFINITE_REASON,
              "λ_min(S) ≥ −tol for the code's overlap"),
    CheckSpec("kinetic-definite", "T>0", ("kinetic",), ALL_METHODS,
              Fixed(f"{_TOL}:KINETIC_DEFINITE"), _DEFINITE_REASON,
              "λ_min(T) ≥ −tol for the code's kinetic matrix"),
    CheckSpec("two-electron", "ERI", ("two_electron",), ALL_METHODS,
              Fixed(f"{_TOL}:TWO_ELECTRON"), _INTEGRAL_REASON,
              f"|δE| = ½|Tr(P δG[P])|, δG of δ(ij|kl) against pyscf's int2e: {_EFFECT}",
              ("harness.checks.integrals:ERI_MAX_NAO", _BOUND)),
    CheckSpec("two-electron-symmetry", "ERIsym", ("two_electron",), ALL_METHODS,
              Fixed(f"{_TOL}:TWO_ELECTRON_SYMMETRY"),
              "an unpacked symmetric array meets it exactly, separately computed "
              "permutations to ~1e-13",
              "max|g − g_perm| over the 7 non-trivial permutations of the 8-fold symmetry",
              ("harness.checks.integrals:ERI_MAX_NAO",)),
    CheckSpec("two-electron-schwarz", "Schwarz", ("two_electron",), ALL_METHODS,
              Fixed(f"{_TOL}:TWO_ELECTRON_SCHWARZ"),
              "exact for correct integrals (≤ 3e-16 measured); admits screening errors "
              "of ~1e-10",
              "max((ij|kl)² − (ij|ij)(kl|kl)) ≤ tol, in Eh²",
              ("harness.checks.integrals:ERI_MAX_NAO",)),
    CheckSpec("two-electron-definite", "ERI≥0", ("two_electron",), ALL_METHODS,
              Fixed(f"{_TOL}:TWO_ELECTRON_DEFINITE"),
              "the Coulomb supermatrix is positive semidefinite; λ ≈ 0 is legitimate "
              "(dependent products), so the bound is on the negative side",
              "λ_min of M[(ij),(kl)] = (ij|kl) ≥ −tol, in Eh",
              ("harness.checks.integrals:ERI_MAX_NAO",)),
    CheckSpec("history", "hist", ("history",), ALL_METHODS, Fixed(f"{_HISTORY}:ENERGY_RISE"),
              "a microhartree (the reference-energy precision); the override also "
              "replaces OSCILLATION_AMPLITUDE, the other energy step",
              "no false convergence, oscillation (steps > tol), last-step energy rise "
              "> tol or stalled error",
              (f"{_HISTORY}:OSCILLATION_AMPLITUDE", f"{_HISTORY}:OSCILLATION_ITERATIONS",
               f"{_HISTORY}:OSCILLATION_PERSISTENCE", f"{_HISTORY}:STALL_ITERATIONS",
               f"{_HISTORY}:STALL_FACTOR")),
)

#: Every check's name, in table order.
NAMES: tuple[str, ...] = tuple(c.name for c in CHECKS)

#: The checks that have a tolerance (``--tol NAME=VALUE`` accepts exactly these).
TOLERANCE_NAMES: tuple[str, ...] = tuple(c.name for c in CHECKS if c.tolerance is not None)

#: Terminal column headers, by check name.
COLUMNS: dict[str, str] = {c.name: c.column for c in CHECKS}

_BY_NAME = {c.name: c for c in CHECKS}


def spec(name: str) -> CheckSpec:
    """The :class:`CheckSpec` of check ``name`` (KeyError if there is none)."""
    return _BY_NAME[name]


def _cell(text: str) -> str:
    return text.replace("|", "\\|")


def markdown() -> str:
    """The table as Markdown (the text of docs/checks.md)."""
    lines = [
        "# Checks",
        "",
        "Generated by `python -m harness.checks.table --markdown` from "
        "`harness/checks/table.py`; do not edit by hand (a test compares the two).",
        "",
        "Every tolerance can be overridden with `--tol NAME=VALUE` (`--scf-tol` in the "
        "pytest plug-in, the `tolerances` key in pyproject.toml). Energies in hartree (Eh). "
        "\"Needs\" lists the solution keys a check reads beyond the required `energy`, "
        "`coefficients` and `occupations`; without them it is not applicable.",
        "",
        "| check | applies to | needs | tolerance | reason | what it checks |",
        "|---|---|---|---|---|---|",
    ]
    for c in CHECKS:
        tol = c.tolerance.describe() if c.tolerance is not None else "—"
        if c.also:
            tol += "; not overridden: " + ", ".join(
                f"`{a.partition(':')[2]}` = {resolve(a):g}" for a in c.also)
        needs = ", ".join(f"`{k}`" for k in c.needs) or "—"
        lines.append("| " + " | ".join(_cell(x) for x in (
            f"`{c.name}` ({c.column})", ", ".join(c.methods), needs, tol, c.reason,
            c.summary)) + " |")
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m harness.checks.table",
                                     description="print the declared table of checks")
    parser.add_argument("--markdown", action="store_true", required=True,
                        help="print the table as Markdown (docs/checks.md)")
    parser.parse_args(argv)
    sys.stdout.write(markdown())
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
