"""Kohn–Sham plug-ins integrating on their own grid without saying so in the solution
(the ``--grid own`` flag says it): the bundled example code on pyscf grid level 2
(``solve``, a reasonable grid) and level 0 (``coarse``, much too coarse)."""

from harness.testing import example_scf


def _unsaid(out: dict) -> dict:
    out = dict(out)
    out.pop("grid", None)
    return out


def solve(problem):
    return _unsaid(example_scf.solve_own_grid(problem))


def coarse(problem):
    return _unsaid(example_scf.solve_own_grid(problem, level=0))
