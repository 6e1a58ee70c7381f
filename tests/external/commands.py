"""Plug-in functions that run external codes through CommandPlugin, for the runner tests.

Load them as ``tests/external/commands.py:<name>``. Each builds its CommandPlugin from
absolute paths, so the harness's working directory does not matter. Scratch
directories go under SCRATCH; ``sleeper`` writes its pid beside its scratch directory
(``<dir>.pid``) so a test can check that a timeout left nothing running.
"""

from __future__ import annotations

import hashlib
import os
import sys
import tempfile
from pathlib import Path

from harness.run.external import CommandPlugin

HERE = Path(__file__).resolve().parent
#: One scratch root per checkout and per pytest-xdist worker (the tests look for the pid
#: files of their own sleeper only; a shared root let two runs see each other's).
SCRATCH = Path(tempfile.gettempdir()) / (
    "scf-harness-external-tests-" + hashlib.sha256(str(HERE).encode()).hexdigest()[:8]
    + "-" + os.environ.get("PYTEST_XDIST_WORKER", "main"))
PY = sys.executable


def _run(template: str, problem, **options):
    return CommandPlugin(template, scratch_root=SCRATCH, **options)(problem)


def lab_code(problem):
    """The example SCF code as a separate process, .npz out."""
    return _run(f"{PY} {HERE / 'lab_code.py'} --in {{problem}} --out {{solution}}", problem)


def exits_3(problem):
    return _run(f"{PY} {HERE / 'bad_code.py'} exit3", problem)


def segfaults(problem):
    return _run(f"{PY} {HERE / 'bad_code.py'} segv", problem)


def writes_nothing(problem):
    return _run(f"{PY} {HERE / 'bad_code.py'} nothing", problem)


def sleeper(problem):
    return _run(f"{PY} {HERE / 'bad_code.py'} sleep --pidfile {{dir}}.pid", problem)
