"""A plug-in module that changes the working folder at import, then solves correctly."""

import os

os.chdir(os.path.dirname(os.path.abspath(__file__)) + "/..")


def solve(problem):
    from harness.testing.example_scf import solve as example

    return example(problem)
