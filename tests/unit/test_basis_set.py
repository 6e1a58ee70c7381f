"""``Problem.basis_set`` and ``Problem.basis_nwchem``: the exact basis of the reference as
plain data and as NWChem text (harness.contract.basis, read through harness.backend)."""

from __future__ import annotations

import pickle

import numpy as np
import pytest

from harness.backend.mole import parse_nwchem_basis
from harness.contract.basis import Shell, nwchem_text
from harness.contract.problem import Problem

# STO-3G hydrogen 1s: exponents (bohr^-2) and contraction coefficients as published in
# the EMSL / Basis Set Exchange STO-3G data (Hehre, Stewart, Pople 1969) -- from memory.
STO3G_H_EXPONENTS = (3.42525091, 0.62391373, 0.16885540)
STO3G_H_COEFFICIENTS = (0.15432897, 0.53532814, 0.44463454)


def _h2(basis="sto-3g", cartesian=False):
    return Problem.create(name="h2", numbers=[1, 1], coordinates=[[0, 0, 0], [0, 0, 1.4]],
                          basis=basis, cartesian=cartesian)


def _water(basis="cc-pvdz", cartesian=False):
    return Problem.create(name="water", numbers=[8, 1, 1],
                          coordinates=[[0, 0, 0], [0, 1.43, 1.11], [0, -1.43, 1.11]],
                          basis=basis, cartesian=cartesian)


def test_sto3g_hydrogen_is_the_published_one():
    basis = _h2().basis_set
    assert list(basis) == ["H"]
    (shell,) = basis["H"]
    assert isinstance(shell, Shell) and shell.l == 0 and shell.n_contracted == 1
    assert shell.exponents == pytest.approx(STO3G_H_EXPONENTS, rel=1e-8)
    assert shell.coefficients[0] == pytest.approx(STO3G_H_COEFFICIENTS, rel=1e-8)
    # a plain tuple: equal to its fields, pickles as data
    assert shell == (shell.l, shell.exponents, shell.coefficients)
    assert pickle.loads(pickle.dumps(basis)) == basis


def test_elements_in_order_of_appearance_and_shells_match_the_ao_count():
    problem = _water()
    basis = problem.basis_set
    assert list(basis) == ["O", "H"]
    # spherical cc-pVDZ: O 3s2p1d = 14 functions, H 2s1p = 5 functions
    per_element = {s: sum((2 * sh.l + 1) * sh.n_contracted for sh in shells)
                   for s, shells in basis.items()}
    assert per_element == {"O": 14, "H": 5}
    assert problem.nao == per_element["O"] + 2 * per_element["H"]
    for shells in basis.values():
        for sh in shells:
            assert all(len(c) == len(sh.exponents) for c in sh.coefficients)
            assert all(isinstance(x, float) for x in sh.exponents)


def test_a_new_dict_each_time():
    problem = _h2()
    first = problem.basis_set
    first["H"] = ()
    assert problem.basis_set["H"] != ()


@pytest.mark.parametrize("basis,cartesian", [("sto-3g", False), ("cc-pvdz", False),
                                             ("6-31g*", True)])
def test_nwchem_text_parses_back_to_the_same_basis(basis, cartesian):
    problem = _water(basis, cartesian)
    text = problem.basis_nwchem
    kind = "CARTESIAN" if cartesian else "SPHERICAL"
    assert f'BASIS "ao basis" {kind} PRINT' in text and text.endswith("END\n")
    for symbol, shells in problem.basis_set.items():
        assert parse_nwchem_basis(text, symbol) == shells  # exact, full precision


def test_nwchem_text_of_a_general_contraction_keeps_its_columns():
    basis = {"H": (Shell(0, (2.0, 0.5), ((0.6, 0.4), (-0.1, 1.0))),)}
    text = nwchem_text(basis, cartesian=False)
    assert "  2.0  0.6  -0.1\n  0.5  0.4  1.0\n" in text
    assert parse_nwchem_basis(text, "H") == basis["H"]


def test_shell_rows_must_be_even():
    with pytest.raises(ValueError, match="rows of unequal length"):
        Shell.from_rows(0, [[1.0, 0.5], [2.0]])


def test_basis_file_of_a_command_is_basis_nwchem(tmp_path):
    from harness.run.external import BASIS_FILE, write_inputs

    problem = _water("6-31g")
    write_inputs(problem, tmp_path)
    assert (tmp_path / BASIS_FILE).read_text(encoding="utf-8") == problem.basis_nwchem


def test_the_overlap_from_basis_set_is_the_references():
    """The published-form data are the reference's basis: an s-shell overlap computed
    here with our own numpy from basis_set equals pyscf's for H2/STO-3G."""
    from harness.backend.integrals import integrals_for

    problem = _h2()
    (shell,) = problem.basis_set["H"]
    a = np.array(shell.exponents)
    c = np.array(shell.coefficients[0]) * (2 * a / np.pi) ** 0.75  # normalised primitives
    c = c / np.sqrt(c @ ((np.pi / (a[:, None] + a[None])) ** 1.5) @ c)
    r2 = 1.4 ** 2
    p = a[:, None] + a[None]
    s12 = c @ ((np.pi / p) ** 1.5 * np.exp(-a[:, None] * a[None] / p * r2)) @ c
    assert integrals_for(problem).s[0, 1] == pytest.approx(s12, abs=1e-12)
