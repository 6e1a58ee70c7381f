"""Output paths (--json, --certificate, --markdown) and input paths that are not what
they should be: exit 2 with one line, and nothing replaced. In-process (``main``)."""

from __future__ import annotations

import os
import stat

import pytest

from harness.ui.cli import main

ERROR = "scf-harness: error: "
H2 = "h2-sto-3g-rhf"


def usage_error(capsys, *args) -> str:
    code = main(list(args))
    err = capsys.readouterr().err
    assert code == 2, err
    lines = err.splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    return lines[0].removeprefix(ERROR)


@pytest.mark.parametrize("option", ["--json", "--certificate"])
def test_an_output_that_is_a_pipe_is_refused_and_kept(capsys, tmp_path, option):
    """A device or pipe would be replaced by the rename of an atomic write."""
    pipe = tmp_path / "pipe"
    os.mkfifo(pipe)
    line = usage_error(capsys, "certify", "--case", H2, option, str(pipe))
    assert line == (f"argument {option}: {pipe} is not a regular file; give the path of a "
                    "file (see 'scf-harness certify --help')")
    assert stat.S_ISFIFO(pipe.stat().st_mode)


def test_an_output_that_is_a_folder_is_refused(capsys, tmp_path):
    line = usage_error(capsys, "check-result", "x.npz", "--geometry", "x.xyz", "--basis",
                       "sto-3g", "--method", "rhf", "--json", str(tmp_path))
    assert line.startswith(f"argument --json: {tmp_path} is a folder; give the path of a file")


def test_an_empty_output_path_is_refused(capsys):
    line = usage_error(capsys, "certify", "--case", H2, "--json", "")
    assert line.startswith("argument --json: expected a file path, got ''")


def test_report_and_certificate_on_one_file_are_refused(capsys, tmp_path):
    out = tmp_path / "same.json"
    line = usage_error(capsys, "certify", "--case", H2, "--json", str(out),
                       "--certificate", str(out))
    assert line == f"--json and --certificate name the same file: {out}"
    assert not out.exists()
    npz = tmp_path / "c.solutions.npz"
    line = usage_error(capsys, "certify", "--case", H2, "--certificate",
                       str(tmp_path / "c.json"), "--json", str(npz))
    assert line == f"--json and --certificate's solutions file name the same file: {npz}"


def test_a_partial_results_path_that_is_a_folder_is_refused(capsys, tmp_path):
    (tmp_path / "r.json.partial.jsonl").mkdir()
    line = usage_error(capsys, "certify", "--case", H2, "--json", str(tmp_path / "r.json"))
    assert line == (f"--json's .partial.jsonl file: {tmp_path / 'r.json.partial.jsonl'} is "
                    "not a regular file")


@pytest.mark.parametrize("args, words", [
    (["certify", "--cases-file", "{tmp}"], "--cases-file: a folder, not a file: {tmp}"),
    (["check-result", "{tmp}", "--geometry", "x.xyz", "--basis", "sto-3g", "--method", "rhf"],
     "{tmp}: a folder, not a file"),
])
def test_a_folder_given_as_an_input_file_is_named_as_such(capsys, tmp_path, args, words):
    args = [a.format(tmp=tmp_path) for a in args]
    assert usage_error(capsys, *args) == words.format(tmp=tmp_path)


def test_references_verify_needs_an_existing_folder(capsys, tmp_path):
    missing = tmp_path / "nowhere"
    assert usage_error(capsys, "references", "verify", "--references", str(missing)) == (
        f"--references: not a folder: {missing}")


def test_cases_lists_every_suite_asked_for(capsys):
    from harness.catalogue.cases import load_catalogue

    catalogue = load_catalogue()
    assert main(["cases", "--suite", "smoke", "--suite", "atoms"]) == 0
    out = capsys.readouterr().out
    expected = {c.name for c in catalogue.suite("smoke") + catalogue.suite("atoms")}
    assert f"{len(expected)} cases; suites:" in out
    assert all(name in out for name in expected)
    assert usage_error(capsys, "cases", "--suite", "").startswith("suite: unknown suite ''")


def test_certify_refuses_a_cases_file_case_named_like_a_catalogue_case(capsys, tmp_path):
    (tmp_path / "h2.xyz").write_text("2\nH2\nH 0 0 0\nH 0 0 0.74\n", encoding="utf-8")
    mine = tmp_path / "mine.toml"
    mine.write_text('[[case]]\nname = "water-sto-3g-rhf"\ngeometry = "h2.xyz"\n'
                    'basis = "sto-3g"\nmethod = "rhf"\n', encoding="utf-8")
    assert usage_error(capsys, "certify", "--cases-file", str(mine)) == (
        f"{mine}: case 'water-sto-3g-rhf': name: is the name of a catalogue case; give yours "
        "another name")


def test_check_result_of_a_pipe_or_device_is_not_called_missing(capsys, tmp_path):
    """A FIFO or /dev/null exists: 'file not found' would send the user looking for it."""
    pipe = tmp_path / "fifo.npz"
    os.mkfifo(pipe)
    for given in (str(pipe), os.devnull):
        line = usage_error(capsys, "check-result", given, "--geometry", "x.xyz", "--basis",
                           "sto-3g", "--method", "rhf")
        assert line == f"{given}: not a regular file (a device or pipe); give the path of a file"


def test_check_result_of_an_empty_file_says_it_is_empty(capsys, tmp_path):
    empty = tmp_path / "empty.npz"
    empty.touch()
    xyz = tmp_path / "h2.xyz"
    xyz.write_text("2\nh2\nH 0 0 0\nH 0 0 0.74\n")
    code = main(["check-result", str(empty), "--geometry", str(xyz), "--basis", "sto-3g",
                 "--method", "rhf"])
    out = capsys.readouterr().out
    assert code == 1 and "empty.npz: empty file (0 bytes)" in out
    assert "not found" not in out


@pytest.mark.parametrize("option", ["FILE", "--geometry", "--energy-file"])
def test_check_result_refuses_an_empty_path(capsys, option):
    """'' is not the current folder ('.: a folder, not a file')."""
    args = {"FILE": "x.molden", "--geometry": "x.xyz", "--energy-file": "e.json"}
    args[option] = ""
    argv = ["check-result", args["FILE"], "--geometry", args["--geometry"], "--basis",
            "sto-3g", "--method", "rhf", "--energy-file", args["--energy-file"]]
    line = usage_error(capsys, *argv)
    assert line.startswith(f"argument {option}: expected a file path, got ''")


@pytest.mark.parametrize("command, option", [("certify", "--json"), ("certify", "--certificate"),
                                             ("check-result", "--json")])
def test_an_output_under_a_file_names_the_path_and_its_parent(capsys, tmp_path, command,
                                                               option):
    """Was 'File exists: <some file>' after the whole run; now refused before it starts."""
    afile = tmp_path / "afile"
    afile.write_text("keep me\n")
    target = afile / "sub" / "out.json"
    head = (["certify", "--case", H2] if command == "certify" else
            ["check-result", "x.npz", "--geometry", "x.xyz", "--basis", "sto-3g", "--method",
             "rhf"])
    line = usage_error(capsys, *head, option, str(target))
    assert line.startswith(f"argument {option}: {target}: its parent {afile} is not a folder")
    assert afile.read_text() == "keep me\n"


def test_atomic_write_under_a_file_says_the_parent_is_not_a_folder(tmp_path):
    from harness.run.atomic import atomic_write

    afile = tmp_path / "afile"
    afile.touch()
    with pytest.raises(NotADirectoryError) as err:
        atomic_write(afile / "out.json", lambda tmp: None)
    assert err.value.strerror == f"its parent {afile} is not a folder"
    assert err.value.filename == str(afile / "out.json")
