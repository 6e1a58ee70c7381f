"""J/K of the code's density: the difference route (stored J/K(P_ref) + fitted J/K(ΔP)),
its error bound, the exact fallback, and the stored density file. Eh, bohr."""

from __future__ import annotations

import dataclasses
import json
import shutil

import numpy as np
import pytest

from harness.backend.integrals import integrals_for
from harness.catalogue import references as refs
from harness.catalogue.cases import load_catalogue
from harness.checks import energy as _energy
from harness.checks.orthonormal import lowdin
from harness.contract.errors import ReferenceDataError
from harness.contract.solution import extract
from harness.verdict import coulomb
from harness.verdict.evaluate import evaluate

SELF_TOL, ENERGY_TOL = 1e-5, 1e-8  # the default self-/energy-consistency tolerances


@dataclasses.dataclass
class Setup:
    case: object
    problem: object
    ints: object
    x: np.ndarray
    mf: object
    reference: object


def _setup(name: str) -> Setup:
    from pyscf import scf

    case = load_catalogue().case(name)
    problem = case.problem()
    mol = problem.to_pyscf()
    mf = (scf.RHF if problem.method == "rhf" else scf.UHF)(mol)
    mf.conv_tol, mf.conv_tol_grad, mf.verbose = 1e-12, 1e-9, 0
    mf.kernel()
    d = np.asarray(mf.make_rdm1()).reshape(-1, mol.nao, mol.nao)
    reference = dataclasses.replace(refs.load_reference(case),
                                    density=refs.reference_density(mol, d))
    ints = integrals_for(problem)
    return Setup(case, problem, ints, lowdin(ints.s).x, mf, reference)


@pytest.fixture(scope="module")
def water():
    return _setup("water-cc-pvdz-rhf")


@pytest.fixture(scope="module")
def o2():
    return _setup("o2-cc-pvdz-uhf")


def rotated(mf, kappa: float, seed: int = 1):
    """Orbitals of ``mf`` after an occupied–virtual rotation exp(K), |K_ia| ≤ kappa, and
    their density (leading spin axis): a physical ΔP of size ~kappa."""
    from scipy.linalg import expm

    rng = np.random.default_rng(seed)
    cs = np.asarray(mf.mo_coeff).reshape(-1, *np.shape(mf.mo_coeff)[-2:])
    occs = np.asarray(mf.mo_occ).reshape(len(cs), -1)
    out_c, out_d = [], []
    for c, occ in zip(cs, occs):
        o, v = occ > 0, occ == 0
        k = np.zeros((len(occ), len(occ)))
        block = kappa * rng.uniform(-1, 1, (o.sum(), v.sum()))
        k[np.ix_(o, v)], k[np.ix_(v, o)] = block, -block.T
        cr = c @ expm(k)
        out_c.append(cr)
        out_d.append((cr * occ) @ cr.T)
    d = np.stack(out_d)
    return out_c, (d.sum(axis=0)[None] if len(d) == 1 and occs.max() == 2 else d)


def _commutator(f, d, s, x):
    return max(float(np.abs(x @ (fs @ ds @ s - s @ ds @ fs) @ x).max()) for fs, ds in zip(f, d))


@pytest.mark.parametrize("which", ["water", "o2"])
def test_difference_route_equals_exact_build_within_its_bound(which, request):
    st = request.getfixturevalue(which)
    _, d = rotated(st.mf, 1e-7)  # commutator ~5e-6: converged to the default threshold
    got = coulomb.coulomb_exchange(st.problem, st.ints, d, st.reference, st.x,
                                   fock_tolerance=SELF_TOL, energy_tolerance=ENERGY_TOL)
    assert got.route == "difference", got.reason
    assert 0 < got.fock_error <= coulomb.BOUND_FRACTION * SELF_TOL
    vj, vk = st.ints.jk_components(d)
    h, nspin = st.ints.h, len(d)
    f_exact = _energy.fock_from_terms(h, vj.sum(axis=0), vk, nspin)
    f_route = _energy.fock_from_terms(h, got.j_total, got.k, nspin)
    # the fitted part is not exact (the route is an approximation) ...
    assert np.abs(f_route - f_exact).max() > 1e-14
    # ... but its effect on the self-consistency measure stays within the stated bound
    gap = abs(_commutator(f_route, d, st.ints.s, st.x) - _commutator(f_exact, d, st.ints.s, st.x))
    assert gap <= got.fock_error
    e_exact = _energy.energy_terms(d, h, vj.sum(axis=0), vk, 0.0).total
    e_route = _energy.energy_terms_from_difference(d, got.d_ref, h, got.j_ref, got.k_ref,
                                                   got.j_diff, got.k_diff, 0.0).total
    assert abs(e_route - e_exact) <= got.energy_error <= coulomb.BOUND_FRACTION * ENERGY_TOL


def test_energy_from_difference_equals_the_functional_with_exact_differences(o2):
    _, d = rotated(o2.mf, 1e-2)
    rd = o2.reference.density
    jd, kd = o2.ints.jk_components(d - rd.density)
    vj, vk = o2.ints.jk_components(d)
    e = _energy.energy_terms(d, o2.ints.h, vj.sum(axis=0), vk, 1.0)
    e2 = _energy.energy_terms_from_difference(d, rd.density, o2.ints.h, rd.coulomb,
                                              rd.exchange, jd, kd, 1.0)
    assert abs(e.total - e2.total) < 1e-10 and abs(e.exchange - e2.exchange) < 1e-10


def test_a_planted_wrong_density_falls_back_to_the_exact_build(water):
    _, d = rotated(water.mf, 1e-2)  # a density far from the reference's
    got = coulomb.coulomb_exchange(water.problem, water.ints, d, water.reference, water.x,
                                   fock_tolerance=SELF_TOL, energy_tolerance=ENERGY_TOL)
    assert got.route == "exact"
    assert got.reason.startswith("|ΔP| too large for the fitted difference (bounds ")
    vj, vk = water.ints.jk_components(d)
    assert np.array_equal(got.j, vj) and np.array_equal(got.k, vk)


def test_a_tighter_tolerance_falls_back_where_the_default_keeps_the_route(water):
    _, d = rotated(water.mf, 1e-7)
    loose = coulomb.coulomb_exchange(water.problem, water.ints, d, water.reference, water.x,
                                     fock_tolerance=SELF_TOL, energy_tolerance=ENERGY_TOL)
    tight = coulomb.coulomb_exchange(water.problem, water.ints, d, water.reference, water.x,
                                     fock_tolerance=loose.fock_error,
                                     energy_tolerance=ENERGY_TOL)
    assert loose.route == "difference" and tight.route == "exact"


def test_without_a_reference_density_or_for_rohf_the_build_is_exact(water):
    d = np.asarray(water.mf.make_rdm1())[None]
    plain = dataclasses.replace(water.reference, density=None)
    got = coulomb.coulomb_exchange(water.problem, water.ints, d, plain, water.x,
                                   fock_tolerance=SELF_TOL, energy_tolerance=ENERGY_TOL)
    assert (got.route, got.reason) == ("exact", "the reference carries no density")
    rohf = dataclasses.replace(water.problem, method="rohf")
    got = coulomb.coulomb_exchange(rohf, water.ints, d, water.reference, water.x,
                                   fock_tolerance=SELF_TOL, energy_tolerance=ENERGY_TOL)
    assert (got.route, got.reason) == ("exact", "no difference route for ROHF")


def test_evaluate_gives_the_same_verdicts_by_either_route(water):
    c, d = rotated(water.mf, 1e-6)
    sol = {"energy": 0.0, "coefficients": c[0], "occupations": water.mf.mo_occ,
           "density": d[0], "converged": True}
    plain = dataclasses.replace(water.reference, density=None)
    e_exact = _energy.energy_terms(d, water.ints.h, *[a.sum(0) if i == 0 else a for i, a in
                                   enumerate(water.ints.jk_components(d))],
                                   water.ints.e_nuc).total
    sol["energy"] = e_exact
    by_route = evaluate(water.problem, extract(sol), water.reference, stability="off")
    exact = evaluate(water.problem, extract(sol), plain, stability="off")
    assert [r.status for r in by_route] == [r.status for r in exact]
    values = {r.name: (r.value, q.value) for r, q in zip(by_route, exact)}
    route_e, exact_e = values["energy-consistency"]
    assert exact_e < 1e-12 and route_e < 1e-10
    route_sc, exact_sc = values["self-consistency"]
    assert abs(route_sc - exact_sc) < 1e-7


# --------------------------------------------------------------------------- storage


def test_stored_density_file_round_trip_and_hash(water, tmp_path):
    path = refs.write_reference(water.reference, tmp_path)
    data = json.loads(path.read_text())
    entry = data["density_file"]
    assert entry["name"] == "water-cc-pvdz-rhf.density.npz"
    assert entry["sha256"].startswith("sha256:")
    back = refs.load_reference(water.case, tmp_path)
    assert np.array_equal(back.density.coulomb, water.reference.density.coulomb)
    assert np.array_equal(back.density.density, water.reference.density.density)
    npz = tmp_path / entry["name"]
    raw = bytearray(npz.read_bytes())
    raw[-40] ^= 1
    npz.write_bytes(bytes(raw))
    with pytest.raises(ReferenceDataError) as err:
        refs.load_reference(water.case, tmp_path)
    assert str(err.value).startswith(f"water-cc-pvdz-rhf: density_file: hash mismatch in {npz} ")
    npz.unlink()
    with pytest.raises(ReferenceDataError) as err:
        refs.load_reference(water.case, tmp_path)
    assert str(err.value) == f"water-cc-pvdz-rhf: density_file: density file {npz} is missing"


def test_large_stored_references_carry_their_density():
    cat = load_catalogue()
    big = [c for c in cat.cases if c.problem().nao >= refs.STORED_DENSITY_MIN_AO]
    assert big  # benzene/cc-pVDZ
    for case in big:
        ref = refs.load_reference(case)
        assert ref.density is not None and ref.density.density.shape[-1] == ref.nao
        p = ref.density.density.sum(axis=0)
        s = case.problem().to_pyscf().intor("int1e_ovlp")
        assert abs(np.einsum("pq,qp->", p, s) - case.n_electrons) < 1e-8


def test_packed_fitted_build_equals_the_full_tensor_fit(water):
    """The packed (p ≥ q) tensor, unpacked in blocks, gives the fit of the module docstring
    computed directly from the full (L|pq) and the metric inverse; and a wrong packing
    (diagonal weights not halved) would be caught."""
    import scipy.linalg
    from pyscf import df

    from harness.backend import fitting

    mol = water.ints.mol
    fit = fitting.FittedJK(mol)
    n = mol.nao
    assert fit.int3.shape == (fit.naux, n * (n + 1) // 2)  # no full naux × n² tensor kept
    aux = fitting._auxmol(mol)
    full = np.asarray(df.incore.aux_e2(mol, aux, "int3c2e", aosym="s1")).T  # (naux, n, n)
    metric_inv = scipy.linalg.inv(aux.intor("int2c2e"))
    _, d = rotated(water.mf, 1e-3)
    delta = d[0] - water.reference.density.density[0]
    j_ref = np.einsum("lpq,lm,mrs,rs->pq", full, metric_inv, full, delta, optimize=True)
    k_ref = np.einsum("lpr,lm,mqs,rs->pq", full, metric_inv, full, delta, optimize=True)
    scale = np.abs(k_ref).max()
    assert np.abs(fit.j(delta) - j_ref).max() <= 1e-10 * np.abs(j_ref).max()
    assert np.abs(fit.k(delta) - k_ref).max() <= 1e-10 * scale
    # planted: a tensor unpacked with the wrong weights no longer matches
    bad = fitting.FittedJK.__new__(fitting.FittedJK)
    bad.__dict__.update(fit.__dict__, _diag=np.array([], dtype=int))
    assert np.abs(bad.j(delta) - j_ref).max() > 1e-6 * np.abs(j_ref).max()


def test_matrix_product_kernels_equal_their_einsum_definitions(o2):
    """W = Σσ PσFσPσ, P = C n Cᵀ and Tr(PαSPβS) by matrix products (no n⁴ loops) equal
    the index formulas of their docstrings."""
    from harness.checks.integrals import energy_weighted_density
    from harness.checks.spin import density_from_orbitals
    from harness.verdict.states import spin_squared

    c = np.asarray(o2.mf.mo_coeff)
    occ = np.asarray(o2.mf.mo_occ, dtype=float)
    d = density_from_orbitals(c, occ)
    assert np.allclose(d, np.einsum("spi,si,sqi->spq", c, occ, c), atol=1e-14)
    f = np.asarray(o2.mf.get_fock())
    assert np.allclose(energy_weighted_density(d, f),
                       np.einsum("spq,sqr,srt->pt", d, f, d), atol=1e-12)
    assert np.allclose(energy_weighted_density(d[:1] * 2, f[:1]),
                       0.5 * np.einsum("pq,qr,rt->pt", 2 * d[0], f[0], 2 * d[0]), atol=1e-12)
    s = o2.ints.s
    na, nb = int(occ[0].sum()), int(occ[1].sum())
    expect = 0.5 * (na - nb) * (0.5 * (na - nb) + 1) + nb - np.einsum(
        "pq,qr,rs,sp->", d[0], s, d[1], s)
    assert abs(spin_squared(d, s, na, nb) - expect) < 1e-12
