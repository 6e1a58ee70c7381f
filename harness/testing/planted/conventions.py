"""Correct plug-ins in other AO conventions, and one in a genuinely different basis.

Each plug-in runs the example SCF code (:func:`harness.testing.example_scf.solve`, pyscf's AO
order) and re-expresses every AO-indexed array it returns in another convention
χ_code = χ_ref M, with M (nao × nao) built here from pyscf's shell structure (on
purpose not with :mod:`harness.verdict.conventions`, whose detection the tests check):

    C_code = M⁻¹ C,  P_code = M⁻¹ P M⁻ᵀ,  A_code = Mᵀ A M  (A = F, S, H, …).

The overlap is returned too, so the harness can read the convention from it. Results
are correct, so every check must pass once the convention is undone; ``convention`` in
each :class:`harness.testing.planted.Planted` entry is what the detected description must say.
``spherical_for_cartesian`` instead returns a 5D result for a 6D case: a different
basis, which must fail with "basis differs". Bohr in, Eh out.

Load one with the plug-in spec ``harness.testing.planted.conventions:<name>``.
"""

from __future__ import annotations

import numpy as np

from harness.testing.example_scf import solve

#: Keys whose AO indices are contravariant (transform with M⁻¹): C by rows, P both.
_ROWS = ("coefficients",)
_BOTH = ("density",)
#: Keys whose AO indices are covariant (A_code = Mᵀ A M).
_COVARIANT = ("fock", "overlap", "core_hamiltonian", "kinetic", "nuclear_attraction")


def shells(mol) -> list[tuple[int, int, int, int]]:
    """(atom, l, first AO, number of functions) of every contracted shell, pyscf order."""
    out = []
    loc = mol.ao_loc_nr()
    for b in range(mol.nbas):
        l = mol.bas_angular(b)
        n = (l + 1) * (l + 2) // 2 if mol.cart else 2 * l + 1
        for c in range(mol.bas_nctr(b)):
            out.append((mol.bas_atom(b), l, int(loc[b]) + c * n, n))
    return out


def shell_matrix(mol, order=None, signs=None, unit=False, swap=None) -> np.ndarray:
    """M with χ_code = χ_ref M for pyscf's basis of ``mol``.

    ``order(l)``: pyscf component indices in the code's order for shells of l (None:
    pyscf's); ``signs(l)``: ±1 per pyscf component (None: all +1); ``unit``: scale
    every function to unit self-overlap; ``swap``: (shell a, shell b) indices into
    :func:`shells` (same atom, same l) whose places the code exchanges.
    """
    from harness.backend.integrals import overlap

    nao = mol.nao_nr()
    diag = np.diag(overlap(mol))
    table = shells(mol)
    placed = list(range(len(table)))  # code shell slot k holds reference shell placed[k]
    if swap is not None:
        a, b = swap
        placed[a], placed[b] = placed[b], placed[a]
    m = np.zeros((nao, nao))
    for slot, ref in enumerate(placed):
        _, l, start, n = table[ref]
        code_start = table[slot][2]
        comps = list(order(l)) if order and order(l) is not None else list(range(n))
        sign = signs(l) if signs and signs(l) is not None else np.ones(n)
        for k, c in enumerate(comps):
            j = start + c
            scale = 1.0 / np.sqrt(diag[j]) if unit else 1.0
            m[j, code_start + k] = sign[c] * scale
    return m


def in_convention(result: dict, m: np.ndarray) -> dict:
    """``result`` (pyscf convention) with every AO-indexed array in the code's χ_ref M."""
    out = dict(result)
    inv = np.linalg.inv(m)
    for key, value in result.items():
        if key in _ROWS:
            out[key] = np.matmul(inv, np.asarray(value))
        elif key in _BOTH:
            out[key] = np.matmul(np.matmul(inv, np.asarray(value)), inv.T)
        elif key in _COVARIANT:
            out[key] = np.matmul(np.matmul(m.T, np.asarray(value)), m)
        elif key == "two_electron":
            out[key] = np.einsum("pqrs,pi,qj,rk,sl->ijkl", np.asarray(value), m, m, m, m)
    return out


def _solve_in(problem, **matrix_options) -> dict:
    return in_convention(solve(problem), shell_matrix(problem.to_pyscf(), **matrix_options))


def p_shells_zxy(problem) -> dict:
    """Correct, p functions ordered (z, x, y): detected and undone, every check passes."""
    return _solve_in(problem, order=lambda l: (2, 0, 1) if l == 1 else None)


def p_shells_yzx(problem) -> dict:
    """Correct, p functions in m = −1, 0, +1 order (y, z, x): every check passes."""
    return _solve_in(problem, order=lambda l: (1, 2, 0) if l == 1 else None)


def _m_order(l):
    """Spherical components in m = 0, +1, −1, +2, −2, … order (pyscf index m + l)."""
    return [l] + [l + s * k for k in range(1, l + 1) for s in (1, -1)]


def d_shells_molden_order(problem) -> dict:
    """Correct, spherical d in m = 0, +1, −1, +2, −2 order (Molden's): every check passes."""
    return _solve_in(problem, order=lambda l: _m_order(2) if l == 2 else None)


def f_shells_molden_order(problem) -> dict:
    """Correct, spherical f in m = 0, +1, −1, … , +3, −3 order (d as pyscf): every check passes."""
    return _solve_in(problem, order=lambda l: _m_order(3) if l == 3 else None)


def flipped_signs(problem) -> dict:
    """Correct, other real-harmonic signs: every p y and spherical d m = −1 function negated."""
    def signs(l):
        if l == 1:
            return np.array([1.0, -1.0, 1.0])
        if l == 2 and not problem.cartesian:
            return np.array([1.0, -1.0, 1.0, 1.0, 1.0])
        return None
    return _solve_in(problem, signs=signs)


def unit_cartesian(problem) -> dict:
    """Correct, every cartesian function normalised to unit self-overlap: every check passes."""
    return _solve_in(problem, unit=True)


def molden_cartesian(problem) -> dict:
    """Correct, Molden's cartesian d order (xx, yy, zz, xy, xz, yz), unit-normalised."""
    # pyscf's cartesian d order is xx, xy, xz, yy, yz, zz
    return _solve_in(problem, order=lambda l: (0, 3, 5, 1, 2, 4) if l == 2 else None,
                     unit=True)


def s_shells_swapped(problem) -> dict:
    """Correct, the 2s and 3s shells of atom 0 exchanged (cc-pVDZ): every check passes."""
    table = shells(problem.to_pyscf())
    s_of_0 = [k for k, (atom, l, _, _) in enumerate(table) if atom == 0 and l == 0]
    return _solve_in(problem, swap=(s_of_0[1], s_of_0[2]))


def spherical_for_cartesian(problem) -> dict:
    """Wrong basis: spherical (5D) results for a cartesian (6D) case: "basis differs"."""
    return solve(problem.replace(cartesian=False))


# --------------------------------------------------------------------------- catalogue

def _catalogue():
    from harness.testing.planted import Planted

    correct = [
        (p_shells_zxy, "water-cc-pvdz-rhf", "p shells ordered (z, x, y)"),
        (p_shells_yzx, "ch2-cc-pvdz-uhf", "p shells ordered (y, z, x)"),
        (d_shells_molden_order, "water-cc-pvdz-rhf",
         "spherical d shells in m = 0, +1, \u22121, +2, \u22122 order"),
        (f_shells_molden_order, "water-cc-pvtz-rhf",
         "spherical f shells in m = 0, +1, \u22121, +2, \u22122, +3, \u22123 order"),
        (flipped_signs, "ch2-cc-pvdz-rohf",
         "signs flipped on 5 functions (p y: 4 of 4; spherical d m = \u22121: 1 of 1)"),
        (unit_cartesian, "co-6-31gd-rhf",
         "cartesian d functions normalised to unit self-overlap"),
        (molden_cartesian, "ammonia-6-31gd-rhf",
         "cartesian d shells ordered (xx, yy, zz, xy, xz, yz); "
         "cartesian d functions normalised to unit self-overlap"),
        (s_shells_swapped, "hf-cc-pvdz-rhf", "2 shells of atom 0 (F) reordered"),
    ]
    entries = [Planted(f.__name__, f, case, frozenset(), f.__doc__.strip().splitlines()[0],
                       convention=words)
               for f, case, words in correct]
    entries.append(Planted(
        spherical_for_cartesian.__name__, spherical_for_cartesian, "co-6-31gd-rhf",
        frozenset({"basis"}), spherical_for_cartesian.__doc__.strip().splitlines()[0],
        convention="basis differs: the code has 28 functions, the reference 30 "
                   "(cartesian vs spherical d?)"))
    return tuple(entries)


CATALOGUE = _catalogue()
