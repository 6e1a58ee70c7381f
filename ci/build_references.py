"""Build or verify the stored pyscf references (references/data/*.json).

Usage (from the repository root):
    python ci/build_references.py build  [--suite S] [--force] [--directory DIR]
    python ci/build_references.py verify [--suite S] [--recompute] [--directory DIR]

Without --suite every catalogue case is handled. Energies are printed in hartree (Eh).
Exit status: 0 if every case is fine, 1 if a verification failed, 2 for usage errors.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from harness.catalogue.cases import load_catalogue  # noqa: E402
from harness.contract.errors import HarnessError  # noqa: E402
from harness.catalogue.references import build, default_data_dir, verify  # noqa: E402


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("action", choices=("build", "verify"))
    parser.add_argument("--suite", help="only the cases of this suite")
    parser.add_argument("--directory", type=Path, default=None,
                        help=f"reference data directory (default {default_data_dir()})")
    parser.add_argument("--force", action="store_true", help="build: recompute every case")
    parser.add_argument("--recompute", action="store_true",
                        help="verify: also recompute and compare total energies")
    args = parser.parse_args(argv)
    try:
        catalogue = load_catalogue()
        cases = catalogue.suite(args.suite) if args.suite else catalogue.cases
    except HarnessError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    start = time.perf_counter()
    ok = True
    if args.action == "build":
        for name, what in build(cases, args.directory, force=args.force):
            print(f"{name:28s} {what}", flush=True)
    else:
        for name, good, message in verify(cases, args.directory, recompute=args.recompute):
            ok &= good
            print(f"{name:28s} {'ok  ' if good else 'FAIL'} {message}", flush=True)
    print(f"{len(cases)} cases, {time.perf_counter() - start:.1f} s")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
