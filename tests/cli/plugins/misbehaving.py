"""Throw-away plug-ins that misbehave in one way each, for the runner and CLI tests.

Each is a plug-in function ``name(problem)``; the first-case variants fail on the
first case only (h2-sto-3g-rhf) and hand every other case to the bundled example code,
so a test can see that the run goes on.
"""

import os
import signal
import sys
import time

FIRST_CASE = "h2-sto-3g-rhf"

#: Not a function: loading ``misbehaving:NOT_CALLABLE`` must fail.
NOT_CALLABLE = 42


def _example(problem):
    from harness.testing.example_scf import solve

    return solve(problem)


def _divide(a, b):
    return a / b


def raises_on_first(problem):
    """Raises ValueError on the first case, solves the others correctly."""
    if problem.name == FIRST_CASE:
        raise ValueError(f"planted failure on {problem.name}")  # line asserted by the tests
    return _example(problem)


def raises_deep(problem):
    """Raises ZeroDivisionError in a helper: the error must name the helper's line."""
    return {"energy": _divide(1.0, 0.0)}


def sleeps(problem):
    """Never finishes in time (60 s)."""
    time.sleep(60)
    return {}


def sleeps_after_first(problem):
    """Solves the first case, then sleeps 60 s on every other one."""
    if problem.name != FIRST_CASE:
        time.sleep(60)
    return constant(problem)


def sleeps_briefly(problem):
    """Sleeps 1.5 s, then returns a constant answer (for timing --jobs)."""
    time.sleep(1.5)
    return constant(problem)


def segfaults(problem):
    """Kills its own process with SIGSEGV, as a crashing native library would."""
    os.kill(os.getpid(), signal.SIGSEGV)
    time.sleep(5)
    return {}


def hard_exit(problem):
    """Leaves the process with exit code 3 without returning."""
    sys.stdout.flush()
    os._exit(3)


def calls_sys_exit(problem):
    """Calls sys.exit(4): a SystemExit from a plug-in is a failure, not a harness exit."""
    sys.exit(4)


def returns_string(problem):
    """Returns a string instead of a mapping."""
    return "converged, trust me"


def missing_keys(problem):
    """Returns a mapping without coefficients and occupations."""
    return {"energy": -1.0}


def constant(problem):
    """A fixed, well-formed-looking answer for H2/STO-3G (two AOs); energies in Eh."""
    return {"energy": -1.1167, "coefficients": [[0.5489, 1.2114], [0.5489, -1.2114]],
            "occupations": [2.0, 0.0], "converged": True}


def leaves_a_grandchild(problem):
    """Starts ``sleep 97 &`` through a shell (the shell exits, the sleep is orphaned),
    writes its pid to <tmp>/<case name>.grandchild.pid, and returns constant's answer."""
    import subprocess
    import tempfile

    pidfile = os.path.join(tempfile.gettempdir(), f"{problem.name}.grandchild.pid")
    subprocess.run(f"sleep 97 & echo $! > {pidfile}", shell=True, check=True)
    return constant(problem)


def kills_its_parent_on_first(problem):
    """Kills its own parent process (the harness's fork server) on the first case and
    then answers anyway; the other cases get constant's answer."""
    if problem.name == FIRST_CASE:
        os.kill(os.getppid(), signal.SIGKILL)
        time.sleep(0.5)
    return constant(problem)
