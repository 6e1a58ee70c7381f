"""Unsupported cases: a plug-in raises ``harness.Unsupported``, a command exits 77 or writes
``unsupported.txt``; the case is neither passed nor failed in the progress line, the table,
the closing line, the JSON and the certificate; ``--require-all`` makes it a failure."""

from __future__ import annotations

import json
import pickle
import re
import sys

import pytest

import harness
from harness.contract.results import CaseResult
from harness.run.outcome import RunOutcome
from harness.ui.cli import main

H2, WATER = "h2-sto-3g-rhf", "water-sto-3g-rhf"
REASON = "no oxygen basis in this code"

PARTIAL = f'''
import harness
from harness.testing.example_scf import solve as _solve


def solve(problem):
    if 8 in problem.numbers:
        raise harness.Unsupported("no oxygen basis\\n  in this code")
    return _solve(problem)
'''

COMMAND = '''
import pathlib, sys
mode = sys.argv[1]
if mode == "status":
    print("starting", file=sys.stderr)
    print("no cc-pVTZ here", file=sys.stderr)
    sys.exit(77)
if mode == "silent":
    sys.exit(77)
if mode == "file":
    pathlib.Path("unsupported.txt").write_text("\\n  no ROHF in this code \\nsecond line\\n")
    sys.exit(0)
if mode == "empty-file":
    pathlib.Path("unsupported.txt").write_text("")
    sys.exit(1)
if mode == "crash":
    print("segfault-ish", file=sys.stderr)
    sys.exit(3)
'''


@pytest.fixture
def work(tmp_path, monkeypatch):
    (tmp_path / "partial.py").write_text(PARTIAL, encoding="utf-8")
    (tmp_path / "code.py").write_text(COMMAND, encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    return tmp_path


def certify(capsys, *args):
    code = main(["certify", *args, "--case", H2, "--case", WATER, "--stability", "off"])
    out = capsys.readouterr()
    return code, out.out.splitlines(), out.err


# ------------------------------------------------------------------ the exception


def test_unsupported_is_public_and_keeps_a_one_line_reason():
    exc = harness.Unsupported("no cc-pVTZ\n   in this code")
    assert isinstance(exc, Exception) and not isinstance(exc, harness.HarnessError)
    assert exc.reason == str(exc) == "no cc-pVTZ in this code"
    assert harness.Unsupported().reason == "no reason given"
    assert len(harness.Unsupported("x" * 500).reason) == 200
    again = pickle.loads(pickle.dumps(exc))
    assert isinstance(again, harness.Unsupported) and again.reason == exc.reason


def test_case_result_status_and_json_round_trip():
    result = CaseResult(name=WATER, method="rhf", basis="sto-3g", unsupported=REASON)
    assert (result.status, result.passed, result.failed) == ("unsupported", False, False)
    data = result.to_json()
    assert data["status"] == "unsupported" and data["unsupported"] == REASON
    assert CaseResult.from_json(data) == result
    forced = CaseResult(name=WATER, method="rhf", basis="sto-3g", unsupported=REASON,
                        error="unsupported: ...")
    assert (forced.status, forced.failed) == ("failed", True)


def test_an_all_unsupported_run_passes_nothing_failed():
    only = CaseResult(name=WATER, method="rhf", basis="sto-3g", unsupported=REASON)
    outcome = RunOutcome(cases=(only,), interrupted=False, seconds=0.0)
    assert outcome.passed and outcome.tally == (0, 0, 1) and outcome.counts == (0, 0)


# ------------------------------------------------------------------ the plug-in route


def test_plugin_route_progress_table_closing_line_json_certificate(work, capsys):
    from harness.report.certificate import summary_markdown, verify_certificate

    code, out, err = certify(capsys, "partial.py:solve", "--json", "run.json",
                             "--certificate", "cert.json")
    assert code == 0, err
    assert re.fullmatch(rf"– {WATER}  \d+\.\d s  unsupported: {REASON}", out[2]), out[2]
    row = next(line for line in out if line.startswith(WATER + " "))
    assert row.split()[1:] and set(row.split()[1:]) == {"uns."}
    assert "uns. = unsupported by the code (reasons below; --require-all makes that a " \
           "failure)" in out
    assert out[out.index("Unsupported") + 1] == f"{WATER} (rhf/sto-3g): unsupported: {REASON}"
    assert "Failures" not in out
    assert out[-2:] == ["1 passed, 0 failed, 1 unsupported",
                        "certificate: cert.json (solutions in cert.solutions.npz)"]
    report = json.loads((work / "run.json").read_text())
    assert report["passed"] is True and report["require_all"] is False
    assert report["summary"] == "1 passed, 0 failed, 1 unsupported"
    assert report["counts"] == {"passed": 1, "failed": 0, "unsupported": 1}
    water = next(c for c in report["cases"] if c["name"] == WATER)
    assert (water["status"], water["unsupported"], water["passed"], water["checks"]) == (
        "unsupported", REASON, False, [])
    assert next(c for c in report["cases"] if c["name"] == H2)["status"] == "passed"
    cert = json.loads((work / "cert.json").read_text())
    assert cert["passed"] is True and cert["require_all"] is False
    entry = next(c for c in cert["cases"] if c["name"] == WATER)
    assert (entry["status"], entry["unsupported"], entry["solution"]) == (
        "unsupported", REASON, None)
    assert verify_certificate(work / "cert.json", recompute=True).ok
    text = summary_markdown(cert)
    assert "(1 of 2 cases passed, 1 unsupported)" in text
    assert f"| {WATER} | rhf/sto-3g | — |" in text and text.count("| unsupported |") == 1
    assert f"- unsupported: {REASON}" in text


def test_require_all_fails_the_unsupported_case(work, capsys):
    code, out, err = certify(capsys, "partial.py:solve", "--require-all", "--quiet",
                             "--json", "run.json", "--certificate", "cert.json")
    assert code == 1, err
    failures = out.index("Failures")
    assert out[failures + 1:failures + 3] == [
        f"{WATER} (rhf/sto-3g)",
        f"  unsupported: {REASON} (require-all: every selected case must run)"]
    assert "Unsupported" not in out and out[-1] == "1 passed, 1 failed"
    report = json.loads((work / "run.json").read_text())
    water = next(c for c in report["cases"] if c["name"] == WATER)
    assert report["passed"] is False and report["require_all"] is True
    assert (water["status"], water["unsupported"]) == ("failed", REASON)
    cert = json.loads((work / "cert.json").read_text())
    assert cert["passed"] is False and cert["require_all"] is True


# ------------------------------------------------------------------ the command route


@pytest.mark.parametrize("mode, reason", [
    ("status", "no cc-pVTZ here"),
    ("silent", "exited with status 77 (unsupported) and gave no reason on stderr"),
    ("file", "no ROHF in this code"),
    ("empty-file", "no reason given (unsupported.txt is empty)"),
])
def test_a_command_says_unsupported_by_status_or_file(work, mode, reason):
    from harness.catalogue.cases import load_catalogue
    from harness.run.external import CommandPlugin

    plugin = CommandPlugin(f"{sys.executable} code.py {mode}")
    with pytest.raises(harness.Unsupported) as err:
        plugin(load_catalogue().case(H2).problem())
    assert err.value.reason == reason


def test_another_exit_status_is_still_a_failure(work):
    from harness.catalogue.cases import load_catalogue
    from harness.run.external import CommandPlugin, ExternalCodeError

    with pytest.raises(ExternalCodeError) as err:
        CommandPlugin(f"{sys.executable} code.py crash")(load_catalogue().case(H2).problem())
    assert str(err.value) == "exited with status 3 | stderr: segfault-ish"


@pytest.mark.parametrize("mode, reason", [("status", "no cc-pVTZ here"),
                                          ("file", "no ROHF in this code")])
def test_certify_command_reports_unsupported(work, capsys, mode, reason):
    code, out, err = certify(capsys, "--command", f"{sys.executable} code.py {mode}",
                             "--quiet", "--json", "run.json")
    assert code == 0, err
    assert out[-1] == "0 passed, 0 failed, 2 unsupported"
    assert f"{H2} (rhf/sto-3g): unsupported: {reason}" in out
    report = json.loads((work / "run.json").read_text())
    assert [c["status"] for c in report["cases"]] == ["unsupported", "unsupported"]


# ------------------------------------------------------------------ the pipe message


def test_the_child_sends_plain_data_for_an_unsupported_case():
    from harness.run.runner import UNSUPPORTED_KIND, _reason, unsupported_message

    message = unsupported_message(REASON, 0.25)
    assert message == {"kind": UNSUPPORTED_KIND, "reason": REASON, "seconds": 0.25}
    assert json.loads(json.dumps(message)) == message  # plain data, no pickled objects

    class Odd(harness.Unsupported):
        @property
        def reason(self):
            raise RuntimeError("hostile")

        @reason.setter
        def reason(self, value):
            pass

    assert _reason(Odd("still  readable")) == "still readable"
