"""``scf-harness cases --cases-file F`` with [[matrix]] tables: the expansion and its
count, and every bad entry on its own line (exit 2) before anything runs."""

from __future__ import annotations

from pathlib import Path

from tests.cli.test_cli import ERROR, cli

MATRIX = """
[[case]]
name = "lab-single"
geometry = "geo/h2.xyz"
basis = "sto-3g"
method = "rhf"

[[matrix]]
prefix = "lab-"
geometries = "geo/*.xyz"
bases = ["sto-3g", "6-31g"]
methods = ["rhf", "uhf"]
exclude = [{ geometry = "oh", method = "rhf" }]
"""


def _geometries(tmp_path: Path) -> None:
    geo = tmp_path / "geo"
    geo.mkdir()
    (geo / "h2.xyz").write_text("2\nunits=bohr\nH 0 0 0\nH 0 0 1.4\n")
    (geo / "oh.xyz").write_text("2\nsynthetic multiplicity=2\nO 0 0 0\nH 0 0 0.97\n")


def test_cases_shows_the_expansion_and_its_count(tmp_path):
    _geometries(tmp_path)
    (tmp_path / "m.toml").write_text(MATRIX)
    result = cli("cases", "--cases-file", "m.toml", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    names = [line.split()[0] for line in result.stdout.splitlines()[2:-1]]
    assert names == ["lab-single", "lab-h2-sto-3g-rhf", "lab-h2-sto-3g-uhf",
                     "lab-h2-6-31g-rhf", "lab-h2-6-31g-uhf", "lab-oh-sto-3g-uhf",
                     "lab-oh-6-31g-uhf"]
    assert result.stdout.splitlines()[-1] == (
        "7 cases (1 from [[case]] tables, 6 from [[matrix]] tables)")


def test_bad_entries_each_on_its_own_line(tmp_path):
    _geometries(tmp_path)
    (tmp_path / "m.toml").write_text(MATRIX.replace(
        'exclude = [{ geometry = "oh", method = "rhf" }]',
        'exclude = ["nothing-*"]').replace('"geo/h2.xyz"', '"geo/none.xyz"'))
    for command in (["cases"], ["certify"]):
        result = cli(*command, "--cases-file", "m.toml", cwd=tmp_path)
        assert result.returncode == 2
        assert result.stdout == ""
        odd = ("method: rhf is closed-shell but the molecule has 9 electrons (an odd number; "
               "use uhf or rohf with an even multiplicity)")
        assert result.stderr.splitlines() == [
            ERROR + "m.toml: 4 bad entries:",
            f"  m.toml: case 'lab-single': geometry: file not found: {tmp_path}/geo/none.xyz"
            .replace(str(tmp_path) + "/", ""),
            f"  m.toml: matrix #1: case 'lab-oh-sto-3g-rhf': {odd}",
            f"  m.toml: matrix #1: case 'lab-oh-6-31g-rhf': {odd}",
            "  m.toml: matrix #1: exclude: 'nothing-*' matches no generated case",
        ]
