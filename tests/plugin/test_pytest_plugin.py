"""The pytest plug-in in small example projects (pytester).

A lab's project either names its SCF function with --scf-plugin or in [tool.scf-harness];
pytest then runs one item per case of the smoke suite (tiny sto-3g molecules). Runs are
in-process except where isolation is the point (the import check). Energies in Eh.
"""

from __future__ import annotations

import pytest

from harness.testing.planted.core import missing_nuclear_repulsion

PLANTED = "harness.testing.planted.core:missing_nuclear_repulsion"
SMOKE = ("h2-sto-3g-rhf", "water-sto-3g-rhf", "oh-sto-3g-uhf", "nh2-sto-3g-rohf")
#: The first line of the water failure, up to the energies (E_nuc of water is 8.0 Eh).
WATER_FIRST = ("energy-consistency: |E − E[P]| = 8.0e+00 > 1.0e-08 (water-sto-3g-rhf), "
               "E = ")

MYCODE = '''
"""A lab's SCF entry point: the bundled example code, wrapped as a user would."""
from harness.testing.example_scf import solve as _solve


def solve(problem):
    return _solve(problem)
'''


@pytest.fixture
def project(pytester):
    """An empty project: a pyproject.toml (so it is pytest's rootdir) and mycode.py."""
    pytester.makepyprojecttoml("[project]\nname = 'lab-scf'\n")
    pytester.makepyfile(mycode=MYCODE)
    return pytester


def lines_of(result) -> list[str]:
    return [line.rstrip() for line in result.outlines]


def failure_section(result, case: str) -> list[str]:
    """The lines of the failure report of ``case`` (after its ____ header)."""
    lines = lines_of(result)
    start = next(i for i, line in enumerate(lines)
                 if line.startswith("_") and f" scf-harness case {case} " in line)
    end = next((i for i in range(start + 1, len(lines))
                if lines[i].startswith(("_____", "=====")) ), len(lines))
    return lines[start + 1:end]


def test_correct_plugin_passes_one_item_per_case(project):
    result = project.runpytest("--scf-plugin", "mycode:solve", "-v", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=len(SMOKE))
    for name in SMOKE:
        assert f"scf-harness::{name} PASSED" in "\n".join(lines_of(result))
    assert any(line.startswith("scf-harness: mycode:solve on suite smoke")
               for line in lines_of(result))


def harness_lines(name: str) -> list[str]:
    """The failing checks' messages (each followed by its hint, if any) that the harness
    itself gives the planted bug on ``name``."""
    from harness.catalogue.cases import load_catalogue
    from harness.catalogue.references import reference_for
    from harness.contract.solution import extract
    from harness.verdict.judge import JudgeSettings, judge

    case = load_catalogue().case(name)
    reference, source = reference_for(case)
    result = judge(case.problem(), extract(missing_nuclear_repulsion(case.problem())),
                   reference, JudgeSettings(reference_source=source))
    lines = []
    for check in result.failures:
        lines.append(check.message)
        if check.hint:
            lines.append(f"  hint: {check.hint}")
    return lines


def test_planted_bug_fails_with_its_message_table_and_reproduce_line(project):
    result = project.runpytest("--scf-plugin", PLANTED, "-k", "water-sto-3g-rhf",
                               "-p", "no:cacheprovider")
    result.assert_outcomes(failed=1, deselected=len(SMOKE) - 1)
    section = failure_section(result, "water-sto-3g-rhf")
    assert section[0].startswith(WATER_FIRST), section[0]
    head = section[:section.index("")]
    assert head == harness_lines("water-sto-3g-rhf")  # verbatim, in check order
    messages = [line for line in head if not line.startswith("  hint: ")]
    assert [m.split(":")[0] for m in messages] == ["energy-consistency", "reference-energy"]
    assert messages[1].startswith("reference-energy: |E − E_ref| = 8.0e+00 > 1.0e-06 "
                                  "(water-sto-3g-rhf)")
    header = next(i for i, line in enumerate(section) if line.startswith("case "))
    assert section[header - 1] == "" and header == len(head) + 1
    assert "Econs" in section[header] and "Eref" in section[header]
    row = next(line for line in section[header:] if line.startswith("water-sto-3g-rhf "))
    assert row.count("✗") == len(messages)  # one cross per failing check, none cut off
    assert "…" not in "\n".join(section)
    assert section[-1] == f"reproduce: scf-harness certify {PLANTED} --case water-sto-3g-rhf"
    assert section[-2] == ""


def test_the_reproduce_line_reproduces_the_failure(project, capsys):
    """The printed command, run as printed, fails the same case with the same message."""
    import shlex

    from harness.ui.cli import main

    result = project.runpytest("--scf-plugin", PLANTED, "-k", "h2-sto-3g-rhf",
                               "-p", "no:cacheprovider")
    section = failure_section(result, "h2-sto-3g-rhf")
    command = section[-1].removeprefix("reproduce: ")
    capsys.readouterr()
    assert main(shlex.split(command)[1:] + ["--quiet"]) == 1
    out = capsys.readouterr().out
    assert section[0] in out.splitlines()[1:] or f"  {section[0]}" in out.splitlines()


def test_exitfirst_stops_after_the_first_failing_case(project):
    result = project.runpytest("--scf-plugin", PLANTED, "-x", "-p", "no:cacheprovider")
    result.assert_outcomes(failed=1)
    assert failure_section(result, SMOKE[0])[0].startswith("energy-consistency: ")


def test_pyproject_configures_plugin_and_tolerances(project):
    """Tolerances from [tool.scf-harness] let the planted bug (an 8 Eh error) pass."""
    project.makepyprojecttoml(f"""
[tool.scf-harness]
plugin = "{PLANTED}"
suite = "smoke"
tolerances = {{ "energy-consistency" = 10.0, "reference-energy" = 10.0 }}
""")
    result = project.runpytest("-k", "water", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, deselected=3)


def test_flags_override_keys(project):
    project.makepyprojecttoml(f"""
[tool.scf-harness]
plugin = "{PLANTED}"
tolerances = {{ "energy-consistency" = 10.0, "reference-energy" = 10.0 }}
""")
    # --scf-tol replaces the key's value for reference-energy only
    result = project.runpytest("-k", "water", "--scf-tol", "reference-energy=1e-6",
                               "-p", "no:cacheprovider")
    result.assert_outcomes(failed=1, deselected=3)
    section = failure_section(result, "water-sto-3g-rhf")
    assert section[0].startswith("reference-energy: |E − E_ref| = 8.0e+00 > 1.0e-06")
    assert not any(line.startswith("energy-consistency") for line in section)
    assert section[-1] == (f"reproduce: scf-harness certify {PLANTED} --case water-sto-3g-rhf "
                           "--tol energy-consistency=10 --tol reference-energy=1e-06")
    # --scf-plugin replaces the key's plug-in
    result = project.runpytest("-k", "water", "--scf-plugin", "mycode:solve",
                               "-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, deselected=3)


def test_last_failed_reruns_only_the_failed_cases(project):
    project.makepyprojecttoml(f'[tool.scf-harness]\nplugin = "{PLANTED}"\n')
    project.makepyfile(test_own="def test_own():\n    assert 1 + 1 == 2\n")
    first = project.runpytest("-k", "h2-sto-3g-rhf or own")
    first.assert_outcomes(passed=1, failed=1, deselected=3)
    again = project.runpytest("--lf")
    again.assert_outcomes(failed=1, deselected=4)
    assert "scf-harness::h2-sto-3g-rhf" in "\n".join(lines_of(again))


def test_silent_without_options(project):
    project.makepyfile(test_own="def test_own():\n    assert 1 + 1 == 2\n")
    result = project.runpytest("-v", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=1)
    text = "\n".join(lines_of(result))
    assert "scf-harness::" not in text and "scf-harness:" not in text
    assert "collected 1 item" in text


HEAVY_CHECK = '''
import sys

HEAVY = ("numpy", "scipy", "pyscf", "rich")
HARNESS_HEAVY = ("harness.contract.problem", "harness.catalogue.cases", "harness.run.runner", "harness.report.terminal",
                 "harness.verdict.evaluate", "harness.catalogue.references", "harness.backend.integrals",
                 "harness.checks.energy", "harness.checks.stationarity", "harness.checks.density",
                 "harness.checks.orthonormal", "harness.contract.solution",
                 "harness.testing.example_scf")
# harness.checks.table (the declared check table, standard library only) is light on
# purpose: the plug-in's --scf-tol help lists the tolerance names from it.


def test_nothing_heavy_was_imported():
    loaded = set(sys.modules)
    assert "harness.ui.pytest_plugin" in loaded  # the plug-in is active in this run
    heavy = sorted(m for m in loaded if m.split(".")[0] in HEAVY
                   or m.startswith(HARNESS_HEAVY))
    assert heavy == []
'''


def test_no_heavy_imports_without_options(project):
    """In a fresh interpreter, the registered plug-in imports no numpy/pyscf/rich."""
    project.makepyfile(test_light=HEAVY_CHECK)
    result = project.runpytest_subprocess("-p", "no:cacheprovider")
    result.assert_outcomes(passed=1)


def test_the_import_check_can_fail(project):
    """The same check fails once the plug-in is asked to run cases (it loads pyscf)."""
    project.makepyfile(test_light=HEAVY_CHECK)
    result = project.runpytest_subprocess("--scf-plugin", "mycode:solve", "-k", "heavy",
                                          "-p", "no:cacheprovider")
    result.assert_outcomes(failed=1, deselected=len(SMOKE))


@pytest.mark.parametrize("args, pyproject, words", [
    (["--scf-plugin", "mycode:solve", "--scf-suite", "smok"], "",
     "scf-harness: suite: unknown suite 'smok' (closest: smoke"),
    (["--scf-plugin", "nosuchmodule:solve"], "",
     "scf-harness: plug-in 'nosuchmodule:solve': module 'nosuchmodule' not found"),
    (["--scf-suite", "smoke"], "", "scf-harness: --scf-suite needs a plug-in"),
    (["--scf-plugin", "mycode:solve", "--scf-timeout", "0"], "",
     "scf-harness: --scf-timeout: expected a positive number of seconds, got '0'"),
    ([], "[tool.scf-harness]\nplugins = 'mycode:solve'\n",
     "[tool.scf-harness]: plugins: unknown key (did you mean 'plugin'?)"),
])
def test_usage_errors_are_one_line(project, args, pyproject, words):
    if pyproject:
        project.makepyprojecttoml(pyproject)
    result = project.runpytest(*args, "-p", "no:cacheprovider")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    errors = [line for line in result.errlines if line.startswith("ERROR:")]
    assert len(errors) == 1 and words in errors[0], result.errlines


FIXTURE_TESTS = '''
from harness.testing.example_scf import solve
from harness.testing.planted.core import missing_nuclear_repulsion


def test_example_code_passes(scf_case, scf_reference, scf_check):
    case = scf_case("water-sto-3g-rhf")
    solution = solve(case.problem())
    assert abs(solution["energy"] - scf_reference(case).energy) < 1e-6
    results = scf_check(solution, case)
    assert [r.name for r in results if r.passed] == [
        r.name for r in results if r.passed is not None]
    assert {r.name for r in results if r.passed} >= {"reference-energy", "stationarity"}


def test_planted_bug_is_reported(scf_case, scf_check):
    case = scf_case("water-sto-3g-rhf")
    scf_check(missing_nuclear_repulsion(case.problem()), "water-sto-3g-rhf")


def test_unknown_case_is_named(scf_case):
    scf_case("water-sto3g-rhf")
'''


def test_fixtures(project):
    project.makepyfile(test_fixtures=FIXTURE_TESTS)
    result = project.runpytest("-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, failed=2)
    text = "\n".join(lines_of(result))
    assert f"E       AssertionError: {WATER_FIRST}" in text
    assert "E       reference-energy: |E − E_ref| = 8.0e+00 > 1.0e-06" in text
    assert "pytest_plugin.py" not in text  # __tracebackhide__: the user's line is shown
    assert "unknown case 'water-sto3g-rhf' (closest: water-sto-3g-rhf" in text


def test_scf_check_uses_the_configured_tolerances(project):
    project.makepyprojecttoml('[tool.scf-harness]\n'
                              'tolerances = { "energy-consistency" = 10.0, '
                              '"reference-energy" = 10.0 }\n')
    project.makepyfile(test_fixtures=FIXTURE_TESTS)
    result = project.runpytest("-k", "planted", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=1, deselected=2)


OWN_CASES = """
[[case]]
name = "lab-h2-sto-3g-rhf"
geometry = "h2.xyz"
basis = "sto-3g"
method = "rhf"
"""
H2_XYZ = "2\nH2 at 0.74 angstrom\nH 0 0 0\nH 0 0 0.74\n"


def test_cases_file_adds_the_labs_own_molecules(project):
    """A cases file of the project's own (key relative to pyproject.toml) gives one item
    per case; its reference is computed by pyscf on the fly. With the planted bug the
    reproduce line names the file, so the command finds the case."""
    project.mkdir("cases")
    (project.path / "cases" / "mine.toml").write_text(OWN_CASES, encoding="utf-8")
    (project.path / "cases" / "h2.xyz").write_text(H2_XYZ, encoding="utf-8")
    project.makepyprojecttoml('[tool.scf-harness]\nplugin = "mycode:solve"\n'
                              'cases_file = "cases/mine.toml"\n')
    result = project.runpytest("-v", "-p", "no:cacheprovider")
    result.assert_outcomes(passed=1)
    assert "scf-harness::lab-h2-sto-3g-rhf PASSED" in "\n".join(lines_of(result))

    failed = project.runpytest("--scf-plugin", PLANTED, "-p", "no:cacheprovider")
    failed.assert_outcomes(failed=1)
    section = failure_section(failed, "lab-h2-sto-3g-rhf")
    mine = (project.path / "cases" / "mine.toml").resolve()
    assert section[-1] == (f"reproduce: scf-harness certify {PLANTED} --cases-file {mine} "
                           "--case lab-h2-sto-3g-rhf")


STRETCHED = "h2-stretched-6-31g-uhf"
SPIN_RESTRICTED = "harness.testing.planted.states:never_breaks_spin_symmetry"


@pytest.mark.parametrize("table, analysed", [("", True), ('stability = "off"', False)])
def test_stability_setting_reaches_the_checks(project, table, analysed):
    """A UHF code stuck on the spin-restricted saddle of stretched H2: the stability check
    fails it under the default (internal) and is skipped with stability = off; the energy
    comparison fails it either way."""
    from harness.catalogue.cases import load_catalogue

    project.makepyprojecttoml(f"[tool.scf-harness]\n{table}\n")
    result = project.runpytest("--scf-plugin", SPIN_RESTRICTED, "--scf-suite", "states",
                               "-k", STRETCHED, "-p", "no:cacheprovider")
    result.assert_outcomes(failed=1, deselected=len(load_catalogue().suite("states")) - 1)
    head = failure_section(result, STRETCHED)
    head = head[:head.index("")]
    assert any(line.startswith("reference-energy: ") for line in head)
    assert any(line.startswith("stability: ") for line in head) is analysed


@pytest.mark.slow  # 63 s measured (two cores shared with other jobs)
def test_items_run_under_xdist(project):
    """The items are self-contained: ``-n 2`` (pytest-xdist) runs the suite in two worker
    processes, with the same verdicts and failure reports as a serial run."""
    pytest.importorskip("xdist")
    good = project.runpytest_subprocess("--scf-plugin", "mycode:solve", "-n", "2",
                                        "-p", "no:cacheprovider")
    good.assert_outcomes(passed=len(SMOKE))
    bad = project.runpytest_subprocess("--scf-plugin", PLANTED, "-n", "2",
                                       "-p", "no:cacheprovider")
    bad.assert_outcomes(failed=len(SMOKE))
    text = "\n".join(lines_of(bad))
    for name in SMOKE:
        assert f"reproduce: scf-harness certify {PLANTED} --case {name}" in text
    assert WATER_FIRST in text


def test_a_cases_file_case_named_like_a_catalogue_case_is_a_usage_error(project):
    """It would shadow the catalogue case (and share its stored reference)."""
    (project.path / "h2.xyz").write_text(H2_XYZ, encoding="utf-8")
    (project.path / "mine.toml").write_text(OWN_CASES.replace("lab-h2-sto-3g-rhf",
                                                              "h2-sto-3g-rhf"), encoding="utf-8")
    result = project.runpytest("--scf-plugin", "mycode:solve", "--scf-cases-file", "mine.toml",
                               "-p", "no:cacheprovider")
    assert result.ret == pytest.ExitCode.USAGE_ERROR
    assert (f"ERROR: scf-harness: {project.path / 'mine.toml'}: case 'h2-sto-3g-rhf': name: is "
            "the name of a catalogue case; give yours another name") in "\n".join(result.errlines)


MISUSE_TESTS = '''
import pytest

from harness.contract.errors import CaseError


def test_case_by_number(scf_case):
    with pytest.raises(CaseError, match=r"^case: expected a case name \\(a string\\), got int 5$"):
        scf_case(5)


def test_reference_of_a_number(scf_reference):
    with pytest.raises(CaseError, match=r"^scf_reference: expected a Case or a case name, "
                                        r"got int$"):
        scf_reference(3)


def test_check_against_a_number(scf_check):
    with pytest.raises(CaseError, match=r"^scf_check: expected a Case, a case name or a "
                                        r"Problem, got int$"):
        scf_check({}, 7)
    with pytest.raises(CaseError, match=r"^scf_check: reference: expected a Reference "
                                        r"\\(from scf_reference\\), got float$"):
        scf_check({}, "h2-sto-3g-rhf", reference=-1.0)


def test_check_of_nothing(scf_check):
    with pytest.raises(AssertionError, match=r"^the solution is not readable: "):
        scf_check(None, "h2-sto-3g-rhf")
'''


def test_fixtures_misused_give_one_clear_line(project):
    project.makepyfile(test_misuse=MISUSE_TESTS)
    project.runpytest("-p", "no:cacheprovider").assert_outcomes(passed=4)


JUDGE_TESTS = '''
import pytest

from harness.testing.example_scf import solve


def test_missing_reference_fails_with_its_reason(scf_case, scf_check, monkeypatch):
    import harness.catalogue.references as references

    def unavailable(case, directory=None, *, write=False):
        raise ValueError("reference store unreadable")

    monkeypatch.setattr(references, "reference_for", unavailable)
    case = scf_case("h2-sto-3g-rhf")
    with pytest.raises(AssertionError) as info:
        scf_check(solve(case.problem()), case)
    assert str(info.value) == ("reference-energy: no reference (h2-sto-3g-rhf): "
                               "ValueError: reference store unreadable")


def test_ao_convention_reaches_the_checks(scf_case, scf_check):
    case = scf_case("h2-sto-3g-rhf")
    results = {r.name: r for r in scf_check(solve(case.problem()), case,
                                            ao_convention="pyscf")}
    assert results["basis"].message.startswith(
        "basis: AO convention 'pyscf' as given (h2-sto-3g-rhf): ")
'''


def test_check_judges_as_certify_does(project):
    """scf_check finds references as certify does (a missing one fails reference-energy
    with its reason) and passes an AO convention on to the checks."""
    project.makepyfile(test_scf_check_judging=JUDGE_TESTS)
    project.runpytest("-p", "no:cacheprovider").assert_outcomes(passed=2)


TAMPERED_TEST = '''
from harness.testing.example_scf import solve


def test_h2(scf_case, scf_check):
    case = scf_case("h2-sto-3g-rhf")
    scf_check(solve(case.problem()), case)
'''


@pytest.mark.parametrize("tampered", [False, True])
def test_scf_check_refuses_a_tampered_reference(project, monkeypatch, tmp_path, tampered):
    """A stored reference edited with its nuclear term (the terms still sum to the total):
    scf_check fails the correct code's reference-energy, naming the file; untouched, it
    passes (issue 14)."""
    import json
    import shutil
    import sys
    from pathlib import Path

    from harness.catalogue.cases import default_reference_dir

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "unit"))
    try:
        from reference_tampering import H2, TAMPERINGS, tampered_reason
    finally:
        sys.path.pop(0)
    root = tmp_path / "references"
    shutil.copytree(default_reference_dir(), root)
    path = root / "data" / f"{H2}.json"
    if tampered:
        data = json.loads(path.read_text())
        TAMPERINGS["total-and-nuclear"][0](data)
        path.write_text(json.dumps(data, indent=1))
    monkeypatch.setenv("SCF_HARNESS_REFERENCES", str(root))
    project.makepyfile(test_tampered=TAMPERED_TEST)
    result = project.runpytest("-p", "no:cacheprovider")
    if not tampered:
        result.assert_outcomes(passed=1)
        return
    result.assert_outcomes(failed=1)
    reason = tampered_reason(path, "total-and-nuclear")
    expected = f"AssertionError: reference-energy: no reference ({H2}): {reason}"
    assert any(line.startswith("E ") and line[1:].strip() == expected
               for line in lines_of(result)), lines_of(result)
