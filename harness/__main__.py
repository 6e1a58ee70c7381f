"""``python -m harness``: the ``scf-harness`` command line (see harness.cli)."""

from harness.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
