"""Is the solution well-formed? Keys, shapes, finiteness, symmetry, occupations.

Runs first; when it fails, the numerical checks are skipped instead of crashing on
arrays of the wrong shape. Returns the problems found, most basic first.
"""

from __future__ import annotations

import numpy as np

from harness.contract.solution import REQUIRED_KEYS, Solution

#: |n − round(n)| allowed for occupation numbers, which must be whole (0/1/2).
OCCUPATION_ROUNDING = 1e-8
#: max|A − Aᵀ| allowed for matrices that must be symmetric (density, Fock, overlap,
#: core Hamiltonian); a code that symmetrises nothing still meets it to rounding.
SYMMETRY = 1e-8


def _shape(a) -> str:
    return str(tuple(a.shape)).replace(",)", ")")


def well_formed(sol: Solution, nao: int, method: str, n_alpha: int, n_beta: int, *,
                symmetry: float = SYMMETRY) -> list[str]:
    """List what is wrong with an extracted solution (empty list: well-formed).

    Shapes: coefficients (nao, nmo) — (2, nao, nmo) for UHF — with nmo ≤ nao;
    occupations (nmo,) in {0, 1, 2} — (2, nmo) in {0, 1} for UHF — summing to the
    electron counts; density and fock (nao, nao) for RHF, (2, nao, nao) otherwise;
    overlap, core_hamiltonian, kinetic, nuclear_attraction (nao, nao); two_electron
    (nao, nao, nao, nao); orbital_energies like occupations; history non-empty.
    All values finite; square matrices symmetric: max|A − Aᵀ| ≤ ``symmetry``.
    """
    problems: list[str] = []
    given = sol.as_dict()
    for key in REQUIRED_KEYS:
        if key not in given:
            problems.append(f"missing required key '{key}'")
    for key, marker in sol.malformed().items():
        problems.append(f"'{key}' {marker.reason}")
    if problems:
        return problems

    if not np.isfinite(sol.energy):
        problems.append(f"'energy' is {sol.energy}")

    unrestricted = method == "uhf"
    spin_axis = (2,) if unrestricted else ()
    c = sol.coefficients
    want = "(2, nao, nmo)" if unrestricted else "(nao, nmo)"
    if c.ndim != len(spin_axis) + 2 or (unrestricted and c.shape[0] != 2) or c.shape[-2] != nao \
            or not 1 <= c.shape[-1] <= nao:
        problems.append(f"'coefficients' has shape {_shape(c)}, expected {want} with nao = {nao} "
                        f"and 1 ≤ nmo ≤ {nao}")
        return problems
    nmo = c.shape[-1]

    def expect(key: str, a, shape: tuple[int, ...], label: str) -> bool:
        if a is None:
            return False
        if a.shape != shape:
            problems.append(f"'{key}' has shape {_shape(a)}, expected {label}")
            return False
        if not np.all(np.isfinite(a)):
            bad = int((~np.isfinite(a)).sum())
            problems.append(f"'{key}' has {bad} non-finite element{'s' if bad > 1 else ''}")
            return False
        return True

    expect("coefficients", c, c.shape, want)
    if expect("occupations", sol.occupations, spin_axis + (nmo,),
              f"{_shape(np.empty(spin_axis + (nmo,)))} (nmo = {nmo} from coefficients)"):
        problems.extend(_occupation_problems(sol.occupations, method, n_alpha, n_beta))
    expect("orbital_energies", sol.orbital_energies, spin_axis + (nmo,),
           _shape(np.empty(spin_axis + (nmo,))))
    spin_or_total = () if method == "rhf" else (2,)
    square = (("density", sol.density, spin_or_total), ("fock", sol.fock, spin_or_total),
              ("overlap", sol.overlap, ()), ("core_hamiltonian", sol.core_hamiltonian, ()),
              ("kinetic", sol.kinetic, ()), ("nuclear_attraction", sol.nuclear_attraction, ()))
    for key, a, lead in square:
        if expect(key, a, lead + (nao, nao), _shape(np.empty(lead + (nao, nao)))):
            problems.extend(_symmetry_problems(key, a, symmetry))
    expect("two_electron", sol.two_electron, (nao,) * 4, f"({nao}, {nao}, {nao}, {nao})")
    if sol.history is not None and sol.history.shape[0] == 0:
        problems.append("'history' is empty")
    return problems


def _symmetry_problems(key: str, a: np.ndarray, symmetry: float = SYMMETRY) -> list[str]:
    dev = float(np.max(np.abs(a - np.swapaxes(a, -1, -2)))) if a.size else 0.0
    if dev > symmetry:
        return [f"'{key}' is not symmetric: max|A − Aᵀ| = {dev:.1e} > {symmetry:.0e}"]
    return []


def _occupation_problems(occ: np.ndarray, method: str, n_alpha: int, n_beta: int) -> list[str]:
    rounded = np.round(occ)
    if np.max(np.abs(occ - rounded), initial=0.0) > OCCUPATION_ROUNDING:
        return ["'occupations' must be whole numbers (0, 1 or 2); fractional occupations are "
                "not part of the contract"]
    n = n_alpha + n_beta
    if method == "uhf":
        got = rounded.sum(axis=1)
        if not np.all(np.isin(rounded, (0, 1))):
            return ["'occupations' for uhf must be 0 or 1 per spin orbital"]
        if got[0] != n_alpha or got[1] != n_beta:
            return [f"'occupations' sum to {got[0]:g} alpha and {got[1]:g} beta electrons, "
                    f"expected {n_alpha} and {n_beta}"]
        return []
    total = rounded.sum()
    if total != n:
        return [f"'occupations' sum to {total:g} electrons, expected {n}"]
    if method == "rhf":
        if not np.all(np.isin(rounded, (0, 2))):
            return ["'occupations' for rhf must be 0 or 2"]
        return []
    if not np.all(np.isin(rounded, (0, 1, 2))):
        return ["'occupations' for rohf must be 0, 1 or 2"]
    singly, doubly = int((rounded == 1).sum()), int((rounded == 2).sum())
    if doubly != n_beta or singly != n_alpha - n_beta:
        return [f"'occupations' have {doubly} doubly and {singly} singly occupied orbitals, "
                f"expected {n_beta} and {n_alpha - n_beta}"]
    return []
