"""Kohn–Sham cases through the pytest plug-in: the dft suite's items, ``--scf-grid own``
and the ``grid`` key of ``[tool.scf-harness]``."""

from __future__ import annotations

import pytest

from harness.ui import config

WATER = "water-sto-3g-rks-lda"
OWNCODE = '''
"""A lab's KS code integrating on its own grid (pyscf level 2) without saying so."""
from harness.testing.example_scf import solve_own_grid


def solve(problem):
    out = dict(solve_own_grid(problem))
    out.pop("grid")
    return out
'''


@pytest.fixture
def project(pytester):
    pytester.makepyprojecttoml("[project]\nname = 'lab-ks'\n")
    pytester.makepyfile(owncode=OWNCODE)
    return pytester


def test_grid_key_and_flag_parse():
    assert config.parse_table({"grid": "own"})["grid"] == "own"
    assert config.parse_table({"grid": "pinned"})["grid"] is None
    assert config.parse_flags(grid="own")["grid"] == "own"
    settings = config.resolve(config.parse_flags(plugin="m:f", grid="own"), {})
    assert settings.grid == "own"
    assert settings.reproduce_command(WATER).endswith("--case " + WATER + " --grid own")


def test_bad_grid_key_is_a_one_line_error():
    with pytest.raises(config.ConfigError) as exc:
        config.parse_table({"grid": "fine"})
    assert str(exc.value) == ("pyproject.toml: [tool.scf-harness]: grid: expected one of "
                              "pinned, own, got 'fine'")


@pytest.mark.slow  # two in-process runs of a KS case, ~10 s
def test_own_grid_code_passes_with_the_flag_and_fails_without(project):
    args = ("--scf-plugin", "owncode:solve", "--scf-suite", "dft", "-k", WATER,
            "-p", "no:cacheprovider")
    passed = project.runpytest(*args, "--scf-grid", "own")
    passed.assert_outcomes(passed=1)
    failed = project.runpytest(*args)
    failed.assert_outcomes(failed=1)
    assert any("energy-consistency: |E − E[P]|" in line for line in failed.outlines)
