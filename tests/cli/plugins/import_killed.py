"""A plug-in module whose import kills its own process with SIGKILL."""

import os
import signal

os.kill(os.getpid(), signal.SIGKILL)


def solve(problem):  # never reached
    return {}
