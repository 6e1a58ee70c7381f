"""--basis-source: pyscf (default) or bse; a missing basis_set_exchange is a one-line
usage error saying how to install it; --tol basis= is accepted and reaches the mapping."""

from __future__ import annotations

import sys

import numpy as np
import pytest

from harness.backend.basis_sources import BasisSourceError, check_basis_source
from harness.checks.tolerances import Tolerances, parse_override


def test_default_and_unknown():
    assert check_basis_source("pyscf") == "pyscf"
    with pytest.raises(BasisSourceError) as err:
        check_basis_source("emsl")
    assert str(err.value).endswith("must be one of pyscf, bse, got 'emsl'")


def test_bse_without_the_library_says_how_to_install(monkeypatch):
    monkeypatch.setitem(sys.modules, "basis_set_exchange", None)  # import raises
    with pytest.raises(BasisSourceError) as err:
        check_basis_source("bse")
    message = str(err.value)
    assert "\n" not in message
    assert "pip install 'scf-harness[bse]' (or pip install basis-set-exchange)" in message


def test_config_key_refuses_bse_without_the_library(monkeypatch):
    from harness.ui.config import ConfigError, parse_table

    monkeypatch.setitem(sys.modules, "basis_set_exchange", None)
    with pytest.raises(ConfigError) as err:
        parse_table({"basis_source": "bse"})
    assert "basis_source" in str(err.value) and "pip install" in str(err.value)
    assert parse_table({"basis_source": "pyscf"}) == {"basis_source": "pyscf"}


def test_tol_basis_accepted():
    assert parse_override("basis=1e-6") == ("basis", 1e-6)
    assert Tolerances(overrides={"basis": 1e-6}).for_check("basis", 1e-6) == 1e-6


def test_loose_norms_need_the_basis_tolerance(water_rhf):
    """Norms off by 1e-5 map at the default 1e-8 (exact scaling); an overlap also off by
    3e-7 elsewhere maps only once --tol basis=1e-6 admits it."""
    from harness.verdict.conventions import Convention, rescaling

    s = water_rhf.ints.s
    f = 1.0 + 1e-5 * np.arange(1, s.shape[0] + 1)
    scaled = s * f[:, None] * f[None, :]
    conv = rescaling(scaled, s, mol=water_rhf.ints.mol)
    assert isinstance(conv, Convention)
    assert "rescaled (norms off by up to " in conv.describe()
    noisy = scaled.copy()
    noisy[5, 6] = noisy[6, 5] = noisy[5, 6] + 3e-7
    assert rescaling(noisy, s, mol=water_rhf.ints.mol) is None
    assert rescaling(noisy, s, mol=water_rhf.ints.mol, tolerance=1e-6) is not None
