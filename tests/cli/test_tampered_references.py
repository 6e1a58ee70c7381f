"""Tampered stored references, as a user meets them on the command line (issue 14).

Each edit of H2/STO-3G's stored file — the total energy alone, the total with the
nuclear term (the terms still sum), one orbital energy — is refused by ``references
verify`` (MISMATCH, exit 1) and by ``certify`` (the correct example code's case fails
reference-energy naming the file, exit 1); the untouched copy passes both.
"""

from __future__ import annotations

import json
import shutil
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "unit"))
from reference_tampering import H2, TAMPERINGS, tampered_reason  # noqa: E402

sys.path.pop(0)

from test_cli import cli, read_json  # noqa: E402

EXAMPLE = "harness.testing.example_scf:solve"


@pytest.fixture
def data(tmp_path) -> Path:
    """A copy of the bundled references/data."""
    from harness.catalogue.cases import default_reference_dir

    copy = tmp_path / "data"
    shutil.copytree(default_reference_dir() / "data", copy)
    return copy


def test_untouched_copy_verifies_and_certifies(data, tmp_path):
    result = cli("references", "verify", "--case", H2, "--references", str(data), cwd=tmp_path)
    assert result.returncode == 0, result.stdout + result.stderr
    result = cli("certify", EXAMPLE, "--case", H2, "--references", str(data), "--json",
                 "out.json", cwd=tmp_path)
    assert result.returncode == 0, result.stdout + result.stderr
    assert read_json(tmp_path / "out.json")["cases"][0]["reference_source"] == "stored"


@pytest.mark.parametrize("kind", [  # ~6 s each: one in the default run
    "total-and-nuclear", pytest.param("total", marks=pytest.mark.slow),
    pytest.param("orbital-energy", marks=pytest.mark.slow)])
def test_tampered_reference_fails_verify_and_certify(data, tmp_path, kind):
    path = data / f"{H2}.json"
    stored = json.loads(path.read_text())
    TAMPERINGS[kind][0](stored)
    path.write_text(json.dumps(stored, indent=1))
    reason = tampered_reason(path, kind)

    result = cli("references", "verify", "--case", H2, "--references", str(data), cwd=tmp_path)
    assert result.returncode == 1, result.stdout + result.stderr
    assert result.stdout.splitlines()[0] == f"{H2}: MISMATCH ({reason})"

    result = cli("certify", EXAMPLE, "--case", H2, "--references", str(data), "--json",
                 "out.json", cwd=tmp_path)
    assert result.returncode == 1, result.stdout + result.stderr
    case = read_json(tmp_path / "out.json")["cases"][0]
    (check,) = [c for c in case["checks"] if c["name"] == "reference-energy"]
    assert check["status"] == "failed"
    assert check["message"] == f"reference-energy: no reference ({H2}): {reason}"
