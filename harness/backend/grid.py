"""Kohn–Sham pieces from pyscf: the pinned quadrature grid, V_xc and E_xc of a density on
a given grid, the exact-exchange coefficients of a functional, the libxc version.

pyscf evaluates the functional (through libxc) on grid points the harness hands it; the
checks combine the results with their own numpy. Units: bohr, hartree (Eh).
"""

from __future__ import annotations

import dataclasses

import numpy as np

#: The pinned grid: pyscf's level 3 (its default; ~ 10⁻⁶ Eh integration error in E_xc for
#: first-row molecules), Treutler–Ahlrichs radial points with Treutler's atomic-radius
#: adjustment, Becke's partition, NWChem angular pruning, no padding points. The
#: reference and a pinned-mode code both integrate on exactly these points and weights,
#: so the level does not limit the comparison; it only fixes which grid is meant.
GRID_LEVEL = 3
#: The two grids of the own-grid sensitivity measurement (``harness.verdict.xc``): the
#: pinned level and a finer one; their difference at the code's density measures how much
#: an XC quantity depends on the quadrature at all for this case.
SENSITIVITY_LEVELS = (3, 5)
#: The grid settings as words, for the description (and the reference hash).
GRID_SETTINGS = {"radial": "treutler-ahlrichs", "radius_adjust": "treutler",
                 "partition": "becke", "pruning": "nwchem", "atomic_radii": "bragg"}


def _grids(mol, level: int):
    from pyscf.dft import gen_grid, radi

    g = gen_grid.Grids(mol)
    g.level = int(level)
    g.alignment = 0
    g.radi_method = radi.treutler_ahlrichs
    g.radii_adjust = radi.treutler_atomic_radii_adjust
    g.becke_scheme = gen_grid.original_becke
    g.prune = gen_grid.nwchem_prune
    g.atomic_radii = radi.BRAGG_RADII
    g.verbose = 0
    return g


def grid_arrays(mol, level: int = GRID_LEVEL) -> tuple[np.ndarray, np.ndarray, dict]:
    """(coords (ngrid, 3) bohr, weights (ngrid,), description) of pyscf's grid at
    ``level`` with GRID_SETTINGS for a ``Mole``."""
    from pyscf.dft import gen_grid

    g = _grids(mol, level)
    g.build(with_non0tab=False)
    per_element = {}
    for a in range(mol.natm):
        sym = mol.atom_pure_symbol(a)
        z = int(mol.atom_charge(a))
        per_element[sym] = {"radial_points": int(gen_grid._default_rad(z, level)),
                            "angular_points_max": int(gen_grid._default_ang(z, level))}
    description = {"program": "pyscf.dft.gen_grid", "level": int(level), **GRID_SETTINGS,
                   "per_element": per_element, "points": int(g.weights.size)}
    return np.asarray(g.coords), np.asarray(g.weights), description


def pinned_grid(mol, level: int = GRID_LEVEL):
    """The pinned :class:`harness.contract.grid.Grid` of a ``Mole``."""
    from harness.contract.grid import Grid

    coords, weights, description = grid_arrays(mol, level)
    return Grid.create(coords, weights, description)


def pyscf_grids(mol, coords: np.ndarray, weights: np.ndarray):
    """A pyscf ``Grids`` object holding exactly the given points and weights."""
    g = _grids(mol, GRID_LEVEL)
    g.coords = np.ascontiguousarray(coords, dtype=float)
    g.weights = np.ascontiguousarray(weights, dtype=float)
    g.non0tab = g.make_mask(mol, g.coords)
    g.screen_index = g.non0tab
    return g


def libxc_version() -> str:
    """The libxc version pyscf's functional evaluation uses."""
    from pyscf.dft import libxc

    return str(getattr(libxc, "__version__", "unknown"))


@dataclasses.dataclass(frozen=True)
class HybridCoefficients:
    """Exact exchange in a functional, pyscf's convention (``rsh_and_hybrid_coeff``):
    K_eff = hyb·K + (alpha − hyb)·K_lr(omega), K_lr built with erf(ω r)/r. Global
    hybrids have omega = 0 (K_eff = hyb·K); pure functionals all zero."""

    omega: float
    alpha: float
    hyb: float

    @property
    def range_separated(self) -> bool:
        return self.omega != 0.0

    @property
    def has_exact_exchange(self) -> bool:
        return self.hyb != 0.0 or (self.omega != 0.0 and self.alpha != 0.0)


def check_functional(functional: str) -> str | None:
    """None if pyscf/libxc knows ``functional``, else why not (one line)."""
    from pyscf.dft import libxc

    try:
        libxc.parse_xc(functional)
        if libxc.is_nlc(functional):
            return "non-local (VV10) correlation is not supported"
    except Exception as exc:
        return f"pyscf/libxc does not know it ({type(exc).__name__}: {exc})".splitlines()[0]
    return None


def hybrid_coefficients(functional: str, spin: int = 0) -> HybridCoefficients:
    """:class:`HybridCoefficients` of ``functional`` (libxc name as pyscf spells it)."""
    from pyscf.dft import numint

    omega, alpha, hyb = numint.NumInt().rsh_and_hybrid_coeff(functional, spin=spin)
    return HybridCoefficients(float(omega), float(alpha), float(hyb))


def xc_family(functional: str) -> str:
    """"lda", "gga" or "mgga" (pyscf's xc_type)."""
    from pyscf.dft import numint

    return str(numint.NumInt()._xc_type(functional)).lower()


def xc_on_grid(mol, functional: str, d: np.ndarray, coords: np.ndarray,
               weights: np.ndarray) -> tuple[float, np.ndarray, float]:
    """(E_xc (Eh), V_xc, N_grid) of a density on the given grid.

    ``d`` has a leading spin axis: one component (the total P, spin-unpolarised
    functional, V_xc (1, nao, nao)) or two (Pα, Pβ, spin-polarised, V_xc (2, nao, nao)).
    E_xc = Σ_g w_g ρ(r_g) ε_xc(r_g); V_xc,pq = ∂E_xc/∂P_qp (pyscf numint nr_rks / nr_uks);
    N_grid = Σ_g w_g ρ(r_g) (the electrons the grid sees).
    """
    from pyscf.dft import numint

    g = pyscf_grids(mol, coords, weights)
    ni = numint.NumInt()
    d = np.ascontiguousarray(d, dtype=float)
    if len(d) == 1:
        n, e, v = ni.nr_rks(mol, g, functional, d[0])
        return float(e), np.asarray(v)[None], float(n)
    n, e, v = ni.nr_uks(mol, g, functional, d)
    return float(e), np.asarray(v), float(np.sum(n))


def xc_at_level(mol, functional: str, d: np.ndarray, level: int
                ) -> tuple[float, np.ndarray, float]:
    """:func:`xc_on_grid` on pyscf's grid of ``level`` (GRID_SETTINGS)."""
    coords, weights, _ = grid_arrays(mol, level)
    return xc_on_grid(mol, functional, d, coords, weights)


def k_long_range(mol, d: np.ndarray, omega: float) -> np.ndarray:
    """K_lr[Pσ]_pq = Σ_rs (pr|erf(ω r₁₂)/r₁₂|qs) Pσ_rs for each component of ``d``
    (leading spin axis), pyscf's direct algorithm with the range-separated Coulomb
    operator; (ns, nao, nao), Eh."""
    from pyscf import scf

    with mol.with_range_coulomb(omega):
        vk = scf.hf.get_jk(mol, np.ascontiguousarray(d), hermi=1, with_j=False)[1]
    return np.asarray(vk).reshape(d.shape)


class XCEvaluator:
    """E_xc and V_xc of densities on one fixed grid, for an SCF loop (the bundled example
    code calls it once per iteration): pyscf builds the molecule and the grid object once.

    ``evaluator(d)`` → (E_xc (Eh), V_xc (ns, nao, nao)); d has a leading spin axis
    (1: total P, unpolarised; 2: (Pα, Pβ), polarised). ``coefficients``: the functional's
    :class:`HybridCoefficients`.
    """

    def __init__(self, problem, coords=None, weights=None, level: int | None = None):
        from harness.backend.mole import mole_for

        self.mol = mole_for(problem)
        self.functional = problem.functional
        if level is not None:
            coords, weights, _ = grid_arrays(self.mol, level)
        elif coords is None:
            coords, weights = problem.grid.coords, problem.grid.weights
        self.grids = pyscf_grids(self.mol, coords, weights)
        self.coefficients = hybrid_coefficients(self.functional, problem.multiplicity - 1)

    def __call__(self, d: np.ndarray) -> tuple[float, np.ndarray]:
        from pyscf.dft import numint

        ni = numint.NumInt()
        d = np.ascontiguousarray(d, dtype=float)
        if len(d) == 1:
            _, e, v = ni.nr_rks(self.mol, self.grids, self.functional, d[0])
            return float(e), np.asarray(v)[None]
        _, e, v = ni.nr_uks(self.mol, self.grids, self.functional, d)
        return float(e), np.asarray(v)


def long_range_eri(problem, omega: float) -> np.ndarray:
    """(pq|erf(ω r₁₂)/r₁₂|rs), the full (nao,)*4 array (Eh), for range-separated hybrids
    in a code that holds all integrals in memory (the bundled example code)."""
    from harness.backend.mole import mole_for

    mol = mole_for(problem)
    nao = mol.nao_nr()
    with mol.with_range_coulomb(omega):
        return np.ascontiguousarray(mol.intor("int2e").reshape((nao,) * 4))


def xc_energy_of_density(functional: str, rho: np.ndarray, weights: np.ndarray) -> float:
    """E_xc = Σ_g w_g ρ_g ε_xc(ρ_g) (Eh) of a spin-unpolarised density given by its values
    ρ_g on grid points (LDA functionals only: no gradients), libxc through pyscf."""
    from pyscf.dft import libxc

    exc = libxc.eval_xc(functional, np.asarray(rho, dtype=float), spin=0, deriv=0)[0]
    return float(np.sum(np.asarray(weights) * rho * exc))


# --------------------------------------------------------------------------- diagnosis
# Pieces the same-density diagnosis (harness.verdict.diagnosis) regresses a Kohn–Sham
# code's Fock matrix on; evaluated only after some check failed.

#: Composite libxc functionals that pyscf's parser does not expand, as their semi-local
#: mixtures (libxc id → ((component id, coefficient), ...)); the exact-exchange part comes
#: from :func:`hybrid_coefficients`. From memory of libxc's source (hyb_gga_xc_b3lyp.c,
#: hyb_gga_xc_pbeh.c), verified numerically by tests/unit/test_diagnosis_ks.py: the mixture's
#: E_xc equals pyscf's evaluation of the composite to 1e-10 Eh.
#: 402 B3LYP: 0.08 LDA_X + 0.72 GGA_X_B88 + 0.19 LDA_C_VWN_RPA + 0.81 GGA_C_LYP;
#: 406 PBE0 (PBEH): 0.75 GGA_X_PBE + GGA_C_PBE.
COMPOSITES = {402: ((1, 0.08), (106, 0.72), (8, 0.19), (131, 0.81)),
              406: ((101, 0.75), (130, 1.0))}
#: libxc ids of the two VWN parametrisations of the local correlation: LDA_C_VWN (VWN5, the
#: form fitted to the Ceperley–Alder data) and LDA_C_VWN_RPA (the "RPA" form, VWN3-like).
VWN5_ID, VWN_RPA_ID = 7, 8
#: The LDA functional a GGA code's planted "LDA potential" is compared with (Slater
#: exchange + VWN5 correlation, pyscf's "lda,vwn").
LDA_FUNCTIONAL = "lda,vwn"


def _component_names() -> dict[int, str]:
    import re

    from pyscf.dft import libxc

    out: dict[int, str] = {}
    for name, code in libxc.XC_CODES.items():
        if isinstance(code, str) or not re.match(r"^(LDA|GGA|MGGA)_(X|C)(_|$)", name):
            continue
        out.setdefault(int(code), name)
    return out


def xc_components(functional: str) -> tuple[tuple[str, float], ...] | None:
    """The semi-local components of ``functional`` as (libxc name, coefficient), composite
    functionals expanded by :data:`COMPOSITES`; None when a component is not a pure
    exchange or correlation functional (e.g. ωB97X's range-separated GGA)."""
    from pyscf.dft import libxc

    names = _component_names()
    out: list[tuple[str, float]] = []
    for code, coef in libxc.parse_xc(functional)[1]:
        parts = COMPOSITES.get(int(code), ((int(code), 1.0),))
        for sub, c in parts:
            if int(sub) not in names:
                return None
            out.append((names[int(sub)], float(coef) * float(c)))
    return tuple(out)


def _mixture(components) -> str:
    return " + ".join(f"{c!r}*{n}" for n, c in components)


@dataclasses.dataclass(frozen=True)
class XCSplit:
    """A functional's semi-local part split for the Fock fit, as pyscf functional
    strings: ``exchange`` ("… ," form) and ``correlation`` (", …" form); None when the
    part is absent."""

    exchange: str | None
    correlation: str | None


def xc_split(functional: str) -> XCSplit | None:
    """:class:`XCSplit` of ``functional`` (None when :func:`xc_components` cannot split it)."""
    comps = xc_components(functional)
    if comps is None:
        return None
    x = [(n, c) for n, c in comps if n.split("_")[1] == "X"]
    cc = [(n, c) for n, c in comps if n.split("_")[1] == "C"]
    return XCSplit(exchange=f"{_mixture(x)}," if x else None,
                   correlation=f",{_mixture(cc)}" if cc else None)


def vwn_variant(functional: str) -> tuple[str, str] | None:
    """(pyscf string of ``functional`` with its VWN correlation in the other
    parametrisation, words naming the two) or None when it has no VWN component.
    E.g. "b3lyp" (VWN-RPA in pyscf) → the B3LYP mixture on VWN5, "VWN5 instead of VWN-RPA"."""
    comps = xc_components(functional)
    if comps is None:
        return None
    names = _component_names()
    vwn5, rpa = names[VWN5_ID], names[VWN_RPA_ID]
    have = {n for n, _ in comps}
    if vwn5 in have:
        swap, words = {vwn5: rpa}, "VWN-RPA (VWN3-style) instead of VWN5"
    elif rpa in have:
        swap, words = {rpa: vwn5}, "VWN5 instead of VWN-RPA (VWN3-style)"
    else:
        return None
    new = [(swap.get(n, n), c) for n, c in comps]
    x = [(n, c) for n, c in new if n.split("_")[1] == "X"]
    cc = [(n, c) for n, c in new if n.split("_")[1] == "C"]
    coeff = hybrid_coefficients(functional)
    hf = f"{coeff.hyb!r}*HF + " if coeff.hyb and not coeff.range_separated else ""
    return f"{hf}{_mixture(x)},{_mixture(cc)}", words


def unpartitioned_weights(mol, coords: np.ndarray, weights: np.ndarray) -> np.ndarray | None:
    """The weights of the same points without the atomic (Becke) partition: each point's
    weight in its own atom's radial × angular grid (pyscf ``gen_atomic_grids`` at
    GRID_LEVEL, GRID_SETTINGS), in the order of ``coords``; None when the points are not
    those of that grid (a grid not built by :func:`grid_arrays`)."""
    g = _grids(mol, GRID_LEVEL)
    tab = g.gen_atomic_grids(mol, g.atom_grid, g.radi_method, g.level, g.prune)
    cs, ws = [], []
    for ia in range(mol.natm):
        ac, aw = tab[mol.atom_symbol(ia)]
        cs.append(np.asarray(ac) + mol.atom_coord(ia))
        ws.append(np.asarray(aw))
    cs, ws = np.vstack(cs), np.concatenate(ws)
    coords = np.asarray(coords, dtype=float)
    if cs.shape != coords.shape:
        return None
    oa, ob = np.lexsort(coords.T[::-1]), np.lexsort(cs.T[::-1])
    if np.abs(coords[oa] - cs[ob]).max() > 1e-10:
        return None
    out = np.empty_like(ws)
    out[oa] = ws[ob]
    return out


def unpolarised_potential(mol, functional: str, d: np.ndarray, coords: np.ndarray,
                          weights: np.ndarray) -> np.ndarray:
    """V_xc (nao, nao) of the total density Pα + Pβ evaluated spin-unpolarised (what an
    unrestricted code gets when it calls the closed-shell XC routine), Eh."""
    total = np.asarray(d).sum(axis=0)[None]
    return xc_on_grid(mol, functional, total, coords, weights)[1][0]


def xc_with_grids(mol, grids, functional: str, d: np.ndarray) -> tuple[float, np.ndarray]:
    """(E_xc (Eh), V_xc (ns, nao, nao)) of ``functional`` at d (leading spin axis: one
    component unpolarised, two polarised) on a pyscf ``Grids`` object already built (an
    SCF loop's, see :class:`XCEvaluator`; the planted Kohn–Sham variants)."""
    from pyscf.dft import numint

    ni = numint.NumInt()
    d = np.ascontiguousarray(d, dtype=float)
    if len(d) == 1:
        _, e, v = ni.nr_rks(mol, grids, functional, d[0])
        return float(e), np.asarray(v)[None]
    _, e, v = ni.nr_uks(mol, grids, functional, d)
    return float(e), np.asarray(v)
