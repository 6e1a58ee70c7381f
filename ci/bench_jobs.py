"""Benchmark: the parallel speed-up of ``certify --jobs N`` on one machine.

Usage: python ci/bench_jobs.py [--suite standard] [--jobs 2] [--repeat 1]
       [--plugin harness.testing.example_scf:solve]

Runs ``scf-harness certify --suite SUITE --plugin ... --quiet`` with ``--jobs 1`` and
with ``--jobs N`` as separate processes (the whole command, start-up included), checks
that both give the same verdicts, and prints the wall times (s) and their ratio
(``--jobs 1`` time / ``--jobs N`` time; best of ``--repeat`` runs each). Target on two
cores: ratio ≥ 1.7. The machine's load is printed with the figures: other work on the
same cores lowers the ratio.
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


def run(suite: str, plugin: str, jobs: int, out: Path) -> float:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), env.get("PYTHONPATH")) if p)
    start = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "harness", "certify", plugin, "--suite", suite,
                           "--jobs", str(jobs), "--quiet", "--json", str(out)], env=env,
                          capture_output=True, text=True)
    seconds = time.perf_counter() - start
    if done.returncode not in (0, 1):
        sys.exit(f"certify --jobs {jobs} failed: {done.stderr.strip()}")
    return seconds


def verdicts(path: Path) -> list[tuple[str, bool, tuple]]:
    data = json.loads(path.read_text())
    return [(c["name"], c["passed"], tuple((k["name"], k["status"]) for k in c["checks"]))
            for c in data["cases"]]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--suite", default="standard")
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--repeat", type=int, default=1)
    parser.add_argument("--plugin", default="harness.testing.example_scf:solve")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        serial, parallel = [], []
        for _ in range(max(1, args.repeat)):
            serial.append(run(args.suite, args.plugin, 1, Path(tmp) / "one.json"))
            parallel.append(run(args.suite, args.plugin, args.jobs, Path(tmp) / "many.json"))
        same = verdicts(Path(tmp) / "one.json") == verdicts(Path(tmp) / "many.json")
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"suite {args.suite}, plug-in {args.plugin}, {os.cpu_count()} cores, "
          f"load average {load:.1f} before the last run")
    print(f"--jobs 1: {min(serial):.1f} s wall (best of {len(serial)})")
    print(f"--jobs {args.jobs}: {min(parallel):.1f} s wall (best of {len(parallel)})")
    print(f"same verdicts: {'yes' if same else 'NO'}")
    print(f"speed-up ratio (jobs 1 / jobs {args.jobs}): {min(serial) / min(parallel):.2f}")
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
