"""A plug-in module that sleeps 1000 s at import: the run's timeout must apply."""

import time

time.sleep(1000)


def solve(problem):  # never reached in the tests
    return {}
