"""``scf-harness certify`` end to end: a planted bug through the file-spec path, a user
suite file with a case that has no stored reference, and (slow) the standard suite."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from test_cli import cli

REPO = Path(__file__).resolve().parents[2]
BROKEN = REPO / "tests" / "quality" / "broken_codes.py"


def test_planted_bug_fails_with_its_message(tmp_path):
    """Missing nuclear repulsion, loaded from a file path, fails energy-consistency."""
    out = tmp_path / "r.json"
    proc = cli("certify", f"{BROKEN}:missing_nuclear_repulsion", "--case", "water-sto-3g-rhf",
               "--json", str(out), cwd=tmp_path)
    assert proc.returncode == 1, proc.stderr
    assert ("energy-consistency: |E − E[P]| = 8.0e+00 > 1.0e-08 (water-sto-3g-rhf), E = "
            in proc.stdout)
    assert proc.stdout.rstrip().splitlines()[-1] == "0 passed, 1 failed"
    report = json.loads(out.read_text())
    assert report["passed"] is False
    (case,) = report["cases"]
    failed = {c["name"] for c in case["checks"] if c["passed"] is False}
    assert failed == {"energy-consistency", "reference-energy"}
    assert not (tmp_path / "r.json.partial.jsonl").exists()


def test_user_suite_file_computes_a_missing_reference(tmp_path):
    """A user's case without a stored reference gets one from pyscf, and says so."""
    geometry = tmp_path / "geo"
    geometry.mkdir()
    shutil.copy(REPO / "references" / "geometries" / "lih.xyz", geometry / "lih.xyz")
    suite = tmp_path / "mine.toml"
    suite.write_text('[[case]]\nname = "lih-sto-3g-uhf-mine"\ngeometry = "geo/lih.xyz"\n'
                     'basis = "sto-3g"\ncartesian = false\nmethod = "uhf"\ncharge = 0\n'
                     'multiplicity = 1\n')
    (tmp_path / "refs").mkdir()
    out = tmp_path / "r.json"
    proc = cli("certify", "--cases-file", str(suite), "--json", str(out),
               "--references", str(tmp_path / "refs"), cwd=tmp_path)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    (case,) = json.loads(out.read_text())["cases"]
    assert case["name"] == "lih-sto-3g-uhf-mine" and case["passed"] is True
    assert case["reference_source"] == "computed"
    assert "computed" in proc.stdout


@pytest.mark.slow
def test_example_passes_the_standard_suite(tmp_path):
    """The bundled example passes all 28 standard cases (about 15 s with two jobs)."""
    out = tmp_path / "std.json"
    proc = subprocess.run([sys.executable, "-m", "harness", "certify", "--suite", "standard",
                           "--jobs", "2", "--json", str(out)], cwd=tmp_path,
                          capture_output=True, text=True, timeout=900,
                          env={**__import__("os").environ, "PYTHONPATH": str(REPO)})
    assert proc.returncode == 0, proc.stdout[-3000:]
    report = json.loads(out.read_text())
    assert len(report["cases"]) >= 20 and report["passed"] is True
