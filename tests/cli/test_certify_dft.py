"""`scf-harness certify --suite dft` passes the bundled example code (RKS/UKS/ROKS on the
pinned grid); ~10 s on 2 cores, so slow."""

from __future__ import annotations

import subprocess
import sys

import pytest


@pytest.mark.slow
def test_certify_dft_suite_passes_example(tmp_path):
    out = subprocess.run([sys.executable, "-m", "harness", "certify", "--suite", "dft",
                          "--jobs", "2", "harness.testing.example_scf:solve"],
                         capture_output=True, text=True, cwd=tmp_path, timeout=600)
    assert out.returncode == 0, out.stdout[-2000:] + out.stderr[-2000:]
    assert "12 passed, 0 failed" in out.stdout
