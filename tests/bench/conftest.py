"""Shared fixtures of the accelerator-bench tests: catalogue cases and their integrals.

pyscf supplies the integrals and the reference energies; the loop, the accelerators and
the checks on them are the harness's own numpy. Energies in Eh.
"""

from __future__ import annotations

import pytest

from harness.bench import accelerators as acc
from harness.catalogue.cases import load_catalogue


@pytest.fixture(scope="session")
def catalogue():
    return load_catalogue()


@pytest.fixture(scope="session")
def setup(catalogue):
    """``setup(name)`` → (case, problem, Hamiltonian, default guess), cached per name."""
    cache = {}

    def get(name):
        if name not in cache:
            case = catalogue.case(name)
            problem = case.problem()
            ham = acc.hamiltonian_for(problem)
            cache[name] = (case, problem, ham, acc.core_guess(ham))
        return cache[name]

    return get
