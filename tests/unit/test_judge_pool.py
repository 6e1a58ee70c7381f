"""--jobs > 1 judges in worker processes (harness.run.runner.JudgePool) that never run
plug-in code: the verdicts equal in-process judging; a failed judge task is judged in
the harness process instead; the launch order puts the largest case first."""

from __future__ import annotations

import dataclasses
import json

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
