"""The same basis name from the other source (issue 11): a code that takes its basis by
name from the basis-set exchange, run with the default --basis-source pyscf, is judged
in the exchange's basis when its overlap is that basis and the space is pyscf's
(general vs segmented cc-pVXZ, STO-3G/6-31G* digits); Li cc-pVDZ, another basis in the
exchange, is a true "basis differs" with its energy cost and the matrix checks skipped.
Energies in Eh. The verdicts compute references in the exchange's basis (seconds each).
"""

from __future__ import annotations

import functools

import pytest

from harness.catalogue.cases import load_catalogue
from harness.catalogue.references import reference_for
from harness.contract.results import Status
from harness.contract.solution import extract
from harness.verdict.judge import judge

bse = pytest.importorskip("basis_set_exchange")

from harness.backend.basis_sources import bse_version  # noqa: E402
from harness.testing.planted import variants  # noqa: E402

V = bse_version()


@functools.lru_cache(maxsize=None)
def result(name: str, case_name: str):
    case = load_catalogue().case(case_name)
    problem = case.problem()
    reference, _ = reference_for(case)
    return judge(problem, extract(getattr(variants, name)(problem)), reference)


def failing(r):
    return {c.name for c in r.failures}


@pytest.mark.slow
@pytest.mark.parametrize("entry", variants.BSE_CATALOGUE,
                         ids=[f"{e.name}-{e.case}" for e in variants.BSE_CATALOGUE])
def test_bse_variants_fail_exactly_the_expected_checks(entry):
    assert failing(result(entry.name, entry.case)) == set(entry.fails)


@pytest.mark.slow
def test_sto3g_digits_judged_in_the_exchange_basis():
    r = result("bse_basis_by_name", "water-sto-3g-rhf")
    assert failing(r) == set()
    assert r.check("basis").message == (
        f"basis: your overlap is sto-3g as the basis-set exchange {V} gives it, not "
        f"pyscf's; judged in that basis (water-sto-3g-rhf); the same functions with other "
        f"digits (overlaps differ by up to 1.7e-08) (reference energies differ by "
        f"-2.6e-08 Eh); use --basis-source bse to say so")
    record = r.analysis["judged_in_basis"]
    assert (record["judged"], record["same_space"], record["contraction"]) == (True, True,
                                                                              "same")
    assert record["label"] == f"sto-3g from basis_set_exchange {V}"
    assert r.reference_energy == pytest.approx(r.energy, abs=1e-8)  # the exchange's E
    assert r.to_json()["analysis"]["judged_in_basis"]["basis"] == "sto-3g"


@pytest.mark.slow
@pytest.mark.parametrize("name", ["general_contraction", "segmented_contraction"])
def test_cc_pvdz_other_contraction_same_space(name):
    r = result(name, "water-cc-pvdz-rhf")
    assert failing(r) == set()
    assert r.check("basis").message == (
        f"basis: your overlap is cc-pvdz as the basis-set exchange {V} gives it (general "
        f"contraction), not pyscf's; judged in that basis (water-cc-pvdz-rhf); the same "
        f"space of functions, differently contracted: E must agree (reference energies "
        f"agree to 1e-10 Eh); use --basis-source bse to say so")
    assert r.analysis["judged_in_basis"]["contraction"] == "general contraction"


def test_segmented_text_is_other_text_for_the_same_functions():
    from harness.backend.basis_sources import bse_basis, contraction_columns

    problem = load_catalogue().case("water-cc-pvdz-rhf").problem()
    text = bse_basis(problem.basis, problem.numbers)
    split = variants.segmented_text(text)
    assert (contraction_columns(text), contraction_columns(split)) == (3, 1)
    assert contraction_columns(problem.basis_nwchem) == 2


@pytest.mark.slow
def test_li_cc_pvdz_is_another_basis_matrix_checks_skipped():
    r = result("bse_basis_by_name", "lih-cc-pvdz-rhf")
    assert failing(r) == {"basis"}
    assert r.check("basis").message == (
        f"basis: the basis differs: your overlap is cc-pvdz as the basis-set exchange {V} "
        f"gives it, another basis than pyscf's (its functions lie up to 5.6e-03 outside "
        f"pyscf's; reference energies differ by -1.1e-04 Eh) (lih-cc-pvdz-rhf); use "
        f"--basis-source bse to be judged in it")
    for name in ("orthonormality", "idempotency", "electron-count", "overlap"):
        assert r.check(name).status is Status.SKIPPED, name
    assert r.analysis["judged_in_basis"]["judged"] is False


def test_the_same_space_kernel_can_fail():
    """outside_space is 0 for one space in two contractions and > SAME_SPACE for
    another exponent."""
    import numpy as np

    from harness.verdict.conventions import SAME_SPACE, outside_space

    rng = np.random.default_rng(1)
    a = rng.normal(size=(6, 4))  # four functions in a 6-dim primitive space (synthetic)
    t = rng.normal(size=(4, 4)) + 4 * np.eye(4)  # another contraction of the same span
    b = a @ t
    other = b.copy()
    other[:, 0] += 1e-3 * rng.normal(size=6)  # one function leaves the span
    s = lambda x, y: x.T @ y  # noqa: E731
    assert outside_space(s(a, a), s(b, b), s(a, b)) < 1e-12
    assert outside_space(s(a, a), s(other, other), s(a, other)) > SAME_SPACE


def test_without_the_exchange_library_the_failed_basis_says_how(monkeypatch):
    from harness.backend import basis_sources

    monkeypatch.setattr(basis_sources, "bse_installed", lambda: False)
    case = load_catalogue().case("water-cc-pvdz-rhf")
    problem = case.problem()
    reference, _ = reference_for(case)
    r = judge(problem, extract(variants.general_contraction(problem)), reference)
    message = r.check("basis").message
    assert r.check("basis").status is Status.FAILED
    assert message.endswith("; basis_set_exchange is not installed: pip install "
                            "'scf-harness[bse]' and the harness also tries the exchange's "
                            "'cc-pvdz'")
    assert "judged_in_basis" not in r.analysis


@pytest.mark.slow
def test_certificate_records_the_basis_judged_in_and_recomputes(tmp_path):
    """The certificate names the exchange's basis the case was judged in; recomputing
    from the sidecar judges it there again."""
    import json

    from harness.report.certificate import verify_certificate, write_certificate

    case = load_catalogue().case("water-sto-3g-rhf")
    problem = case.problem()
    reference, _ = reference_for(case)
    solution = extract(variants.bse_basis_by_name(problem))
    r = judge(problem, solution, reference)
    path = write_certificate(tmp_path / "cert.json", [r], problems={case.name: problem},
                             solutions={case.name: solution},
                             references={case.name: reference},
                             plugin="harness.testing.planted.variants:bse_basis_by_name")
    entry = json.loads(path.read_text())["cases"][0]
    record = entry["judged_in_basis"]
    assert (record["label"], record["judged"]) == (f"sto-3g from basis_set_exchange {V}", True)
    assert record["reference_energy"] == r.reference_energy
    verified = verify_certificate(path, recompute=True)
    assert verified.issues == ()
