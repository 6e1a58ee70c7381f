"""Certificates (harness/report/certificate.py): written, verified, every edit detected and
named, and recomputation reproduces every verdict. Energies in Eh."""

from __future__ import annotations

import json

import numpy as np
import pytest

from harness.catalogue.cases import load_catalogue
from harness.report.certificate import (CERTIFICATE_FORMAT, HASH_KEY, _digests, _whole_hash,
                                 sidecar_path, solution_hash, summary_markdown,
                                 verify_certificate, write_certificate)
from harness.verdict.judge import JudgeSettings, judge
from harness.testing.example_scf import solve
from harness.catalogue.references import reference_for
from harness.contract.solution import Malformed, Solution, extract
from harness.checks.tolerances import Tolerances

NAMES = ("h2-sto-3g-rhf", "oh-sto-3g-uhf")


@pytest.fixture(scope="module")
def run():
    """The example code on two smoke cases: (results, problems, solutions, references)."""
    catalogue = load_catalogue()
    results, problems, solutions, references = [], {}, {}, {}
    tol = Tolerances(overrides={"reference-energy": 2e-6})
    for name in NAMES:
        case = catalogue.case(name)
        p = case.problem()
        ex = extract(solve(p))
        ref, source = reference_for(case)
        results.append(judge(p, ex, ref, JudgeSettings(tolerances=tol,
                                                      reference_source=source)))
        problems[name], solutions[name], references[name] = p, ex, ref
    return results, problems, solutions, references, tol


@pytest.fixture
def cert_path(tmp_path, run):
    results, problems, solutions, references, tol = run
    return write_certificate(tmp_path / "cert.json", results, problems=problems,
                             solutions=solutions, references=references, tolerances=tol,
                             plugin="harness.testing.example_scf:solve")


def check_of(data, index, name):
    """The certified entry of check ``name`` in case number ``index``."""
    return next(c for c in data["cases"][index]["checks"] if c["name"] == name)


def edit(path, change):
    data = json.loads(path.read_text())
    change(data)
    path.write_text(json.dumps(data))


class TestContent:
    def test_fields(self, cert_path, run):
        """Format tag, versions, sidecar hash, per-case input/solution hashes and checks."""
        cert = json.loads(cert_path.read_text())
        assert cert["format"] == CERTIFICATE_FORMAT
        assert set(cert["versions"]) == {"harness", "pyscf", "numpy"}
        assert cert["sidecar"]["file"] == "cert.solutions.npz"
        assert sidecar_path(cert_path).is_file()
        assert cert["tolerances"] == {"factor": 10.0, "overrides": {"reference-energy": 2e-6}}
        results, problems, solutions, references, _ = run
        for entry, result in zip(cert["cases"], results):
            from harness.catalogue.references import input_hash

            assert entry["input_hash"] == input_hash(load_catalogue().case(entry["name"]))
            assert entry["solution"]["sha256"] == solution_hash(solutions[entry["name"]])
            assert [c["name"] for c in entry["checks"]] == [c.name for c in result.checks]
            assert check_of(cert, cert["cases"].index(entry), "reference-energy")[
                "tolerance"] == 2e-6  # the override
            assert entry["reference"]["provenance"]["program"] == "pyscf"
        assert cert[HASH_KEY] == _whole_hash(cert)

    def test_solution_hash_sees_dtype_shape_and_bytes(self):
        """The solution hash changes with one ulp, with the shape, and with a key."""
        base = Solution(energy=-1.0, coefficients=np.eye(2), converged=True)  # synthetic
        h = solution_hash(base)
        assert solution_hash(base.replace()) == h
        bumped = base.replace(coefficients=np.eye(2) + np.array([[0, 0], [0, 2e-16]]))
        assert solution_hash(bumped) != h
        assert solution_hash(base.replace(coefficients=np.eye(2).reshape(1, 4))) != h
        assert solution_hash(base.replace(converged=1)) != h  # bool vs int64
        assert solution_hash(base.replace(fock=Malformed("x"))) != h

    def test_summary(self, cert_path):
        text = summary_markdown(json.loads(cert_path.read_text()))
        assert "| h2-sto-3g-rhf | rhf/sto-3g | -1.1167143251 | -1.1167143251 | stored | " \
               "passed |" in text
        assert "**PASSED** (2 of 2 cases passed)" in text
        assert "- ✓ stationarity: " in text


class TestIntegrity:
    def test_intact(self, cert_path):
        result = verify_certificate(cert_path)
        assert result.ok and result.issues == () and result.cases == 2
        assert result.summary().endswith("intact (2 cases)")

    def test_recompute_reproduces(self, cert_path):
        result = verify_certificate(cert_path, recompute=True)
        assert result.issues == ()
        assert result.summary().endswith("intact and reproduced (2 cases)")

    @pytest.mark.parametrize("change, named", [
        (lambda d: d["cases"][0].__setitem__("energy", d["cases"][0]["energy"] + 1e-9),
         "cases/h2-sto-3g-rhf/energy: edited"),
        (lambda d: check_of(d, 1, "stationarity").__setitem__("status", "failed"),
         "cases/oh-sto-3g-uhf/checks/stationarity: edited"),
        (lambda d: d["cases"][1]["inputs"]["coordinates_bohr"][1].__setitem__(2, 1.9),
         "cases/oh-sto-3g-uhf/inputs: edited"),
        (lambda d: d["versions"].__setitem__("pyscf", "9.9"), "versions: edited"),
        (lambda d: d["tolerances"]["overrides"].__setitem__("stationarity", 1.0),
         "tolerances: edited"),
        (lambda d: d["cases"][0].__setitem__("note", "fine"), "cases/h2-sto-3g-rhf/note: added"),
        (lambda d: d["cases"][0].pop("reference"), "cases/h2-sto-3g-rhf/reference: removed"),
    ])
    def test_json_edit_named(self, cert_path, change, named):
        """Each edit is detected by the whole hash and named by its field digest."""
        edit(cert_path, change)
        issues = verify_certificate(cert_path).issues
        assert issues[0] == f"{HASH_KEY}: does not match the certificate's content (edited)"
        assert any(i.startswith(named) for i in issues), issues
        # a status edited alone also disagrees with the certificate's other fields
        assert len([i for i in issues if not i.startswith("certificate integrity")]) == 2

    def test_sidecar_edit_named(self, cert_path):
        """One changed element of one array: the file hash and the case are named."""
        side = sidecar_path(cert_path)
        with np.load(side) as data:
            arrays = {k: np.array(data[k]) for k in data.files}
        arrays["oh-sto-3g-uhf/fock"][0, 1, 2] += 1e-12
        np.savez(side, **arrays)
        issues = verify_certificate(cert_path).issues
        assert issues == (
            "sidecar: cert.solutions.npz was modified (its SHA-256 differs from the certified "
            "one)",
            "cases/oh-sto-3g-uhf/solution: the sidecar's arrays do not match the certified "
            "solution hash")

    def test_sidecar_missing(self, cert_path):
        sidecar_path(cert_path).unlink()
        assert verify_certificate(cert_path).issues == (
            "sidecar: cert.solutions.npz not found beside the certificate",)

    def test_not_a_certificate(self, tmp_path):
        path = tmp_path / "x.json"
        path.write_text('{"format": "scf-harness-reference/1"}')
        assert verify_certificate(path).issues == (
            "format: 'scf-harness-reference/1', expected 'scf-harness-certificate/1'",)
        path.write_text("{")
        assert verify_certificate(path).issues == ("not a readable JSON file (JSONDecodeError)",)


class TestRecompute:
    def test_rehashed_forgery_caught_by_recompute(self, cert_path):
        """A value edited and every hash recomputed passes integrity, not recomputation."""
        def forge(d):
            check = check_of(d, 0, "energy-consistency")
            check["value"] = 1e-3
            check["status"], check["passed"] = "failed", False
            d["cases"][0]["passed"] = d["passed"] = False  # consistent all through
            d["digests"] = _digests(d)
            d[HASH_KEY] = _whole_hash(d)

        edit(cert_path, forge)
        assert verify_certificate(cert_path).ok
        issues = verify_certificate(cert_path, recompute=True).issues
        assert len(issues) == 1
        assert issues[0].startswith("cases/h2-sto-3g-rhf/checks/energy-consistency: certified "
                                    "failed, recomputed passed (energy-consistency: ")

    def test_forged_value_same_status(self, cert_path):
        def forge(d):
            check = check_of(d, 1, "orthonormality")
            check["value"] = 1e-9
            d["digests"] = _digests(d)
            d[HASH_KEY] = _whole_hash(d)

        edit(cert_path, forge)
        issues = verify_certificate(cert_path, recompute=True).issues
        assert len(issues) == 1
        assert issues[0].startswith("cases/oh-sto-3g-uhf/checks/orthonormality: certified value "
                                    "1e-09, recomputed ")
