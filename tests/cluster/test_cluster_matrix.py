"""A generated matrix of 102 cases (17 tiny geometries × 2 bases × 3 methods) on a
two-worker LocalCluster, from the command line and from the pytest plug-in, gives the
same verdicts as a local run. Slow (every reference is computed: none is stored)."""

from __future__ import annotations

import json
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from tests.cli.test_cli import environment

pytest.importorskip("distributed")

EXAMPLE = "harness.testing.example_scf:solve"

#: Bond lengths in ångström, synthetic (a scan, not from any source), kept short of
#: where the RHF ground state of H2 becomes unstable towards UHF.
H2 = [0.55 + 0.05 * i for i in range(10)]
HEH = [0.70, 0.80, 0.90, 1.00]
LIH = [1.40, 1.60, 1.80]

MATRIX = """
[[matrix]]
name = "tiny scan"
prefix = "scan-"
geometries = "geo"
bases = ["sto-3g", "3-21g"]
methods = ["rhf", "uhf", "rohf"]
molecules = { %s }
"""


def _write_matrix(tmp_path: Path) -> Path:
    geo = tmp_path / "geo"
    geo.mkdir()
    side = []
    for r in H2:
        (geo / f"h2-{r:.2f}.xyz").write_text(
            f"2\nsynthetic scan charge=0 multiplicity=1\nH 0 0 0\nH 0 0 {r:.2f}\n")
    for r in HEH:
        (geo / f"heh-{r:.2f}.xyz").write_text(f"2\nsynthetic scan\nHe 0 0 0\nH 0 0 {r:.2f}\n")
        side.append(f'"heh-{r:.2f}" = {{ charge = 1 }}')
    for r in LIH:
        (geo / f"lih-{r:.2f}.xyz").write_text(f"2\nsynthetic scan\nLi 0 0 0\nH 0 0 {r:.2f}\n")
    path = tmp_path / "matrix.toml"
    path.write_text(MATRIX % ", ".join(side))
    return path


def _run(*args: str, cwd: Path, env=None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, *args], cwd=cwd, env=env or environment(),
                          capture_output=True, text=True, timeout=900)


def _verdicts(path: Path) -> dict[str, tuple]:
    return {c["name"]: (c["passed"], tuple((k["name"], k["status"]) for k in c["checks"]))
            for c in json.loads(path.read_text())["cases"]}


@pytest.mark.slow
def test_a_102_case_matrix_on_two_workers_from_cli_and_pytest(tmp_path):
    _write_matrix(tmp_path)
    listed = _run("-m", "harness", "cases", "--cases-file", "matrix.toml", cwd=tmp_path)
    assert listed.returncode == 0, listed.stderr
    assert listed.stdout.splitlines()[-1] == (
        "102 cases (0 from [[case]] tables, 102 from [[matrix]] tables)")

    local = _run("-m", "harness", "certify", EXAMPLE, "--cases-file", "matrix.toml",
                 "--jobs", "2", "--quiet", "--json", "local.json", cwd=tmp_path)
    assert local.returncode in (0, 1), local.stderr
    cluster = _run("-m", "harness", "certify", EXAMPLE, "--cases-file", "matrix.toml",
                   "--scheduler", "local:2", "--reference-cache", "cache", "--quiet",
                   "--json", "cluster.json", cwd=tmp_path)
    assert cluster.returncode == local.returncode, cluster.stderr
    expected = _verdicts(tmp_path / "local.json")
    assert len(expected) == 102
    assert _verdicts(tmp_path / "cluster.json") == expected
    # every reference was computed once, into the shared cache, by input hash
    assert len(list((tmp_path / "cache").glob("*.json"))) == 102
    sources = {c["reference_source"]
               for c in json.loads((tmp_path / "cluster.json").read_text())["cases"]}
    assert sources == {"computed"}

    env = environment()
    env["SCF_HARNESS_REFERENCE_CACHE"] = str(tmp_path / "cache")
    tested = _run("-m", "pytest", "-p", "no:cacheprovider", "-q", "--scf-plugin", EXAMPLE,
                  "--scf-cases-file", "matrix.toml", "--scf-scheduler", "local:2",
                  "--junitxml", "junit.xml", cwd=tmp_path, env=env)
    assert tested.returncode == (0 if local.returncode == 0 else 1), tested.stdout[-2000:]
    cases = ET.parse(tmp_path / "junit.xml").getroot().iter("testcase")
    passed = {c.get("name"): c.find("failure") is None for c in cases}
    assert passed == {name: verdict[0] for name, verdict in expected.items()}
