"""Benchmark: time of all checks on one case, as a ratio to one pyscf SCF of the same case.

Usage: python ci/bench_checks.py [--case benzene-cc-pvdz-rhf] [--repeat 3]

Prints the core checks (stability off) and, separately, the stability analysis.

The solution checked is pyscf's own converged one (the plug-in's run is excluded from
the measurement by design; any converged solution costs the checks the same). The
check time covers everything ``certify`` does per case after the plug-in returns:
loading the stored reference, pyscf integrals, one J/K build, every kernel. Both
times are the best of ``--repeat`` runs. Target: ratio ≤ 0.10.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np  # noqa: E402

from harness.catalogue.cases import load_catalogue  # noqa: E402
from harness.verdict.evaluate import evaluate  # noqa: E402
from harness.catalogue.references import reference_for  # noqa: E402
from harness.contract.solution import extract  # noqa: E402


def pyscf_scf(problem):
    from pyscf import scf

    mol = problem.to_pyscf()
    mf = {"rhf": scf.RHF, "uhf": scf.UHF, "rohf": scf.ROHF}[problem.method](mol)
    mf.verbose = 0
    mf.kernel()
    return mf


def as_solution(mf, method):
    fock = mf.get_fock()
    out = {"energy": mf.e_tot, "coefficients": mf.mo_coeff, "occupations": mf.mo_occ,
           "density": mf.make_rdm1(), "converged": bool(mf.converged)}
    if method == "rohf":
        out["fock"] = np.stack([fock.focka, fock.fockb])
    else:
        out["fock"] = fock
        out["orbital_energies"] = mf.mo_energy
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--case", default="benzene-cc-pvdz-rhf")
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args(argv)

    case = load_catalogue().case(args.case)
    problem = case.problem()
    scf_times, check_times = [], []
    mf = None
    for _ in range(args.repeat):
        t = time.perf_counter()
        mf = pyscf_scf(problem)
        scf_times.append(time.perf_counter() - t)
    extracted = extract(as_solution(mf, problem.method))
    results = None
    full_times = []
    for _ in range(args.repeat):
        t = time.perf_counter()
        reference, _source = reference_for(case)
        results = evaluate(problem, extracted, reference, stability="off")
        check_times.append(time.perf_counter() - t)
    for _ in range(args.repeat):
        t = time.perf_counter()
        reference, _source = reference_for(case)
        evaluate(problem, extracted, reference, stability="internal")
        full_times.append(time.perf_counter() - t)
    failed = [r.message for r in results if r.passed is False]
    scf, checks, full = min(scf_times), min(check_times), min(full_times)
    print(f"case            {case.name} (nao = {problem.nao})")
    print(f"pyscf SCF       {scf:8.3f} s  (best of {args.repeat}, {mf.cycles} cycles)")
    print(f"all checks      {checks:8.3f} s  (stability off; best of {args.repeat})")
    print(f"ratio           {checks / scf:8.3f}  (target ≤ 0.10)")
    print(f"with stability  {full:8.3f} s  (--stability internal, the default)")
    print(f"stability alone {(full - checks) / scf:8.3f}  (ratio to one SCF; target ≤ 2)")
    if failed:
        print("checks that failed on pyscf's own solution (harness bug?):", *failed, sep="\n  ")
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
