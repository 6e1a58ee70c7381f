"""Benchmark: time of the stability analysis on one case, as a ratio to one pyscf SCF.

Usage: python ci/bench_stability.py [--case benzene-cc-pvdz-rhf] [--repeat 3]

The solution analysed is pyscf's own converged one (a stable minimum, so no following
SCF runs: the figure is the cost every passing case pays). Timed: building the pyscf
mean-field object from the solution's orbitals and the Davidson search for the lowest
orbital-Hessian eigenvalue (``harness.verdict.states.stability``, mode "internal"), including
pyscf's integral set-up of that object. Both times are the best of ``--repeat`` runs.
Target: ratio ≤ 2.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from harness.catalogue.cases import load_catalogue  # noqa: E402
from harness.backend.integrals import integrals_for  # noqa: E402
from harness.contract.solution import extract  # noqa: E402
from harness.verdict.states import stability  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_checks import as_solution, pyscf_scf  # noqa: E402


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--case", default="benzene-cc-pvdz-rhf")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--mode", default="internal", choices=("internal", "external"))
    args = parser.parse_args(argv)

    case = load_catalogue().case(args.case)
    problem = case.problem()
    scf_times, stab_times = [], []
    mf = None
    for _ in range(args.repeat):
        t = time.perf_counter()
        mf = pyscf_scf(problem)
        scf_times.append(time.perf_counter() - t)
    sol = extract(as_solution(mf, problem.method))
    ints = integrals_for(problem)
    result = None
    for _ in range(args.repeat):
        t = time.perf_counter()
        result = stability(problem, sol, ints, mode=args.mode)
        stab_times.append(time.perf_counter() - t)
    scf, st = min(scf_times), min(stab_times)
    print(f"case            {case.name} (nao = {problem.nao})")
    print(f"pyscf SCF       {scf:8.3f} s  (best of {args.repeat}, {mf.cycles} cycles)")
    print(f"stability       {st:8.3f} s  (best of {args.repeat}, mode {args.mode}; "
          f"λ = {result.eigenvalue:.3e} Eh/rad², {result.kind})")
    print(f"ratio           {st / scf:8.3f}  (target ≤ 2)")
    if not result.stable:
        print("pyscf's own solution was reported unstable (harness bug?)")
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
