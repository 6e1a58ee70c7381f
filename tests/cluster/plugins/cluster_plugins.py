"""Plug-ins for the cluster tests: the bundled example code, except on one named case
where each misbehaves in its own way. A plug-in runs in a child process of a Dask worker
(its parent is the worker's fork server, whose parent is the worker)."""

import os
import signal
import time
from pathlib import Path

CRASH_CASE = "water-sto-3g-rhf"
KILL_CASE = "oh-sto-3g-uhf"
SLOW_CASE = "nh2-sto-3g-rohf"


def _example(problem):
    from harness.testing.example_scf import solve

    return solve(problem)


def _worker_pid() -> int:
    """The Dask worker process: the parent of this child's parent (the fork server)."""
    stat = Path(f"/proc/{os.getppid()}/stat").read_text()
    return int(stat.rsplit(")", 1)[1].split()[1])


def crash_and_kill_once(problem):
    """Aborts (SIGABRT) on CRASH_CASE; on KILL_CASE kills its worker process the first
    time (a marker file in the current folder remembers it); solves every other case."""
    if problem.name == CRASH_CASE:
        os.abort()
    if problem.name == KILL_CASE:
        marker = Path("killed-once")
        if not marker.exists():
            marker.write_text(str(_worker_pid()))
            os.kill(_worker_pid(), signal.SIGKILL)
            time.sleep(30)
    return _example(problem)


def kills_worker(problem):
    """Kills its worker process on KILL_CASE, every time; solves every other case."""
    if problem.name == KILL_CASE:
        os.kill(_worker_pid(), signal.SIGKILL)
        time.sleep(30)
    return _example(problem)


def slow_on_one(problem):
    """Sleeps 60 s on SLOW_CASE (to be interrupted), solves every other case."""
    if problem.name == SLOW_CASE:
        time.sleep(60)
    return _example(problem)
