"""Forged certificates (issue 14): flags, statuses or values edited and every hash
recomputed. Each disagreement between a certificate's own fields is one "certificate
integrity: …" line, with or without --recompute; the reviewer's Markdown summary is made
from recomputed values under --recompute and never says PASSED for a forgery; it always
says what a certificate covers. Energies in Eh.
"""

from __future__ import annotations

import json

import pytest

from harness.catalogue.cases import load_catalogue
from harness.catalogue.references import reference_for
from harness.checks.tolerances import Tolerances
from harness.contract.solution import extract
from harness.report.certificate import (COVERAGE_LINES, HASH_KEY, _digests, _whole_hash,
                                        summary_markdown, verify_certificate,
                                        write_certificate)
from harness.testing.planted.core import missing_nuclear_repulsion
from harness.ui.cli import main
from harness.verdict.judge import JudgeSettings, judge

H2 = "h2-sto-3g-rhf"
#: Checks the planted bug (energy without E_nuc) fails on H2: its E_nuc is 1/1.4 Eh.
FAILING = ("energy-consistency", "reference-energy")


@pytest.fixture(scope="module")
def failing_run():
    case = load_catalogue().case(H2)
    problem = case.problem()
    solution = extract(missing_nuclear_repulsion(problem))
    reference, source = reference_for(case)
    result = judge(problem, solution, reference,
                   JudgeSettings(tolerances=Tolerances(), reference_source=source))
    assert {c.name for c in result.failures} == set(FAILING)
    return result, problem, solution, reference


@pytest.fixture
def cert(tmp_path, failing_run):
    result, problem, solution, reference = failing_run
    return write_certificate(tmp_path / "cert.json", [result], problems={H2: problem},
                             solutions={H2: solution}, references={H2: reference},
                             plugin="harness.testing.planted.core:missing_nuclear_repulsion")


def forge(path, change) -> dict:
    """Apply ``change`` to the certificate at ``path`` and recompute every hash (a forger
    who knows the format); returns the forged data."""
    data = json.loads(path.read_text())
    change(data)
    data["digests"] = _digests(data)
    data[HASH_KEY] = _whole_hash(data)
    path.write_text(json.dumps(data))
    return data


def checks_of(data) -> dict:
    return {c["name"]: c for c in data["cases"][0]["checks"]}


def words(check) -> str:
    return f"value {check['value']:.1e} > tolerance {check['tolerance']:g}"


def flip_flags(data):
    """The issue's forgery: every failed check's ``passed`` flag, the case's and the
    certificate's set to true; the status fields left as they were."""
    for name in FAILING:
        checks_of(data)[name]["passed"] = True
    data["cases"][0]["passed"] = data["passed"] = True


def flip_statuses(data):
    for name in FAILING:
        checks_of(data)[name]["status"] = "passed"


def flip_both(data):
    for name in FAILING:
        checks_of(data)[name]["status"], checks_of(data)[name]["passed"] = "passed", True
    data["cases"][0]["passed"] = data["passed"] = True


def edit_value(data):
    checks_of(data)["energy-consistency"]["value"] = 1e-12


def integrity(data, kind) -> list[str]:
    """The verbatim integrity lines expected for forgery ``kind`` of ``data``."""
    c = checks_of(data)
    where = f"certificate integrity: case {H2}, check"
    if kind == "flags":
        return [f"{where} {n}: passed=true but status failed and {words(c[n])}"
                for n in FAILING] + [
            f"certificate integrity: case {H2}: passed=true but check energy-consistency failed"]
    if kind == "statuses":
        return [f"{where} {n}: status passed but passed=false and {words(c[n])}"
                for n in FAILING] + [
            f"certificate integrity: case {H2}: passed=false but no check failed"]
    if kind == "both":
        return [f"{where} {n}: passed=true but {words(c[n])}" for n in FAILING]
    t = c["energy-consistency"]["tolerance"]
    return [f"{where} energy-consistency: passed=false but value 1.0e-12 ≤ tolerance {t:g}"]


FORGERIES = {"flags": flip_flags, "statuses": flip_statuses, "both": flip_both,
             "value": edit_value}


class TestIntegrityLines:
    def test_the_honest_failing_certificate_is_intact(self, cert):
        """A certificate of a failing run is intact: it is a true record of a failure."""
        assert verify_certificate(cert).issues == ()

    @pytest.mark.parametrize("kind", sorted(FORGERIES))
    def test_without_recompute(self, cert, kind):
        data = forge(cert, FORGERIES[kind])
        assert list(verify_certificate(cert).issues) == integrity(data, kind)

    @pytest.mark.parametrize("kind", sorted(FORGERIES))
    def test_with_recompute(self, cert, kind):
        """The same lines come first; recomputation adds what it finds on top."""
        data = forge(cert, FORGERIES[kind])
        issues = list(verify_certificate(cert, recompute=True).issues)
        expected = integrity(data, kind)
        assert issues[:len(expected)] == expected
        if kind in ("statuses", "both"):
            assert issues[len(expected):] == [
                f"cases/{H2}/checks/{n}: certified passed, recomputed failed "
                f"({checks_of(json.loads(cert.read_text()))[n]['message']})"
                for n in FAILING]

    def test_stability_value_is_signed(self):
        """stability's value is an eigenvalue: a pass below −tolerance can be genuine
        (following the instability did not lower E), a failure above it cannot."""
        from harness.report.certificate import _check_consistency

        ok = {"name": "stability", "status": "passed", "passed": True, "value": -0.5,
              "tolerance": 1e-5}  # synthetic
        assert _check_consistency(H2, ok) is None
        bad = dict(ok, status="failed", passed=False, value=0.1)
        assert _check_consistency(H2, bad) == (
            f"certificate integrity: case {H2}, check stability: passed=false but value "
            f"1.0e-01 ≥ −tolerance -1e-05")


class TestSummary:
    def test_forged_flags_never_read_passed_in_the_summary(self, cert, tmp_path, capsys):
        """The issue's case: `verify-certificate --recompute --markdown` on a certificate
        whose failed checks' flags were flipped: exit 1, the summary's verdict REJECTED
        and every row from the recomputed values (FAILED)."""
        data = forge(cert, flip_flags)
        out = tmp_path / "summary.md"
        code = main(["verify-certificate", str(cert), "--recompute", "--markdown", str(out)])
        assert code == 1
        text = out.read_text()
        first = integrity(data, "flags")[0]
        assert (f"- verdict: **REJECTED**: the certificate did not verify (3 problems; "
                f"first: {first}) (0 of 1 cases passed); energies in hartree (Eh), lengths "
                f"in bohr") in text.splitlines()
        assert "**PASSED**" not in text
        assert f"| {H2} | rhf/sto-3g | " in text and text.count("| FAILED |") == 1
        assert ("- results recomputed from the stored solutions by this harness "
                "(`verify-certificate --recompute`), not read from the certificate") in text
        for name in FAILING:
            assert f"- ✗ {name}: " in text

    def test_recomputed_values_replace_the_certified_ones(self, cert):
        """Under --recompute the rows come from the recomputed results, even where the
        certificate's fields were changed consistently."""
        forge(cert, flip_both)
        verification = verify_certificate(cert, recompute=True)
        text = summary_markdown(json.loads(cert.read_text()), verification)
        assert "- ✗ energy-consistency: " in text and "- ✓ energy-consistency" not in text
        without = summary_markdown(json.loads(cert.read_text()))
        assert "- ✓ energy-consistency: " in without  # the claim, shown only unverified
        assert "- results as recorded in the certificate (not verified)" in without

    def test_the_summary_says_what_it_covers(self, cert):
        """Verbatim: the listed cases and checks only, hashes detect edits but are not a
        signature, where the limits are written."""
        text = summary_markdown(json.loads(cert.read_text()), verify_certificate(cert))
        assert text.endswith(".md.\n")
        tail = text.splitlines()[-len(COVERAGE_LINES):]
        assert tail == [
            "## What this certificate covers",
            "",
            "- Only the cases and checks listed above, for the inputs recorded with each case "
            "(molecule, basis, method, convergence) and the tolerances and options recorded "
            "here; nothing about other molecules, bases, methods, or quantities the code did "
            "not return.",
            "- The hashes (input, solution, sidecar, certificate) detect edits made after the "
            "certificate was written; they are not a signature: whoever edits the file can "
            "recompute them. `scf-harness verify-certificate --recompute` re-runs every check "
            "on the stored solutions instead of trusting the recorded results.",
            "- The limits of a pass are written in the README (\"What a pass means\", "
            "\"Reliability\") and in docs/what-a-pass-means.md."]
        assert ("- verdict: **FAILED** (0 of 1 cases passed); energies in hartree (Eh), "
                "lengths in bohr") in text.splitlines()
