"""The case catalogue, the XYZ reader and user suite files (no SCF is run here)."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from harness.catalogue.cases import (REFERENCES_ENV, Case, load_catalogue, load_suite_file,
                           read_xyz, default_reference_dir)
from harness.contract.errors import CaseError
from harness.contract.problem import Problem
from harness.contract.units import ANGSTROM_IN_BOHR

REPO = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def catalogue():
    return load_catalogue()


def _angular_momenta(case: Case) -> set[int]:
    mol = case.mole()
    return {int(mol.bas_angular(i)) for i in range(mol.nbas)}


# --------------------------------------------------------------------------- catalogue


def test_catalogue_loads_from_repo_references(catalogue):
    assert catalogue.path == REPO / "references" / "cases.toml"
    assert set(catalogue.suites) >= {"smoke", "standard", "atoms"}
    assert len(set(catalogue.names)) == len(catalogue.cases)


def test_smoke_suite_is_small_and_tiny(catalogue):
    smoke = catalogue.suite("smoke")
    assert [c.name for c in smoke] == ["h2-sto-3g-rhf", "water-sto-3g-rhf", "oh-sto-3g-uhf",
                                       "nh2-sto-3g-rohf"]
    assert len(smoke) <= 5
    assert all(c.problem().nao <= 10 for c in smoke)


def test_standard_suite_coverage(catalogue):
    standard = catalogue.suite("standard")
    assert len(standard) >= 20
    names = {c.name for c in standard}
    assert {c.name for c in catalogue.suite("smoke")} <= names
    assert {c.method for c in standard} == {"rhf", "uhf", "rohf"}
    assert any(c.charge > 0 for c in standard)
    assert any(c.charge < 0 for c in standard)
    cartesian_d = [c for c in standard if c.cartesian and 2 in _angular_momenta(c)]
    assert {c.name for c in cartesian_d} >= {"ammonia-6-31gd-rhf", "co-6-31gd-rhf"}
    # the d shell really is cartesian: six functions xx, xy, xz, yy, yz, zz
    labels = catalogue.case("ammonia-6-31gd-rhf").problem().ao_labels
    assert sum("N 3d" in l for l in labels) == 6 and any("dxx" in l for l in labels)
    assert len(labels) == 21  # N 6-31G* cartesian (15) + 3 H 6-31G (2 each)
    assert 3 in _angular_momenta(catalogue.case("water-cc-pvtz-rhf"))
    assert max(c.problem().nao for c in standard) >= 100
    assert catalogue.case("benzene-cc-pvdz-rhf").problem().nao == 114


def test_cartesian_flag_changes_the_function_count(catalogue):
    case = catalogue.case("co-6-31gd-rhf")
    spherical = dataclasses.replace(case, cartesian=False)
    # two d shells: 6 cartesian vs 5 spherical functions each
    assert case.problem().nao - spherical.problem().nao == 2


def test_open_shell_cases_present(catalogue):
    got = {(c.name.split("-")[0], c.method, c.multiplicity) for c in catalogue.cases}
    for want in [("oh", "uhf", 2), ("oh", "rohf", 2), ("nh2", "uhf", 2), ("nh2", "rohf", 2),
                 ("o2", "uhf", 3), ("o2", "rohf", 3), ("ch2", "uhf", 3), ("li", "uhf", 2),
                 ("li", "rohf", 2)]:
        assert want in got
    stretched = catalogue.case("h2-stretched-6-31g-uhf")
    assert (stretched.method, stretched.multiplicity) == ("uhf", 1)
    distance = np.linalg.norm(stretched.coordinates[1] - stretched.coordinates[0])
    assert distance == pytest.approx(4.7, abs=1e-14)


def test_case_ids_carry_basis_and_method(catalogue):
    token = {"6-31g*": "6-31gd", "6-31+g*": "6-31+gd"}
    for c in catalogue.cases:
        stem = f"-{token.get(c.basis, c.basis)}-{c.method}"
        if c.functional:  # Kohn–Sham: the functional's token follows the method
            assert f"{stem}-" in c.name, c.name
        else:
            assert c.name.endswith(stem), c.name
        assert c.id == c.name


def test_every_geometry_names_its_source(catalogue):
    kinds = ("published", "from memory", "optimised with pyscf", "chosen by us",
             "Szabo & Ostlund", "single atom")
    for c in catalogue.cases:
        assert any(k in c.geometry_source for k in kinds), (c.name, c.geometry_source)
        assert "units=" not in c.geometry_source


def test_published_water_geometry_is_stored_exactly_in_bohr(catalogue):
    # Crawford group Programming Projects #3, water/STO-3G input (bohr)
    expected = np.array([[0.0, -0.143225816552, 0.0],
                         [1.638036840407, 1.136548822547, 0.0],
                         [-1.638036840407, 1.136548822547, 0.0]])
    case = catalogue.case("water-sto-3g-rhf")
    assert case.numbers == (8, 1, 1)
    assert np.array_equal(case.coordinates, expected)


def test_angstrom_geometries_are_converted_to_bohr(catalogue):
    n2 = catalogue.case("n2-cc-pvdz-rhf")
    r = np.linalg.norm(n2.coordinates[1] - n2.coordinates[0])
    assert r == pytest.approx(1.0977 * ANGSTROM_IN_BOHR, rel=1e-13)
    assert r == pytest.approx(2.0744, abs=1e-3)  # not left in ångström


def test_case_problem_and_read_only_coordinates(catalogue):
    case = catalogue.case("oh-sto-3g-uhf")
    p = case.problem(convergence=1e-7)
    assert isinstance(p, Problem)
    assert (p.name, p.method, p.basis, p.multiplicity, p.convergence) == (
        "oh-sto-3g-uhf", "uhf", "sto-3g", 2, 1e-7)
    assert np.array_equal(p.coordinates, case.coordinates)
    assert (p.n_alpha, p.n_beta) == (5, 4)
    with pytest.raises(ValueError):
        case.coordinates[0, 0] = 1.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        case.name = "other"
    assert case == catalogue.case("oh-sto-3g-uhf")
    assert case != dataclasses.replace(case, coordinates=case.coordinates + 1e-9)


def test_unknown_suite_and_case_list_names(catalogue):
    with pytest.raises(CaseError) as err:
        catalogue.suite("smok")
    assert str(err.value) == "suite: unknown suite 'smok' (closest: smoke)"
    with pytest.raises(CaseError) as err:
        catalogue.suite("zzz")
    assert str(err.value) == "suite: unknown suite 'zzz' (known: smoke, standard, states, atoms, dft)"
    with pytest.raises(CaseError) as err:
        catalogue.case("water-ccpvdz-rhf")
    assert str(err.value).startswith("case: unknown case 'water-ccpvdz-rhf' (closest: "
                                     "water-cc-pvdz-rhf")


def test_default_reference_dir_env(monkeypatch, tmp_path):
    monkeypatch.delenv(REFERENCES_ENV, raising=False)
    assert default_reference_dir() == REPO / "references"
    monkeypatch.setenv(REFERENCES_ENV, str(tmp_path))
    assert default_reference_dir() == tmp_path


# --------------------------------------------------------------------------- XYZ


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def test_read_xyz_angstrom_and_bohr(tmp_path):
    ang = _write(tmp_path / "a.xyz", "2\nsource: test\nH 0 0 0\nh 0 0 0.74\n\n")
    numbers, coords, comment = read_xyz(ang)
    assert numbers == (1, 1) and comment == "source: test"
    assert coords[1, 2] == pytest.approx(0.74 * ANGSTROM_IN_BOHR, rel=1e-15)
    bohr = _write(tmp_path / "b.xyz", "2\nunits=bohr source: test\nHe 0 0 0\n1 0 0 1.4632\n")
    numbers, coords, _ = read_xyz(bohr)
    assert numbers == (2, 1) and coords[1, 2] == 1.4632
    assert not coords.flags.writeable


@pytest.mark.parametrize("text, message", [
    ("three\nc\nH 0 0 0\n", "line 1: expected the number of atoms, got 'three'"),
    ("", "line 1: expected the number of atoms, got an empty line"),
    ("3\nc\nH 0 0 0\nH 0 0 1\n", "line 1: says 3 atoms but 2 atom lines follow"),
    ("1\nc\nH 0 0 0\nH 0 0 1\n", "line 1: says 1 atoms but 2 atom lines follow"),
    ("2\nc\nH 0 0 0\nXx 0 0 1\n", "line 4: unknown element symbol 'Xx'"),
    ("1\nc\nO 0 zero 0\n", "line 3: coordinate 'zero' is not a number"),
    ("1\nc\nO 0 0\n", "line 3: expected 'Symbol x y z', got 3 fields"),
    ("1\nc\nO 0 0 nan\n", "line 3: coordinate 'nan' is not finite"),
    ("1\n", "line 2: missing the comment line"),
    ("1\nunits=furlong\nO 0 0 0\n",
     "line 2: unknown unit 'furlong' (use units=bohr or units=angstrom)"),
    ("3\nc\nO 0 0 0\nH 0 0 0.96\nH 0 0 0.96\n",
     "lines 4 and 5: atoms 2 and 3 are 0 bohr apart, closer than 0.1 bohr (one atom given "
     "twice?)"),
    ("1\nc\nHydrogen-with-a-very-long-name-indeed 0 0 0\n",
     "line 3: unknown element symbol 'Hydrogen-with-a-very-long-name'…"),
])
def test_read_xyz_errors(tmp_path, text, message):
    path = _write(tmp_path / "bad.xyz", text)
    with pytest.raises(CaseError) as err:
        read_xyz(path)
    assert str(err.value) == f"{path}: {message}"
    assert "\n" not in str(err.value)


def test_read_xyz_latin1_comment_is_read(tmp_path):
    """A comment line in Latin-1 (not UTF-8) does not stop the file being read."""
    path = tmp_path / "lat.xyz"
    path.write_bytes(b"2\ncaf\xe9 geometry\nH 0 0 0\nH 0 0 0.74\n")
    numbers, coordinates, comment = read_xyz(path)
    assert numbers == (1, 1) and comment.startswith("caf")


def test_read_xyz_missing_file(tmp_path):
    path = tmp_path / "nothere.xyz"
    with pytest.raises(CaseError) as err:
        read_xyz(path)
    assert str(err.value) == f"{path}: geometry file not found"


# --------------------------------------------------------------------------- suite files


GOOD = """
[[case]]
name = "my-water"
geometry = "geo/water.xyz"
basis = "sto-3g"
method = "rhf"

[[case]]
name = "my-oh"
geometry = "geo/oh.xyz"
basis = "6-31G*"
cartesian = true
method = "UHF"
multiplicity = 2
note = "radical"
"""


@pytest.fixture
def suite_dir(tmp_path):
    geo = tmp_path / "suite" / "geo"
    geo.mkdir(parents=True)
    _write(geo / "water.xyz", "3\nunits=bohr source: Crawford\nO 0.0 -0.143225816552 0.0\n"
           "H 1.638036840407 1.136548822547 0.0\nH -1.638036840407 1.136548822547 0.0\n")
    _write(geo / "oh.xyz", "2\nsource: from memory\nO 0 0 0\nH 0 0 0.97\n")
    return tmp_path / "suite"


def test_user_suite_file_paths_relative_to_the_file(suite_dir, tmp_path, monkeypatch):
    path = _write(suite_dir / "mine.toml", GOOD)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    water, oh = load_suite_file(path)
    assert (water.name, water.method, water.charge, water.multiplicity, water.cartesian,
            water.suites) == ("my-water", "rhf", 0, 1, False, ())
    assert water.coordinates[1, 0] == 1.638036840407
    assert (oh.basis, oh.method, oh.cartesian, oh.note) == ("6-31g*", "uhf", True, "radical")
    assert oh.problem().nao == 17  # O 6-31G* cartesian (15) + H 6-31G (2)


def _one_case(**fields) -> str:
    base = {"name": '"x"', "geometry": '"geo/oh.xyz"', "basis": '"sto-3g"',
            "method": '"uhf"', "multiplicity": "2"}
    base.update(fields)
    lines = [f"{k} = {v}" for k, v in base.items() if v is not None]
    return "[[case]]\n" + "\n".join(lines) + "\n"


@pytest.mark.parametrize("fields, message", [
    ({"basis": None}, "case 'x': basis: missing"),
    ({"name": None}, "case #1: name: missing"),
    ({"method": '"dft"'}, "case 'x': method: must be one of rhf, uhf, rohf, rks, uks, roks, got 'dft'"),
    ({"charge": '"0"'}, "case 'x': charge: must be an integer, got '0'"),
    ({"charge": "true"}, "case 'x': charge: must be an integer, got True"),
    ({"cartesian": '"yes"'}, "case 'x': cartesian: must be true or false, got 'yes'"),
    ({"suites": '"smoke"'}, "case 'x': suites: must be a list of strings, got 'smoke'"),
    ({"multiplicity": "1"}, "case 'x': multiplicity: 1 is impossible with 9 electrons"),
    ({"multiplicity": "0"}, "case 'x': multiplicity: must be a positive integer, got 0"),
    ({"charge": "9", "multiplicity": "1"}, "case 'x': charge: charge 9 leaves 0 electrons"),
    ({"method": '"rhf"', "charge": "-1", "multiplicity": "3"},
     "case 'x': method: rhf needs a singlet, got multiplicity 3 (use uhf or rohf)"),
    ({"basis_set": '"sto-3g"'}, "case 'x': basis_set: unknown key (did you mean 'basis'?)"),
    ({"name": '"My Case"'}, "case 'My Case': name: 'My Case' must be lower-case letters, "
                            "digits and + . _ - (it becomes a file name)"),
    ({"name": '"' + "a" * 81 + '"'}, f"case '{'a' * 81}': name: 81 characters, at most 80 (it "
                                     "becomes a file name)"),
    ({"basis": '""'}, "case 'x': basis: must name a basis pyscf knows, got ''"),
    ({"charge": "-100000"}, "case 'x': charge: must lie in −1000..1000, got -100000"),
    ({"charge": "-20", "multiplicity": "2"},
     "case 'x': charge: charge -20 gives 29 electrons; sto-3g holds at most 12 (6 functions)"),
])
def test_suite_file_field_errors(suite_dir, fields, message):
    path = _write(suite_dir / "bad.toml", _one_case(**fields))
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value) == f"{path}: {message}"


def test_user_suite_may_not_reuse_a_catalogue_name(suite_dir):
    """A user case named like a catalogue case would share (and could overwrite) its
    stored reference."""
    from harness.catalogue.cases import load_user_suite

    path = _write(suite_dir / "clash.toml", _one_case(name='"oh-sto-3g-uhf"'))
    with pytest.raises(CaseError) as err:
        load_user_suite(path)
    assert str(err.value) == (f"{path}: case 'oh-sto-3g-uhf': name: is the name of a "
                              "catalogue case; give yours another name")
    assert [c.name for c in load_user_suite(_write(suite_dir / "ok.toml", _one_case()))] == [
        "x"]


def test_problem_refuses_coincident_nuclei_and_far_away_atoms():
    with pytest.raises(CaseError, match=r"^h2: coordinates: atoms 1 and 2 coincide \(0 bohr "
                                        r"apart\)$"):
        Problem.create(name="h2", numbers=[1, 1], coordinates=[(0, 0, 1), (0, 0, 1)],
                       basis="sto-3g")
    with pytest.raises(CaseError, match=r"^h2: coordinates: \|x\| = 1e\+200 bohr exceeds "
                                        r"10000 bohr"):
        Problem.create(name="h2", numbers=[1, 1], coordinates=[(0, 0, 0), (0, 0, 1e200)],
                       basis="sto-3g")


def test_suite_file_geometry_errors_name_the_case(suite_dir):
    _write(suite_dir / "geo" / "bad.xyz", "2\nc\nH 0 0 0\nQ 0 0 1\n")
    path = _write(suite_dir / "bad.toml", _one_case(geometry='"geo/bad.xyz"'))
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value) == (f"{path}: case 'x': geometry: {suite_dir / 'geo' / 'bad.xyz'}: "
                              "line 4: unknown element symbol 'Q'")


def test_suite_file_missing_geometry(suite_dir):
    path = _write(suite_dir / "bad.toml", _one_case(geometry='"geo/none.xyz"'))
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value) == (f"{path}: case 'x': geometry: file not found: "
                              f"{suite_dir / 'geo' / 'none.xyz'}")


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_suite_file_unknown_basis(suite_dir):
    path = _write(suite_dir / "bad.toml", _one_case(basis='"no-such-basis"'))
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    text = str(err.value)
    assert text.startswith(f"{path}: case 'x': basis: pyscf cannot build 'no-such-basis'")
    assert "\n" not in text


def test_suite_file_duplicates_and_structure(suite_dir):
    path = _write(suite_dir / "dup.toml", _one_case() + _one_case())
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value) == f"{path}: case 'x': name: duplicate case name"
    path = _write(suite_dir / "empty.toml", "title = 'nothing'\n")
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value) == (f"{path}: unknown top-level key 'title' (a suite file holds "
                              f"only [[case]] and [[matrix]] tables)")
    path = _write(suite_dir / "none.toml", "")
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value) == f"{path}: no [[case]] or [[matrix]] tables"
    path = _write(suite_dir / "broken.toml", "[[case]\nname = 1\n")
    with pytest.raises(CaseError) as err:
        load_suite_file(path)
    assert str(err.value).startswith(f"{path}: not valid TOML (")
    with pytest.raises(CaseError) as err:
        load_suite_file(suite_dir / "absent.toml")
    assert str(err.value) == f"{suite_dir / 'absent.toml'}: suite file not found"


def test_catalogue_requires_suites(suite_dir):
    path = _write(suite_dir / "cat.toml", _one_case())
    with pytest.raises(CaseError) as err:
        load_catalogue(path)
    assert str(err.value) == f"{path}: case 'x': suites: missing"
    cat = load_catalogue(_write(suite_dir / "cat2.toml", _one_case(suites='["mine"]')))
    assert cat.suites == ("mine",) and cat.suite("mine")[0].name == "x"


def test_reading_the_catalogue_builds_no_grid_and_a_case_still_gets_its_own(monkeypatch):
    """Reading cases validates each one (pyscf builds its basis) but leaves the Kohn–Sham
    pinned grid to the run: the catalogue's KS cases cost no grid at start-up."""
    from harness.backend import grid

    built = []
    original = grid.pinned_grid
    monkeypatch.setattr(grid, "pinned_grid", lambda mol, *a, **k: built.append(mol) or
                        original(mol, *a, **k))
    catalogue = load_catalogue()
    ks = [c for c in catalogue.cases if c.method in ("rks", "uks", "roks")]
    assert ks and built == []
    problem = ks[0].problem()
    assert len(built) == 1 and problem.grid is not None and problem.grid.size > 0


def test_validate_raises_what_problem_raises():
    """Case.validate is Problem.create's checks without the grid: a basis pyscf lacks for
    an element is the same one-line error, naming the case and the field."""
    case = Case(name="kr-atom", numbers=(36,), coordinates=np.zeros((1, 3)), charge=0,
                multiplicity=1, basis="6-31+g*", cartesian=False, method="rks",
                functional="pbe")
    with pytest.raises(CaseError) as validated:
        case.validate()
    with pytest.raises(CaseError) as built:
        case.problem()
    assert str(validated.value) == str(built.value)
    assert validated.value.field == "basis"
