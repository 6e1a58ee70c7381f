"""Benchmark: the checks' cost against one pyscf SCF of the same case, and its growth with n.

Usage: python ci/bench_checks.py [--case benzene-cc-pvdz-rhf] [--repeat 3] [--max-ao 400]
       [--min-ao 0] [--growth-only] [--fitting-max-gib G] [--ks] [--ks-functional b3lyp]

One run prints:

1. the check-cost ratio: all checks of one case (stability off) / one pyscf SCF of the
   same case (target ≤ 0.10), with how J/K of the code's density was built (the
   difference route J/K(P_ref) + fitted J/K(ΔP), or exact; ``harness.verdict.coulomb``);
2. the stability ratio: the stability analysis alone (``--stability internal``, the
   default) / one pyscf SCF (target ≤ 2);
3. the growth table on the ``large`` suite (references/suites/large.toml, synthetic
   n-alkanes in cc-pVDZ, cases up to ``--max-ao`` functions; 0 skips it): n AO, checks
   time, peak memory of the checks (tracemalloc: every numpy array they allocate), one
   pyscf SCF, the dense kernels' time (the checks with integrals and J/K given) and the
   GEMM floor: the time of the GEMM_COUNT n×n matrix products and one n×n eigh the
   kernels need, measured in this run, with the ratio kernels / floor (target ≤ 3);
   kernels and floor are the best of 3.
   It also asserts that the checks never call ``eri()`` (the n⁴ tensor) when the code
   did not report ``two_electron``. The last two columns: the checks' time (and its
   ratio to the SCF) when the case's reference is stored with its density, as
   ``certify`` meets a catalogue case of ≥ 100 AO (:func:`with_stored_reference`), and
   the J/K route they took (difference, or exact past the fitted tensor's memory cap).

With ``--ks`` (slow: a pyscf KS SCF on the pinned grid) it also prints the Kohn–Sham line
(:func:`ks_cost`): the case's molecule as RKS with ``--ks-functional`` (default b3lyp) on
the pinned grid; one V_xc evaluation on that grid (what the XC part of the checks costs,
``harness.verdict.xc``) beside the J/K build, and its ratio to one pyscf KS SCF.

The SCF runs with the process's default threads, as a user's pyscf would; the checks
with theirs (``harness.backend.threads``: one BLAS thread below
SINGLE_BLAS_THREAD_BELOW_AO functions), as ``certify`` runs them.

The solution checked is pyscf's own converged one (the plug-in's run is excluded by
design; any converged solution costs the checks the same). The check time covers what
``certify`` does per case after the plug-in returns: loading the stored reference (with
its density file), pyscf integrals, J/K, every kernel. Times are the best of
``--repeat`` runs (the growth table: one run each). Large-suite references are not
stored (too slow to build); the checks there run without a reference (reference-energy
is one subtraction), so J/K is the exact build, the cost a case without a stored
reference density pays.
"""

from __future__ import annotations

import argparse
import sys
import time
import tracemalloc
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from harness.catalogue.cases import load_catalogue, load_suite_file  # noqa: E402
from harness.catalogue.references import reference_for  # noqa: E402
from harness.contract.solution import extract  # noqa: E402
from harness.verdict import evaluate as _evaluate_module  # noqa: E402
from harness.verdict.evaluate import evaluate  # noqa: E402

#: n×n matrix products the dense kernels do on an RHF solution with Fock matrix and
#: orbital energies (counted in the code): Löwdin X, S^½ and projector 3; CᵀSC 2;
#: idempotency 2; stationarity and self-consistency X(FPS − SPF)X 6 each; Roothaan–Hall
#: 3; energy-error-bound (orbital transforms of F and the semicanonical blocks) 6; the
#: difference route's bounds (X J X, X K X) 4; the energy-weighted density ½PFP 2 and
#: the density C n Cᵀ 1 (matrix products since 2026-12-03, before an n⁴ einsum loop).
#: Plus one n×n eigh (the overlap).
GEMM_COUNT = 35

LARGE_SUITE = ROOT / "references" / "suites" / "large.toml"


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


class _Watch:
    """Records the J/K route and time of ``coulomb_exchange`` and every ``eri()`` call."""

    def __init__(self):
        self.routes, self.jk_seconds, self.eri_calls, self.last = [], [], 0, None

    def __enter__(self):
        from harness.backend.integrals import AOIntegrals

        self._orig_jk = _evaluate_module.coulomb_exchange
        self._orig_eri = AOIntegrals.eri
        watch = self

        def timed(*args, **kwargs):
            t = time.perf_counter()
            out = watch._orig_jk(*args, **kwargs)
            watch.jk_seconds.append(time.perf_counter() - t)
            watch.routes.append(f"{out.route} ({out.reason})")
            watch.last = out
            return out

        def eri(self_ints):
            watch.eri_calls += 1
            return watch._orig_eri(self_ints)

        _evaluate_module.coulomb_exchange = timed
        AOIntegrals.eri = eri
        return self

    def __exit__(self, *exc):
        from harness.backend.integrals import AOIntegrals

        _evaluate_module.coulomb_exchange = self._orig_jk
        AOIntegrals.eri = self._orig_eri


def gemm_floor(n: int, repeat: int = 3) -> float:
    """Seconds for GEMM_COUNT products of n×n matrices and one n×n eigh (best of repeat)."""
    rng = np.random.default_rng(0)
    a, b = rng.standard_normal((n, n)), rng.standard_normal((n, n))
    sym = a + a.T
    best = np.inf
    for _ in range(repeat):
        t = time.perf_counter()
        for _ in range(GEMM_COUNT):
            a @ b
        np.linalg.eigh(sym)
        best = min(best, time.perf_counter() - t)
    return best


def check_cost(case_name: str, repeat: int) -> int:
    case = load_catalogue().case(case_name)
    problem = case.problem()
    scf_times, check_times, full_times = [], [], []
    mf = None
    results = None
    # interleaved (SCF, checks, checks with stability) rounds, so that a shared machine's
    # changing load falls on all three alike
    with _Watch() as watch:
        for _ in range(repeat):
            t = time.perf_counter()
            mf = pyscf_scf(problem)
            scf_times.append(time.perf_counter() - t)
            extracted = extract(as_solution(mf, problem.method))
            t = time.perf_counter()
            reference, _source = reference_for(case)
            results = evaluate(problem, extracted, reference, stability="off")
            check_times.append(time.perf_counter() - t)
            t = time.perf_counter()
            reference, _source = reference_for(case)
            evaluate(problem, extracted, reference, stability="internal")
            full_times.append(time.perf_counter() - t)
    failed = [r.message for r in results if r.passed is False]
    scf, checks, full = min(scf_times), min(check_times), min(full_times)
    print(f"case            {case.name} (nao = {problem.nao})")
    print(f"pyscf SCF       {scf:8.3f} s  (best of {repeat}, {mf.cycles} cycles)")
    print(f"all checks      {checks:8.3f} s  (stability off; best of {repeat})")
    print(f"  of which J/K  {min(watch.jk_seconds):8.3f} s  route: {watch.routes[-1]}")
    print(f"check-cost ratio{checks / scf:8.3f}  (checks / one SCF; target ≤ 0.10)")
    from harness.backend.threads import SINGLE_BLAS_THREAD_BELOW_AO, blas_threads

    print(f"BLAS threads    SCF {blas_threads()}, checks "
          f"{1 if problem.nao < SINGLE_BLAS_THREAD_BELOW_AO else blas_threads()} "
          f"(harness.backend.threads: one below {SINGLE_BLAS_THREAD_BELOW_AO} AO)")
    print(f"with stability  {full:8.3f} s  (--stability internal, the default)")
    print(f"stability ratio {(full - checks) / scf:8.3f}  (stability alone / one SCF; "
          f"target ≤ 2)")
    if failed:
        print("checks that failed on pyscf's own solution (harness bug?):", *failed, sep="\n  ")
        return 1
    return 0


def with_stored_reference(case, problem, mf):
    """``(reference, solution)`` for timing the checks as ``certify`` runs them on a case
    whose reference is stored with its density (``references build``, n ≥
    STORED_DENSITY_MIN_AO): the reference is the bench's own converged pyscf RHF (energy
    terms, orbitals, density and its exact J/K, as the build stores them; the build's
    guesses and stability following are skipped, they would find the same state here at
    several times the cost), and the code's solution is one more Roothaan–Hall step from
    it, F[P_ref] C = S C ε, so that it differs from the reference by what a code
    converged to the default threshold differs by (ΔP ~ its commutator), with its own
    exact Fock matrix and energy. Both are built outside the timed part. RHF only."""
    import scipy.linalg

    from harness.backend.integrals import exact_jk_components
    from harness.catalogue.references import (Reference, ReferenceDensity, input_hash,
                                              reference_density)

    assert problem.method == "rhf"
    mol = mf.mol
    h, s = mf.get_hcore(), mf.get_ovlp()
    p_ref = np.asarray(mf.make_rdm1())
    rd: ReferenceDensity = reference_density(mol, p_ref[None])
    j, k = rd.coulomb[0], rd.exchange[0]
    e_nuc = float(mol.energy_nuc())
    terms = (float(np.sum(p_ref * h)), 0.5 * float(np.sum(p_ref * j)),
             -0.25 * float(np.sum(p_ref * k)))
    reference = Reference(
        case=case.name, input_hash=input_hash(case), method="rhf", basis=case.basis,
        cartesian=case.cartesian, charge=case.charge, multiplicity=case.multiplicity,
        energy=e_nuc + sum(terms), energy_nuclear=e_nuc, energy_one_electron=terms[0],
        energy_coulomb=terms[1], energy_exchange=terms[2], orbital_energies=mf.mo_energy,
        occupations=mf.mo_occ, s_squared=0.0, dipole=np.zeros(3), nao=problem.nao,
        nmo=len(mf.mo_energy), converged=True, stable=True, stability_rounds=0, density=rd)
    eps, c = scipy.linalg.eigh(h + j - 0.5 * k, s)
    occ = np.asarray(mf.mo_occ)
    p = (c * occ) @ c.T
    (j1,), (k1,) = exact_jk_components(mol, p[None])
    fock = h + j1 - 0.5 * k1
    energy = e_nuc + float(np.sum(p * h)) + 0.5 * float(np.sum(p * j1)) \
        - 0.25 * float(np.sum(p * k1))
    solution = {"energy": energy, "coefficients": c, "occupations": occ, "density": p,
                "fock": fock, "orbital_energies": eps, "converged": True}
    return reference, extract(solution)


def growth(max_ao: int, min_ao: int = 0, stored_reference: bool = True) -> int:
    """The growth table (module docstring, item 3); with ``stored_reference`` also the
    checks' time (and its ratio to the SCF) with a stored reference of the case
    (:func:`with_stored_reference`) and the J/K route it took."""
    from harness.backend.integrals import integrals_for

    cases = [c for c in load_suite_file(LARGE_SUITE)
             if min_ao <= c.problem().nao <= max_ao]
    if not cases:
        return 0
    print()
    print(f"growth (large suite, cases with {min_ao} ≤ n ≤ {max_ao} AO; 'checks': no reference, "
          f"J/K exact; 'stored ref': the reference stored with its density)")
    print(f"{'n AO':>6} {'SCF s':>9} {'checks s':>9} {'ratio':>6} {'J/K s':>8} {'peak MB':>8} "
          f"{'kernels s':>10} {'GEMM s':>8} {'k/GEMM':>7} {'eri()':>6} "
          f"{'stored ref s':>15} {'J/K route':>10}")
    status = 0
    for case in cases:
        problem = case.problem()
        n = problem.nao
        t = time.perf_counter()
        mf = pyscf_scf(problem)
        scf = time.perf_counter() - t
        extracted = extract(as_solution(mf, problem.method))
        with _Watch() as watch:
            tracemalloc.start()
            t = time.perf_counter()
            results = evaluate(problem, extracted, None, stability="off")
            checks = time.perf_counter() - t
            _, peak = tracemalloc.get_traced_memory()
            tracemalloc.stop()
            jk = watch.last
            ints = integrals_for(problem)
            # the kernels alone: integrals given, J/K handed back from the run above
            _evaluate_module.coulomb_exchange = lambda *a, **k: jk
            kernels = np.inf
            for _ in range(3):
                t = time.perf_counter()
                evaluate(problem, extracted, None, integrals=ints, stability="off")
                kernels = min(kernels, time.perf_counter() - t)
        floor = gemm_floor(n)
        stored = stored_route = "-"
        if stored_reference:
            reference, solution = with_stored_reference(case, problem, mf)
            with _Watch() as watch_stored:
                t = time.perf_counter()
                results_stored = evaluate(problem, solution, reference, stability="off")
                seconds = time.perf_counter() - t
            stored = f"{seconds:.2f} ({seconds / scf:.3f})"
            stored_route = watch_stored.routes[-1].split(" ")[0]
            results = [*results, *results_stored]
        del mf
        print(f"{n:6d} {scf:9.2f} {checks:9.2f} {checks / scf:6.3f} {watch.jk_seconds[0]:8.2f} "
              f"{peak / 2**20:8.1f} {kernels:10.3f} {floor:8.3f} {kernels / floor:7.2f} "
              f"{watch.eri_calls:6d} {stored:>15} {stored_route:>10}", flush=True)
        failed = [r.message for r in results if r.passed is False]
        if failed or watch.eri_calls:
            print("  problem:", *failed, f"eri() called {watch.eri_calls} times", sep="\n  ")
            status = 1
    print(f"peak MB: tracemalloc peak of the checks; n⁴ doubles would be "
          f"{cases[-1].problem().nao ** 4 * 8 / 2**20:.0f} MB at the largest n")
    return status

def ks_cost(case_name: str, functional: str, repeat: int) -> int:
    """One printed line: the XC part of the checks (one V_xc evaluation on the pinned grid,
    ``harness.backend.grid.xc_on_grid``) beside the J/K build, and each as a fraction of
    one pyscf RKS SCF of the same molecule on the same grid; the checks run with
    stability off and without a reference (the KS reference is not stored for this
    case; reference-energy is one subtraction)."""
    from pyscf import dft

    from harness.backend import grid as _grid
    from harness.contract.problem import Problem

    case = load_catalogue().case(case_name)
    problem = Problem.create(name=case.name.replace("-rhf", "-rks"), numbers=case.numbers,
                             coordinates=case.coordinates, charge=case.charge,
                             multiplicity=case.multiplicity, basis=case.basis,
                             cartesian=case.cartesian, method="rks", functional=functional)
    mol = problem.to_pyscf()
    mf = dft.RKS(mol)
    mf.xc = functional
    mf.grids = _grid.pyscf_grids(mol, problem.grid.coords, problem.grid.weights)
    mf.verbose = 0
    t = time.perf_counter()
    mf.kernel()
    scf = time.perf_counter() - t
    d = mf.make_rdm1()
    xc_times = []
    for _ in range(repeat):
        t = time.perf_counter()
        _grid.xc_on_grid(mol, functional, d[None], problem.grid.coords, problem.grid.weights)
        xc_times.append(time.perf_counter() - t)
    out = {"energy": mf.e_tot, "coefficients": mf.mo_coeff, "occupations": mf.mo_occ,
           "density": d, "fock": mf.get_fock(), "orbital_energies": mf.mo_energy,
           "converged": bool(mf.converged)}
    with _Watch() as watch:
        t = time.perf_counter()
        results = evaluate(problem, extract(out), None, stability="off")
        checks = time.perf_counter() - t
    xc, jk = min(xc_times), min(watch.jk_seconds)
    print(f"KS {functional} {problem.name} (nao = {problem.nao}, {problem.grid.size} grid "
          f"points): pyscf KS SCF {scf:.2f} s ({mf.cycles} cycles); checks {checks:.2f} s; "
          f"V_xc once {xc:.3f} s, J/K {jk:.3f} s; XC/SCF ratio {xc / scf:.3f}, "
          f"checks/SCF {checks / scf:.3f}")
    failed = [r.message for r in results if r.passed is False and r.name != "reference-energy"]
    if failed:
        print("KS checks that failed on pyscf's own solution:", *failed, sep="\n  ")
        return 1
    return 0


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--case", default="benzene-cc-pvdz-rhf")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--max-ao", type=int, default=400,
                        help="largest large-suite case of the growth table (0: none)")
    parser.add_argument("--min-ao", type=int, default=0,
                        help="smallest large-suite case of the growth table")
    parser.add_argument("--no-stored-reference", action="store_true",
                        help="growth table without the stored-reference column (saves "
                             "two exact J/K builds per case)")
    parser.add_argument("--fitting-max-gib", type=float, default=None,
                        help="the fitted tensor's memory cap for this run (GiB; default "
                             "harness.backend.fitting.FITTING_MAX_BYTES): what the "
                             "difference route would cost on a case over the cap")
    parser.add_argument("--growth-only", action="store_true",
                        help="the growth table alone (no check-cost and stability lines)")
    parser.add_argument("--ks", action="store_true",
                        help="also the Kohn–Sham line (slow: one pyscf KS SCF)")
    parser.add_argument("--ks-functional", default="b3lyp")
    args = parser.parse_args(argv)
    if args.fitting_max_gib is not None:
        from harness.backend import fitting

        fitting.FITTING_MAX_BYTES = int(args.fitting_max_gib * 2**30)
        print(f"fitted tensor cap for this run: {args.fitting_max_gib:g} GiB")
    if args.ks:
        status = ks_cost(args.case, args.ks_functional, args.repeat)
        if args.max_ao == 0:
            return status
    status = 0 if args.growth_only else check_cost(args.case, args.repeat)
    return max(status, growth(args.max_ao, args.min_ao,
                              stored_reference=not args.no_stored_reference))


if __name__ == "__main__":
    raise SystemExit(main())
