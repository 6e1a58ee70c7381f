"""Benchmark: the parallel speed-up of ``certify --jobs N`` on one machine.

Usage: python ci/bench_jobs.py [--suite standard | --matrix] [--jobs 2] [--repeat 1]
       [--plugin harness.testing.example_scf:solve]

Runs ``scf-harness certify --suite SUITE --plugin ... --quiet`` with ``--jobs 1`` and
with ``--jobs N`` as separate processes (the whole command, start-up included), checks
that both give the same verdicts, and prints the wall times (s) and their ratio
(``--jobs 1`` time / ``--jobs N`` time; best of ``--repeat`` runs each). Target on two
cores: ratio ≥ 1.7. The machine's load is printed with the figures: other work on the
same cores lowers the ratio.

Each run writes its timeline (``$SCF_HARNESS_TIMELINE``, harness.run.runner.timeline):
for the best run of each the script also prints the start-up before the first case
(the same in both: CLI imports, suite loading, the plug-in load check), the time from
the first case to the last (and its ratio: the speed-up of the parallel part), the
summed plug-in and check times, and the largest case's plug-in and check times (its
chain bounds the --jobs N run).

It also runs the same cases once more with ``--jobs 1`` and every thread pool at one
thread (``OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1``, plug-in
included): the *serial work* W. ``--jobs 1`` is faster than W by what pyscf's OpenMP
threads and the BLAS threads already get from the second core, and that bounds what
``--jobs N`` can add. With S the serial part of a run (start-up before the first case
and the tail after the last, from W's timeline), no schedule of W on N cores beats
S + (W − S)/N, so the printed **ceiling** of the ratio is ``--jobs 1`` time /
(S + (W − S)/N); the **process speed-up** W / ``--jobs N`` time is what the N
processes gain over one thread of work.

``--matrix`` runs the throughput matrix ``ci/throughput.toml`` (36 generated cases of
13–73 basis functions, the shape of a maintainer's nightly matrix) instead of a suite;
its references are computed once into a scratch folder before the timed runs.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]


#: The thread-pool variables of the serial-work run (set before any library loads).
ONE_THREAD = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}

MATRIX = REPO / "ci" / "throughput.toml"


def run(select: list[str], plugin: str, jobs: int, out: Path, attempt: int = 0,
        extra_env: dict | None = None) -> tuple[float, tuple]:
    env = dict(os.environ)
    env.update(extra_env or {})
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), env.get("PYTHONPATH")) if p)
    log = out.with_suffix(f".{attempt}.timeline.jsonl")  # one per run: phases of the best
    log.unlink(missing_ok=True)
    env["SCF_HARNESS_TIMELINE"] = str(log)
    wall = time.time()
    start = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "harness", "certify", plugin, *select,
                           "--jobs", str(jobs), "--quiet", "--json", str(out)], env=env,
                          capture_output=True, text=True)
    seconds = time.perf_counter() - start
    wall = (wall, wall + seconds)
    if done.returncode not in (0, 1):
        sys.exit(f"certify --jobs {jobs} failed: {done.stderr.strip()}")
    return seconds, (log, wall)


def phases(log: Path, wall: tuple[float, float], largest: str | None = None) -> dict:
    """Per-phase seconds from a run's timeline (see the module docstring); ``largest``:
    the case to detail (default: the first launched, the largest with --jobs N > 1)."""
    events: dict[str, dict[str, float]] = {}
    try:
        lines = log.read_text().splitlines()
    except OSError:
        return {}
    for line in lines:
        e = json.loads(line)
        events.setdefault(e["case"], {}).setdefault(e["event"], e["t"])
    top = events.pop("", {})
    if "run-start" not in top or "run-end" not in top:
        return {}

    def span(d, a, b):
        return d[b] - d[a] if a in d and b in d else 0.0

    first = largest if largest in events else min(
        events, key=lambda c: events[c].get("launch", float("inf")), default=None)
    big = events.get(first, {}) if first else {}
    return {"start-up": top["run-start"] - wall[0], "cases": span(top, "run-start", "run-end"),
            "tail": wall[1] - top["run-end"],
            "plug-in sum": sum(span(d, "plugin-start", "plugin-end") for d in events.values()),
            "checks sum": sum(span(d, "judge-start", "judge-end") for d in events.values()),
            "first case": first or "",
            "its plug-in": span(big, "plugin-start", "plugin-end"),
            "its checks": span(big, "judge-start", "judge-end"),
            "its preparation": span(big, "prepare-start", "prepared")}


def verdicts(path: Path) -> list[tuple[str, bool, tuple]]:
    data = json.loads(path.read_text())
    return [(c["name"], c["passed"], tuple((k["name"], k["status"]) for k in c["checks"]))
            for c in data["cases"]]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--suite", default="standard")
    parser.add_argument("--matrix", action="store_true",
                        help="the throughput matrix ci/throughput.toml instead of --suite")
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--repeat", type=int, default=1)
    parser.add_argument("--plugin", default="harness.testing.example_scf:solve")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        if args.matrix:
            refs = Path(tmp) / "references"
            select = ["--cases-file", str(MATRIX), "--references", str(refs)]
            run([*select, "--write-references"], args.plugin, 2, Path(tmp) / "warm.json")
            label = f"matrix {MATRIX.relative_to(REPO)}"
        else:
            select, label = ["--suite", args.suite], f"suite {args.suite}"
        serial, parallel, work = [], [], []
        same = True
        for attempt in range(max(1, args.repeat)):
            serial.append(run(select, args.plugin, 1, Path(tmp) / "one.json", attempt))
            parallel.append(run(select, args.plugin, args.jobs, Path(tmp) / "many.json",
                                attempt))
            work.append(run(select, args.plugin, 1, Path(tmp) / "work.json", attempt,
                            ONE_THREAD))
            same = same and (verdicts(Path(tmp) / "one.json")
                             == verdicts(Path(tmp) / "many.json")
                             == verdicts(Path(tmp) / "work.json"))
        (t1, l1), (tn, ln), (tw, lw) = (min(serial, key=lambda r: r[0]),
                                        min(parallel, key=lambda r: r[0]),
                                        min(work, key=lambda r: r[0]))
        pn = phases(*ln)
        p1 = phases(*l1, largest=pn.get("first case"))
        pw = phases(*lw)
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"{label}, plug-in {args.plugin}, {os.cpu_count()} cores, "
          f"load average {load:.1f} before the last run")
    print(f"--jobs 1: {t1:.1f} s wall (best of {len(serial)}; all: "
          f"{', '.join(f'{t:.1f}' for t, _ in serial)})")
    print(f"--jobs {args.jobs}: {tn:.1f} s wall (best of {len(parallel)}; all: "
          f"{', '.join(f'{t:.1f}' for t, _ in parallel)})")
    print(f"serial work (--jobs 1, one thread everywhere): {tw:.1f} s wall (best of "
          f"{len(work)}; all: {', '.join(f'{t:.1f}' for t, _ in work)})")
    print(f"same verdicts: {'yes' if same else 'NO'}")
    for jobs, p in ((1, p1), (args.jobs, pn)):
        if p:
            print(f"  --jobs {jobs} phases (s): start-up {p['start-up']:.1f}, cases "
                  f"{p['cases']:.1f} (plug-in sum {p['plug-in sum']:.1f}, checks sum "
                  f"{p['checks sum']:.1f}); largest case {p['first case']}: plug-in "
                  f"{p['its plug-in']:.1f}, checks {p['its checks']:.1f}"
                  + (f", prepared {p['its preparation']:.1f} ahead"
                     if p['its preparation'] else ""))
    if p1 and pn and pn["cases"] > 0:
        print(f"parallel part (first case to last) ratio: {p1['cases'] / pn['cases']:.2f}")
    print(f"speed-up ratio (jobs 1 / jobs {args.jobs}): {t1 / tn:.2f}")
    if pw:
        serial_part = pw["start-up"] + pw["tail"]
        best = serial_part + (tw - serial_part) / args.jobs
        print(f"process speed-up (serial work / jobs {args.jobs}): {tw / tn:.2f}; "
              f"threads' gain at --jobs 1 (serial work / jobs 1): {tw / t1:.2f}")
        print(f"ceiling of the speed-up ratio: {t1 / best:.2f} (jobs 1 / (S + (W - S)/"
              f"{args.jobs}), serial part S = {serial_part:.1f} s of W = {tw:.1f} s); "
              f"--jobs {args.jobs} reaches {best / tn:.0%} of the best schedule")
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
