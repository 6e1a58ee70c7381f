"""The Kohn–Sham pieces of the same-density diagnosis: the backend's split of a functional
into exchange and correlation (checked against pyscf's own evaluation), the VWN variant,
the unpartitioned weights, the Fock fit on synthetic Fock matrices (a wrong fraction is
named, the right one gives no hint), and the cost of a passing case (one V_xc
evaluation). Bohr, Eh.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest

from harness.backend import grid as G
from harness.backend.integrals import integrals_for
from harness.catalogue.cases import load_catalogue
from harness.catalogue.references import reference_for
from harness.contract.solution import extract
from harness.testing import example_scf
from harness.verdict import xc as X
from harness.verdict import xc_diagnosis as xd
from harness.verdict.judge import JudgeSettings, judge


@functools.lru_cache(maxsize=None)
def solved():
    """(problem, ints, solution) of water/STO-3G LDA from the example code."""
    problem = load_catalogue().case("water-sto-3g-rks-lda").problem()
    return problem, integrals_for(problem), extract(example_scf.solve(problem))


def water():
    """(problem, ints, density (1, nao, nao)) of water/STO-3G LDA from the example code."""
    problem, ints, sol = solved()
    return problem, ints, np.asarray(sol.density)[None]


@pytest.mark.parametrize("functional", ["b3lyp", "b3lyp5", "pbe0", "pbe", "lda,vwn"])
def test_split_adds_up_to_the_functional(functional):
    """E_xc[V_x part] + E_xc[V_c part] = E_xc[functional] (pyscf's evaluation, composites
    included) to 1e-10 Eh; so does V_xc."""
    problem, ints, d = water()
    c, w = problem.grid.coords, problem.grid.weights
    split = G.xc_split(functional)
    ex, vx, _ = G.xc_on_grid(ints.mol, split.exchange, d, c, w)
    ec, vc, _ = G.xc_on_grid(ints.mol, split.correlation, d, c, w)
    e, v, _ = G.xc_on_grid(ints.mol, functional, d, c, w)
    assert abs(ex + ec - e) < 1e-10
    assert np.abs(vx + vc - v).max() < 1e-10
    assert abs(ec) > 1e-2 and abs(ex) > 1.0  # both parts are really there


def test_split_and_variant_names():
    assert G.xc_split("wb97x") is None  # range-separated GGA exchange: not split
    assert G.vwn_variant("pbe") is None
    b3, words = G.vwn_variant("b3lyp")
    assert "LDA_C_VWN " in b3 + " " and "RPA" not in b3 and words.startswith("VWN5")
    b5, words = G.vwn_variant("b3lyp5")
    assert "LDA_C_VWN_RPA" in b5 and words.startswith("VWN-RPA")


def test_vwn_variant_is_the_other_pyscf_name():
    """pyscf's "b3lyp5" is the VWN5 variant of its "b3lyp": same E_xc to 1e-10 Eh."""
    problem, ints, d = water()
    c, w = problem.grid.coords, problem.grid.weights
    e5 = G.xc_on_grid(ints.mol, "b3lyp5", d, c, w)[0]
    ev = G.xc_on_grid(ints.mol, G.vwn_variant("b3lyp")[0], d, c, w)[0]
    e3 = G.xc_on_grid(ints.mol, "b3lyp", d, c, w)[0]
    assert abs(e5 - ev) < 1e-10 and abs(e5 - e3) > 1e-2


def test_unpartitioned_weights():
    """One atom: the Becke partition is 1, the weights are the same. A molecule: larger
    in total; points of another grid: None."""
    he = load_catalogue().case("he-atom-6-31g-rks-lda").problem()
    mol = integrals_for(he).mol
    w0 = G.unpartitioned_weights(mol, he.grid.coords, he.grid.weights)
    assert np.allclose(w0, he.grid.weights, rtol=1e-12, atol=0)
    problem, ints, _ = water()
    c, w = problem.grid.coords, problem.grid.weights
    w0 = G.unpartitioned_weights(ints.mol, c, w)
    assert w0.sum() > 1.5 * w.sum()
    assert G.unpartitioned_weights(ints.mol, c + 0.1, w) is None


def _hybrid(problem, ints, d):
    """The water LDA density judged as B3LYP: (problem, xc pieces, J, K, V_x + V_c pieces)."""
    p = problem.replace(functional="b3lyp")
    vj, vk = ints.jk(d)
    return p, X.xc_pieces(p, ints, d), vj, vk


def test_fit_names_a_wrong_exchange_fraction_and_passes_the_right_one():
    problem, ints, d = water()
    p, xc, vj, vk = _hybrid(problem, ints, d)
    right = ints.h + vj - 0.5 * 0.2 * vk[0] + xc.potential[0]
    wrong = ints.h + vj - 0.5 * 0.3 * vk[0] + xc.potential[0]
    assert xd.ks_fock_diagnosis(p, ints, d, right[None], vj, vk, xc)[0] is None
    hint = xd.ks_fock_diagnosis(p, ints, d, wrong[None], vj, vk, xc)[0]
    assert hint == ("wrong exact-exchange fraction: fitted c_x = 0.300, expected 0.200 for "
                    "'b3lyp': Fock ≈ 1.00 H + 1.00 J + 0.30 K + 1.00 V_x + 1.00 V_c "
                    "(expected 0.20 K), residual ≤ 1e-06")


def test_fit_without_a_matching_alternative_gives_the_fitted_form_or_nothing():
    """A Fock matrix with noise fits nothing confidently: no named hint."""
    problem, ints, d = water()
    p, xc, vj, vk = _hybrid(problem, ints, d)
    rng = np.random.default_rng(1)
    noise = rng.normal(scale=1e-2, size=ints.h.shape)
    f = ints.h + vj - 0.1 * vk[0] + xc.potential[0] + noise + noise.T
    hint = xd.ks_fock_diagnosis(p, ints, d, f[None], vj, vk, xc)[0]
    assert hint is None


def test_passing_case_evaluates_the_functional_once(monkeypatch):
    """The XC part of the checks of a passing case: one xc_on_grid call (the diagnosis,
    with its extra regressors, runs only after a failure: then more)."""
    problem, ints, sol = solved()
    reference, _ = reference_for(load_catalogue().case(problem.name))
    calls = []
    real = G.xc_on_grid
    monkeypatch.setattr(G, "xc_on_grid", lambda *a, **k: calls.append(a[1]) or real(*a, **k))
    judge(problem, sol, reference, JudgeSettings(), integrals=ints)
    assert calls == ["lda,vwn"]
    calls.clear()
    bad = sol.replace(energy=float(sol.energy) + 1e-3)
    judge(problem, bad, reference, JudgeSettings(), integrals=ints)
    assert len(calls) > 1
