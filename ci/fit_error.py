"""Measure the relative error of the fitted J̃/K̃ of a density *difference*.

The difference route of ``harness.verdict.coulomb`` rests on one number,
FITTED_RELATIVE_ERROR: a bound on ‖X(J̃ − J)X‖ / ‖X J X‖ (and the same for K, Löwdin
basis, spectral norm; AO basis, Frobenius norm for the energy) for D = P − P_ref. This
script measures it: for each case, pyscf's SCF iterates whose commutator is at or below
--max-commutator give D = P_iter − P_converged; J/K of D are built exactly and with the
auxiliary basis under test, and the worst ratios are printed. Eh, bohr.

    python ci/fit_error.py                          # the auxiliary basis the harness uses
    python ci/fit_error.py --auxbasis pyscf-default # pyscf's J/K-fitting choice (JKFIT)
    python ci/fit_error.py --auxbasis def2-svp-jkfit
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from harness.backend import fitting  # noqa: E402
from harness.catalogue.cases import load_catalogue  # noqa: E402

CASES = ("water-cc-pvdz-rhf", "benzene-cc-pvdz-rhf", "n2-cc-pvdz-rhf", "o2-cc-pvdz-uhf",
         "hydroxide-6-31+gd-rhf", "co-6-31gd-rhf", "lih-cc-pvdz-rhf")


def measure(name: str, auxbasis: str | None, max_commutator: float):
    from pyscf import df, scf

    from harness.checks.orthonormal import lowdin

    case = load_catalogue().case(name)
    problem = case.problem()
    mol = problem.to_pyscf()
    mf = {"rhf": scf.RHF, "uhf": scf.UHF}[problem.method](mol)
    mf.verbose, mf.conv_tol = 0, 1e-12
    iterates = []
    mf.callback = lambda env: iterates.append(np.asarray(env["dm"]).copy())
    mf.kernel()
    s = mol.intor("int1e_ovlp")
    x = lowdin(s).x
    final = np.asarray(mf.make_rdm1())
    if auxbasis == "pyscf-default":
        fitting._auxmol = lambda m: df.addons.make_auxmol(m, df.make_auxbasis(m))
    elif auxbasis:
        fitting._auxmol = lambda m: df.addons.make_auxmol(m, auxbasis)
    fit = fitting.FittedJK(mol)
    worst = dict(j_lowdin=0.0, k_lowdin=0.0, j_ao=0.0, k_ao=0.0)
    used = 0
    for dm in iterates:
        fock = mf.get_fock(dm=dm)
        comm = max(float(np.abs(f @ p @ s - s @ p @ f).max())
                   for f, p in zip(np.reshape(fock, (-1,) + s.shape),
                                   np.reshape(dm, (-1,) + s.shape)))
        if comm > max_commutator:
            continue
        for d in np.reshape(dm - final, (-1,) + s.shape):
            if np.abs(d).max() < 1e-11:
                continue
            vj, vk = scf.hf.get_jk(mol, d)
            jj, kk = fit.j(d), fit.k(d)
            spec = lambda m: float(np.abs(np.linalg.eigvalsh(x @ m @ x)).max())  # noqa: E731
            worst["j_lowdin"] = max(worst["j_lowdin"], spec(jj - vj) / spec(vj))
            worst["k_lowdin"] = max(worst["k_lowdin"], spec(kk - vk) / spec(vk))
            worst["j_ao"] = max(worst["j_ao"], np.linalg.norm(jj - vj) / np.linalg.norm(vj))
            worst["k_ao"] = max(worst["k_ao"], np.linalg.norm(kk - vk) / np.linalg.norm(vk))
            used += 1
    return fit.naux, used, worst


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--auxbasis", default=None, help="pyscf auxiliary basis name, or "
                    "pyscf-default (pyscf.df.make_auxbasis); default: the harness's")
    ap.add_argument("--max-commutator", type=float, default=1e-4)
    ap.add_argument("--case", action="append")
    args = ap.parse_args(argv)
    overall = 0.0
    print(f"auxiliary basis: {args.auxbasis or fitting.AUXILIARY_BASIS + ' (the harness)'}")
    print(f"{'case':24s} {'naux':>5s} {'D':>3s} {'J Löwdin':>9s} {'K Löwdin':>9s} "
          f"{'J AO':>9s} {'K AO':>9s}")
    for name in args.case or CASES:
        naux, used, w = measure(name, args.auxbasis, args.max_commutator)
        overall = max([overall, *w.values()])
        print(f"{name:24s} {naux:5d} {used:3d} {w['j_lowdin']:9.1e} {w['k_lowdin']:9.1e} "
              f"{w['j_ao']:9.1e} {w['k_ao']:9.1e}")
    from harness.verdict.coulomb import FITTED_RELATIVE_ERROR
    print(f"worst relative error {overall:.1e}; FITTED_RELATIVE_ERROR = "
          f"{FITTED_RELATIVE_ERROR} ({FITTED_RELATIVE_ERROR / overall:.1f}× the worst)")
    return 0 if overall < FITTED_RELATIVE_ERROR else 1


if __name__ == "__main__":
    raise SystemExit(main())
