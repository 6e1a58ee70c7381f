"""--jobs > 1 judges in worker processes (harness.run.runner.JudgePool) that never run
plug-in code: the verdicts equal in-process judging; a failed judge task is judged in
the harness process instead; the launch order puts the largest case first."""

from __future__ import annotations

import dataclasses
import json

import pytest

from harness.catalogue.cases import load_catalogue
from harness.checks.tolerances import Tolerances
from harness.run import runner

PLUGIN = "harness.testing.example_scf:solve"


def _strip(outcome):
    """Each case's JSON without its timings (those differ run to run) and with each
    check's value rounded to 6 significant digits: a judge worker runs pyscf with its
    share of the OpenMP threads, and an iterative eigenvalue (the stability check's
    Davidson) then differs in its last digits (seen: 1.3167954e-08 vs 1.3167953e-08)."""
    out = []
    for case in outcome.cases:
        data = case.to_json()
        data.pop("timings", None)
        for check in data["checks"]:
            if isinstance(check.get("value"), float):
                check["value"] = float(f"{check['value']:.6g}")
        out.append(json.dumps(data, sort_keys=True))
    return out


def test_judge_workers_give_the_same_report_as_judging_here():
    catalogue = load_catalogue()
    cases = [catalogue.case(n) for n in ("h2-sto-3g-rhf", "heh-cation-sto-3g-rhf",
                                         "oh-sto-3g-uhf")]
    here = runner.run_cases(cases, PLUGIN, tolerances=Tolerances(), jobs=1)
    pooled = runner.run_cases(cases, PLUGIN, tolerances=Tolerances(), jobs=2)
    assert [c.name for c in pooled.cases] == [c.name for c in cases]
    assert all(c.passed for c in pooled.cases)
    assert _strip(pooled) == _strip(here)
    assert set(pooled.references) == {c.name for c in cases}
    assert all(r is not None for r in pooled.references.values())


def test_a_failed_task_comes_back_with_its_exception():
    pool = runner.JudgePool(1)
    try:
        pool.submit("key", lambda: None)  # a lambda does not pickle: the task fails
        import select

        select.select([pool.fileno], [], [], 30)
        done = pool.done()
        assert [(key, value) for key, _, value, _ in done] == [("key", None)]
        assert done[0][3] is not None
        assert len(pool) == 0
    finally:
        pool.close()


@dataclasses.dataclass
class _Sized:
    name: str
    nao: int

    def mole(self):
        return self


def test_launch_order_largest_first_with_jobs():
    cases = [_Sized("a", 2), _Sized("b", 114), _Sized("c", 7), _Sized("d", 114)]
    assert [c.name for _, c in runner.launch_order(cases, 2)] == ["b", "d", "c", "a"]
    assert [c.name for _, c in runner.launch_order(cases, 1)] == ["a", "b", "c", "d"]


@pytest.mark.slow  # 3-6 s measured (two whole runs, shared cores)
def test_prepared_judge_tasks_give_the_same_report(monkeypatch):
    """Every case prepared (PREPARE_MIN_AO 0: reference, integrals and packed ERIs in a
    judge worker while the plug-in runs, then the hand-off file): the report equals
    judging each case here with --jobs 1."""
    monkeypatch.setattr(runner, "PREPARE_MIN_AO", 0)
    catalogue = load_catalogue()
    cases = [catalogue.case(n) for n in ("h2-sto-3g-rhf", "heh-cation-sto-3g-rhf",
                                         "oh-sto-3g-uhf")]
    here = runner.run_cases(cases, PLUGIN, tolerances=Tolerances(), jobs=1)
    prepared = runner.run_cases(cases, PLUGIN, tolerances=Tolerances(), jobs=2)
    assert _strip(prepared) == _strip(here)
    assert all(r is not None for r in prepared.references.values())


@pytest.mark.slow  # 3-6 s measured (two whole runs, shared cores)
def test_a_prepared_case_whose_plugin_fails_reports_the_failure(monkeypatch, tmp_path):
    """The hand-off carries the child's error: the case fails with the same one-line
    error as with --jobs 1 (the prepared judge task does not judge a missing solution)."""
    monkeypatch.setattr(runner, "PREPARE_MIN_AO", 0)
    plugin = tmp_path / "bad.py"
    plugin.write_text("def solve(problem):\n    raise ValueError('no convergence')\n")
    catalogue = load_catalogue()
    cases = [catalogue.case(n) for n in ("h2-sto-3g-rhf", "heh-cation-sto-3g-rhf")]
    spec = f"{plugin}:solve"
    one = runner.run_cases(cases, spec, tolerances=Tolerances(), jobs=1)
    two = runner.run_cases(cases, spec, tolerances=Tolerances(), jobs=2)
    assert [c.error for c in two.cases] == [c.error for c in one.cases]
    assert two.cases[0].error.startswith("ValueError: no convergence (at ")
    assert not any(c.passed for c in two.cases)


def test_packed_eris_computed_ahead_are_used_and_change_nothing():
    """AOIntegrals.prepare_packed_eri keeps mol.intor('int2e', aosym='s8'); the stability
    analysis's mean-field object then holds exactly those (no second computation)."""
    import numpy as np

    from harness.backend.integrals import integrals_for
    from harness.backend.stability import scf_object
    from harness.contract.solution import extract
    from harness.testing.example_scf import solve

    problem = load_catalogue().case("water-sto-3g-rhf").problem()
    ints = integrals_for(problem)
    assert ints.packed_eri() is None
    assert ints.prepare_packed_eri() is True
    sol = extract(solve(problem))
    mf = scf_object(problem, sol, ints)
    assert mf._eri is ints.packed_eri()
    np.testing.assert_array_equal(mf._eri, ints.mol.intor("int2e", aosym="s8"))


def test_the_hand_off_file_carries_plain_data_and_a_pickle_in_it_is_refused(tmp_path):
    """A prepared task's hand-off (written by the harness, in a folder a plug-in of the
    same user could write to) round-trips a case message, and a pickle put in its place
    fails the case with a one-line reason: nothing is unpickled."""
    import pickle

    import numpy as np

    path = str(tmp_path / "0.msg")
    message = {"solution": {"energy": -1.1, "coefficients": np.eye(2),
                            "occupations": np.array([2.0, 0.0])}, "seconds": 0.5}
    runner._write_handoff(path, message, None, 2)
    got, error, threads = runner._read_handoff(path)
    assert (error, threads) == (None, 2)
    assert got["seconds"] == 0.5 and np.array_equal(got["solution"].coefficients, np.eye(2))
    assert not any(tmp_path.iterdir())  # both files removed once read

    class Boom:
        def __reduce__(self):
            return (exec, ("raise SystemExit('unpickled')",))

    runner._write_handoff(path, None, None, 1)
    with open(path, "wb") as fh:
        pickle.dump((Boom(), None, 1), fh)
    got, error, _ = runner._read_handoff(path)
    assert got is None
    assert error == ("the plug-in's process sent a message the harness cannot read: judge "
                     "hand-off: a pickle, not the channel's plain-data format (nothing was "
                     "unpickled)")


@pytest.mark.parametrize("name, fitted", [("water-sto-3g-rhf", False),
                                          ("benzene-cc-pvdz-rhf", True)])
def test_preparation_builds_the_fitted_tensor_only_for_a_reference_with_a_density(
        monkeypatch, tmp_path, name, fitted):
    """The fitted three-centre tensor serves only J/K of the density difference from a
    stored reference density (harness.verdict.coulomb): a prepared task builds it when
    its reference carries one (benzene, ≥ 100 AO) and not otherwise (it was built for
    every prepared case, and cost a 36-case matrix ~1 s of its ~12 s with --jobs 2)."""
    from harness.backend.integrals import AOIntegrals

    built = []
    monkeypatch.setattr(AOIntegrals, "prepare_fitting", lambda self: built.append(name))
    monkeypatch.setattr(AOIntegrals, "prepare_packed_eri", lambda self: False)
    monkeypatch.setattr(runner, "finish_case", lambda *args, **kwargs: "judged")
    case = load_catalogue().case(name)
    handoff = str(tmp_path / "0.msg")
    runner._write_handoff(handoff, None, "stands in for the plug-in's message", 1)
    result, reference, _ = runner.prepare_and_judge(
        case, case.problem(), runner.JudgeSettings(tolerances=Tolerances()), None, False,
        False, handoff)
    assert result == "judged"
    assert (reference.density is not None, built) == (fitted, [name] if fitted else [])
