"""Selecting cases: ``--case`` takes shell-style patterns and repeats; ``--basis`` and
``--method`` filter any selection; ``scf-harness cases`` lists the same selection that
``certify`` runs. Run in-process (``harness.ui.cli.main``)."""

from __future__ import annotations

import fnmatch

import pytest

from harness.catalogue.cases import basis_key, load_catalogue
from harness.ui.cli import main, select_cases

ERROR = "scf-harness: error: "


@pytest.fixture(scope="module")
def catalogue():
    return load_catalogue()


def names(*args, **kw):
    return [c.name for c in select_cases(*args, **kw)[0]]


def listed(capsys, *args) -> list[str]:
    """The case names ``scf-harness cases ARGS`` prints (first column of each row)."""
    code = main(["cases", *args])
    out = capsys.readouterr().out
    assert code == 0, out
    known = set(load_catalogue().names)
    return [line.split()[0] for line in out.splitlines() if line.split()
            and line.split()[0] in known]


def error_line(capsys, *args) -> str:
    code = main(list(args))
    err = capsys.readouterr().err.splitlines()
    assert code == 2 and len(err) == 1, err
    return err[0]


def test_a_pattern_selects_every_matching_case_in_catalogue_order(catalogue):
    expected = [c.name for c in catalogue.cases if fnmatch.fnmatchcase(c.name, "h2-*")]
    assert len(expected) >= 2  # the test means something only with several matches
    assert names(None, ["h2-*"]) == expected


def test_patterns_repeat_and_mix_with_names_without_duplicates(catalogue):
    got = names(None, ["water-sto-3g-rhf", "h2-*", "h2-sto-3g-rhf", "*-rohf"])
    expected = ["water-sto-3g-rhf"] + [c.name for c in catalogue.cases
                                       if fnmatch.fnmatchcase(c.name, "h2-*")]
    expected += [c.name for c in catalogue.cases
                 if c.name.endswith("-rohf") and c.name not in expected]
    assert got == expected


def test_character_classes_work(catalogue):
    got = names(None, ["*-[ru]hf"])
    assert got and all(n.endswith(("-rhf", "-uhf")) for n in got)
    assert len(got) == sum(c.name.endswith(("-rhf", "-uhf")) for c in catalogue.cases)


def test_basis_filter_is_case_insensitive_and_normalised(catalogue):
    expected = [c.name for c in catalogue.cases if c.basis == "cc-pvdz"]
    assert expected
    for spelled in ("cc-pvdz", "CC-pVDZ", " ccpvdz ", "cc_pVDZ"):
        assert names(None, None, default_suite=None, bases=[spelled]) == expected
    assert basis_key("6-31G*") == basis_key("631g*") != basis_key("6-31g")


def test_method_filter_and_both_filters_on_a_suite(catalogue):
    standard = catalogue.suite("standard")
    uhf = [c.name for c in standard if c.method == "uhf"]
    assert uhf and len(uhf) < len(standard)
    assert names(["standard"], None, methods=["uhf"]) == uhf
    both = [c.name for c in standard if c.method == "uhf" and c.basis == "cc-pvdz"]
    assert both and len(both) < len(uhf)
    assert names(["standard"], None, methods=["uhf"], bases=["cc-pVDZ"]) == both
    # repeated values are alternatives
    assert names(["standard"], None, methods=["uhf", "rohf"]) == [
        c.name for c in standard if c.method in ("uhf", "rohf")]


def test_filters_apply_to_the_default_suite(catalogue):
    smoke_rhf = [c.name for c in catalogue.suite("smoke") if c.method == "rhf"]
    assert smoke_rhf
    assert names(None, None, methods=["rhf"]) == smoke_rhf


def test_a_pattern_matching_nothing_is_one_line_with_the_closest(capsys):
    line = error_line(capsys, "certify", "--case", "h2-sto-3g-*x")
    assert line == (ERROR + "case: no case matches 'h2-sto-3g-*x' (closest: h2-sto-3g-rhf, "
                    "nh2-sto-3g-uhf, nh2-sto-3g-rohf)")


def test_an_unknown_plain_name_keeps_its_message(capsys):
    line = error_line(capsys, "cases", "--case", "water-sto3g-rhf")
    assert line.startswith(ERROR + "case: unknown case 'water-sto3g-rhf' (closest: "
                           "water-sto-3g-rhf")


def test_a_filter_that_leaves_nothing_says_what_the_selection_holds(capsys, catalogue):
    line = error_line(capsys, "certify", "--case", "h2-sto-3g-rhf", "--method", "uhf")
    assert line == (ERROR + "--method uhf: no selected case has this (the 1 selected have "
                    "rhf/sto-3g)")
    line = error_line(capsys, "cases", "--suite", "smoke", "--basis", "cc-pvtz",
                      "--method", "rohf")
    held = sorted({f"{c.method}/{c.basis}" for c in catalogue.suite("smoke")})
    assert line == (ERROR + f"--basis cc-pvtz and --method rohf: no selected case has these "
                    f"(the {len(catalogue.suite('smoke'))} selected have {', '.join(held)})")


def test_a_bad_method_is_a_usage_error(capsys):
    line = error_line(capsys, "cases", "--method", "mp2")
    assert line.startswith(ERROR + "argument --method: invalid choice: 'mp2'")


@pytest.mark.parametrize("args", [("--case", "h2-*"), ("--suite", "standard", "--method", "uhf"),
                                  ("--basis", "6-31G"), ("--case", "*water*", "--basis",
                                                         "STO-3G")])
def test_cases_lists_what_certify_would_run(capsys, args):
    """The same options select the same cases in `cases` and in certify's selection."""
    opts = dict(zip(args[::2], args[1::2]))
    expected = names([opts["--suite"]] if "--suite" in opts else None,
                     [opts["--case"]] if "--case" in opts else None,
                     default_suite=None,
                     bases=[opts["--basis"]] if "--basis" in opts else None,
                     methods=[opts["--method"]] if "--method" in opts else None)
    assert expected
    assert listed(capsys, *args) == expected


def test_certify_runs_a_pattern_selection(capsys):
    code = main(["certify", "--case", "h2-sto-*", "--basis", "STO-3G", "--method", "rhf",
                 "--stability", "off", "--quiet"])
    out = capsys.readouterr().out
    assert code == 0, out
    assert out.splitlines()[-1] == "1 passed, 0 failed"


def test_cases_lists_a_cases_file_with_the_same_filters(capsys, tmp_path):
    (tmp_path / "h2.xyz").write_text("2\nH2\nH 0 0 0\nH 0 0 0.74\n", encoding="utf-8")
    path = tmp_path / "mine.toml"
    path.write_text("".join(
        f'[[case]]\nname = "{name}"\ngeometry = "h2.xyz"\nbasis = "{basis}"\n'
        'method = "rhf"\n\n' for name, basis in (("lab-h2-a", "sto-3g"),
                                                 ("lab-h2-b", "6-31g"))), encoding="utf-8")
    assert names(None, ["lab-*"], path) == ["lab-h2-a", "lab-h2-b"]
    assert names(None, None, path, bases=["6-31G"]) == ["lab-h2-b"]
    code = main(["cases", "--cases-file", str(path), "--case", "lab-*", "--basis", "STO-3G"])
    out = capsys.readouterr().out.splitlines()
    assert code == 0
    assert [line.split()[0] for line in out if line.startswith("lab-")] == ["lab-h2-a"]


def test_method_filter_selects_kohn_sham_cases(capsys):
    """--method rks keeps the Kohn–Sham closed-shell cases of the dft suite only."""
    assert main(["cases", "--suite", "dft", "--method", "rks"]) == 0
    out = capsys.readouterr().out
    assert "water-6-31g-rks-b3lyp" in out and "-uks-" not in out and "-rhf" not in out
