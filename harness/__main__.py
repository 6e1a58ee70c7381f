"""``python -m harness``: the ``scf-harness`` command line (see harness.ui.cli)."""

from harness.ui.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
