"""Unsupported cases in the pytest plug-in (pytester): a generated item whose code raises
``harness.Unsupported`` is skipped with the reason, and so is an ``scf_check`` test; with
``--scf-require-all`` (key ``require_all``) they fail."""

from __future__ import annotations

import pytest

PARTIAL = '''
"""A lab's code that has no oxygen basis: the bundled example code otherwise."""
import harness
from harness.testing.example_scf import solve as _solve


def solve(problem):
    if 8 in problem.numbers:
        raise harness.Unsupported("no oxygen basis in this code")
    return _solve(problem)
'''

CHECKED = '''
import harness
from mycode import solve


def test_water(scf_check, scf_case):
    case = scf_case("water-sto-3g-rhf")
    scf_check(solve(case.problem()), case)


def test_water_given_the_exception(scf_check, scf_case):
    case = scf_case("water-sto-3g-rhf")
    try:
        solution = solve(case.problem())
    except harness.Unsupported as exc:
        solution = exc
    scf_check(solution, case)


def test_not_ours():
    raise harness.Unsupported("a test without scf_check is not the plug-in's business")
'''


@pytest.fixture
def project(pytester):
    pytester.makepyprojecttoml("[project]\nname = 'lab-scf'\n")
    pytester.makepyfile(mycode=PARTIAL)
    return pytester


def test_an_unsupported_case_item_is_skipped_with_the_reason(project):
    result = project.runpytest("--scf-plugin", "mycode:solve", "-k", "water or h2", "-rs",
                               "-p", "no:cacheprovider")
    result.assert_outcomes(passed=2, skipped=1, deselected=1)  # h2, nh2; water
    text = "\n".join(result.outlines)
    assert "unsupported: no oxygen basis in this code" in text


def test_require_all_flag_fails_the_case(project):
    result = project.runpytest("--scf-plugin", "mycode:solve", "-k", "water",
                               "--scf-require-all", "-p", "no:cacheprovider")
    result.assert_outcomes(failed=1, deselected=3)
    assert ("unsupported: no oxygen basis in this code (require-all: every selected case "
            "must run)") in result.outlines


def test_require_all_key_fails_the_case(project):
    project.makepyprojecttoml('[tool.scf-harness]\nplugin = "mycode:solve"\n'
                              'require_all = true\n')
    result = project.runpytest("-k", "water", "-p", "no:cacheprovider")
    result.assert_outcomes(failed=1, deselected=3)


def test_require_all_key_must_be_a_boolean(project):
    project.makepyprojecttoml('[tool.scf-harness]\nplugin = "mycode:solve"\n'
                              'require_all = "yes"\n')
    result = project.runpytest("-p", "no:cacheprovider")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    assert any("require_all: expected true or false, got 'yes'" in line
               for line in result.errlines)


def test_scf_check_skips_an_unsupported_case(project):
    project.makepyfile(test_lab=CHECKED)
    result = project.runpytest("test_lab.py", "-rs", "-p", "no:cacheprovider")
    result.assert_outcomes(skipped=2, failed=1)
    text = "\n".join(result.outlines)
    assert text.count("unsupported: no oxygen basis in this code") == 2
    assert "a test without scf_check is not the plug-in's business" in text


def test_scf_check_fails_an_unsupported_case_under_require_all(project):
    project.makepyfile(test_lab=CHECKED)
    result = project.runpytest("test_lab.py", "--scf-require-all", "-p", "no:cacheprovider")
    result.assert_outcomes(failed=3)
    assert result.outlines.count("unsupported: no oxygen basis in this code (require-all: "
                                 "every case must run)") == 2


def test_the_reproduce_command_carries_require_all():
    from harness.ui import config

    keys = config.parse_table({"plugin": "mycode:solve", "require_all": True})
    settings = config.resolve({}, keys)
    assert settings.require_all is True
    assert settings.reproduce_command("water-sto-3g-rhf") == (
        "scf-harness certify mycode:solve --case water-sto-3g-rhf --require-all")
    assert config.resolve(config.parse_flags(require_all=True), {}).require_all is True
    assert config.resolve(config.parse_flags(require_all=None), keys).require_all is True
    assert config.resolve({}, {}).require_all is False
