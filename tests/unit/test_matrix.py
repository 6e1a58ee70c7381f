"""Case matrices in suite files (harness.catalogue.matrix): expansion, ids, exclusions,
charge and multiplicity from the comment line or the side table, and every bad entry
listed together before anything runs. No SCF is run here."""

from __future__ import annotations

from pathlib import Path

import pytest

from harness.catalogue.cases import load_suite_file
from harness.catalogue.matrix import comment_spin, id_part
from harness.contract.errors import CaseError, CaseListError

REPO = Path(__file__).resolve().parents[2]


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture
def geo(tmp_path):
    """Four small molecules: H2 and LiH (closed shell), OH (doublet on its comment line),
    HeH+ (charge only in the side table)."""
    d = tmp_path / "geo"
    d.mkdir()
    _write(d / "h2.xyz", "2\nunits=bohr\nH 0 0 0\nH 0 0 1.4\n")
    _write(d / "lih.xyz", "2\nsource: from memory\nLi 0 0 0\nH 0 0 1.5949\n")
    _write(d / "oh.xyz", "2\nsynthetic charge=0 multiplicity=2\nO 0 0 0\nH 0 0 0.97\n")
    _write(d / "heh.xyz", "2\nunits=bohr\nHe 0 0 0\nH 0 0 1.4632\n")
    return d


def test_id_part():
    assert id_part("6-31G*") == "6-31gd"
    assert id_part("6-31G**") == "6-31gdp"
    assert id_part("6-311+G(2d,p)") == "6-311+g2dp"
    assert id_part("cc-pVDZ") == "cc-pvdz"
    assert id_part("def2 SVP") == "def2-svp"


def test_comment_spin():
    assert comment_spin("source: x charge=-1 multiplicity=2") == {"charge": -1,
                                                                  "multiplicity": 2}
    assert comment_spin("units=bohr") == {}
    assert comment_spin("charge=one") == {"charge": "one"}


def test_cross_product_in_order_with_ids(geo, tmp_path):
    path = _write(tmp_path / "m.toml", """
[[matrix]]
geometries = ["geo/h2.xyz", "geo/lih.xyz"]
bases = ["sto-3g", "6-31G*"]
methods = ["rhf", "uhf"]
suites = ["nightly"]
note = "matrix"
""")
    cases = load_suite_file(path)
    assert [c.name for c in cases] == [
        "h2-sto-3g-rhf", "h2-sto-3g-uhf", "h2-6-31gd-rhf", "h2-6-31gd-uhf",
        "lih-sto-3g-rhf", "lih-sto-3g-uhf", "lih-6-31gd-rhf", "lih-6-31gd-uhf"]
    first = cases[0]
    assert (first.basis, first.method, first.charge, first.multiplicity, first.suites,
            first.note) == ("sto-3g", "rhf", 0, 1, ("nightly",), "matrix")
    assert cases[2].basis == "6-31g*"
    assert cases[0].coordinates[1, 2] == 1.4  # bohr as given
    assert cases[2].problem().nao == 4


def test_suite_file_in_a_subfolder_named_relative_to_the_working_folder(geo, tmp_path,
                                                                        monkeypatch):
    """``--cases-file suites/m.toml`` from the folder above: the geometry paths are
    relative to the suite file, once (they were once joined to its folder twice:
    'suites/suites/../geo/h2.xyz', file not found)."""
    (tmp_path / "suites").mkdir()
    _write(tmp_path / "suites" / "m.toml", """
[[matrix]]
geometries = ["../geo/h2.xyz", "../geo/*.xyz"]
bases = ["sto-3g"]
methods = ["rhf"]
exclude = ["oh-*", "heh-*"]
""")
    monkeypatch.chdir(tmp_path)
    cases = load_suite_file(Path("suites") / "m.toml")
    assert [c.name for c in cases] == ["h2-sto-3g-rhf", "lih-sto-3g-rhf"]
    assert cases[0].coordinates[1, 2] == 1.4


def test_folder_glob_comment_line_side_table_and_exclusions(geo, tmp_path):
    path = _write(tmp_path / "m.toml", """
[[case]]
name = "single"
geometry = "geo/h2.xyz"
basis = "sto-3g"
method = "rhf"

[[matrix]]
name = "small"
prefix = "lab-"
geometries = "geo"
bases = ["sto-3g"]
methods = ["rhf", "uhf", "rohf"]
exclude = [{ geometry = "oh", method = "rhf" }, "lab-h2-*-ro*", { method = "rohf", geometry = "l*" }]
molecules = { heh = { charge = 1 } }
""")
    cases = {c.name: c for c in load_suite_file(path)}
    assert list(cases) == [
        "single",
        "lab-h2-sto-3g-rhf", "lab-h2-sto-3g-uhf",
        "lab-heh-sto-3g-rhf", "lab-heh-sto-3g-uhf", "lab-heh-sto-3g-rohf",
        "lab-lih-sto-3g-rhf", "lab-lih-sto-3g-uhf",
        "lab-oh-sto-3g-uhf", "lab-oh-sto-3g-rohf"]
    assert (cases["lab-oh-sto-3g-uhf"].charge, cases["lab-oh-sto-3g-uhf"].multiplicity) == (0, 2)
    assert (cases["lab-heh-sto-3g-rhf"].charge, cases["lab-heh-sto-3g-rhf"].n_electrons) == (1, 2)


def test_side_table_wins_over_the_comment_line(geo, tmp_path):
    path = _write(tmp_path / "m.toml", """
[[matrix]]
geometries = "geo/oh.xyz"
bases = ["sto-3g"]
methods = ["uhf"]
molecules = { oh = { charge = -1, multiplicity = 1 } }
""")
    (case,) = load_suite_file(path)
    assert (case.charge, case.multiplicity, case.n_electrons) == (-1, 1, 10)


def test_every_bad_entry_listed_together(geo, tmp_path):
    _write(geo / "xx.xyz", "1\nbad element\nXx 0 0 0\n")
    _write(geo / "li.xyz", "1\nlithium atom multiplicity=6\nLi 0 0 0\n")
    path = _write(tmp_path / "m.toml", """
[[case]]
name = "lone"
geometry = "geo/nowhere.xyz"
basis = "sto-3g"
method = "rhf"

[[matrix]]
name = "bad"
geometries = ["geo/oh.xyz", "geo/xx.xyz", "geo/li.xyz", "geo/missing.xyz", "empty/*.xyz"]
bases = ["sto-3g"]
methods = ["rhf", "uhf"]
exclude = ["never-*"]

[[matrix]]
geometries = "geo/h2.xyz"
bases = ["sto-3g"]
methods = ["rhf", "dft"]
""")
    with pytest.raises(CaseListError) as err:
        load_suite_file(path)
    f, g = str(path), str(geo)
    assert err.value.problems == (
        f"{f}: case 'lone': geometry: file not found: {g}/nowhere.xyz",
        f"{f}: matrix 'bad': geometries: file not found: {g}/missing.xyz",
        f"{f}: matrix 'bad': geometries: 'empty/*.xyz' matches no file ({tmp_path}/empty/*.xyz)",
        f"{f}: matrix 'bad': case 'oh-sto-3g-rhf': method: rhf is closed-shell but the "
        f"molecule has 9 electrons (an odd number; use uhf or rohf with an even multiplicity)",
        f"{f}: matrix 'bad': geometries: {g}/xx.xyz: line 3: unknown element symbol 'Xx'",
        f"{f}: matrix 'bad': case 'li-sto-3g-rhf': method: rhf is closed-shell but the "
        f"molecule has 3 electrons (an odd number; use uhf or rohf with an even multiplicity)",
        f"{f}: matrix 'bad': case 'li-sto-3g-uhf': multiplicity: 6 is impossible with 3 "
        f"electrons",
        f"{f}: matrix 'bad': exclude: 'never-*' matches no generated case",
        f"{f}: matrix #2: methods: must be among rhf, uhf, rohf, rks, uks, roks, got 'dft'",
    )
    lines = str(err.value).splitlines()
    assert lines[0] == f"{f}: 9 bad entries:"
    assert lines[1:] == list(err.value.problems)
    assert isinstance(err.value, CaseError)


def test_one_bad_entry_is_a_plain_case_error(geo, tmp_path):
    path = _write(tmp_path / "m.toml", """
[[matrix]]
geometries = "geo/h2.xyz"
bases = ["no-such-basis"]
methods = ["rhf"]
""")
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert not isinstance(err.value, CaseListError)
    assert str(err.value).startswith(f"{path}: matrix #1: case 'h2-no-such-basis-rhf': basis: "
                                     f"pyscf cannot build 'no-such-basis'")


@pytest.mark.parametrize("body, message", [
    ('bases = ["sto-3g"]\nmethods = ["rhf"]', "matrix #1: geometries: missing"),
    ('geometries = "geo/h2.xyz"\nbases = "sto-3g"\nmethods = ["rhf"]',
     "matrix #1: bases: must be a list, got 'sto-3g'"),
    ('geometries = "geo/h2.xyz"\nbases = []\nmethods = ["rhf"]',
     "matrix #1: bases: must not be empty"),
    ('geometries = "geo/h2.xyz"\nbases = ["sto-3g"]\nmethods = ["rhf"]\nbasis = "x"',
     "matrix #1: basis: unknown key (did you mean 'bases'?)"),
    ('geometries = "geo/h2.xyz"\nbases = ["sto-3g"]\nmethods = ["rhf"]\n'
     'molecules = { h3 = { charge = 1 } }', "matrix #1: molecules.h3: names no geometry of "
                                            "this matrix"),
    ('geometries = "geo/h2.xyz"\nbases = ["sto-3g"]\nmethods = ["rhf"]\n'
     'molecules = { h2 = { spin = 1 } }', "matrix #1: molecules.h2: expected a table of "
                                          "integer charge and multiplicity, got {'spin': 1}"),
    ('geometries = "geo/h2.xyz"\nbases = ["sto-3g"]\nmethods = ["rhf"]\n'
     'exclude = [{ atom = "h" }]', "matrix #1: exclude: each exclusion is an id pattern or a "
                                   "table of geometry, basis, method, got {'atom': 'h'}"),
])
def test_field_errors(geo, tmp_path, body, message):
    path = _write(tmp_path / "m.toml", "[[matrix]]\n" + body + "\n")
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value) == f"{path}: {message}"


def test_duplicate_ids_across_entries(geo, tmp_path):
    path = _write(tmp_path / "m.toml", """
[[case]]
name = "h2-sto-3g-rhf"
geometry = "geo/h2.xyz"
basis = "sto-3g"
method = "rhf"

[[matrix]]
geometries = "geo/h2.xyz"
bases = ["sto-3g"]
methods = ["rhf"]
""")
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value) == f"{path}: case 'h2-sto-3g-rhf': name: duplicate case name"


def test_structure_errors(tmp_path):
    path = _write(tmp_path / "none.toml", "")
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value) == f"{path}: no [[case]] or [[matrix]] tables"
