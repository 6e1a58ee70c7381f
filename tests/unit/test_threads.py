"""The checks' BLAS threads (harness.backend.threads): one below
SINGLE_BLAS_THREAD_BELOW_AO for the checks' own block and restored after it, unchanged
above; the plug-in's processes are not touched (limits are set at run time, in this
process only)."""

from __future__ import annotations

import numpy as np
import pytest

from harness.backend import threads

threadpoolctl = pytest.importorskip("threadpoolctl")


@pytest.fixture
def two_blas_threads():
    """BLAS at two threads for the test (whatever the machine's default), restored."""
    with threadpoolctl.threadpool_limits(limits=2, user_api="blas"):
        if threads.blas_threads() != 2:
            pytest.skip("this BLAS does not take a thread count")
        yield


def test_small_case_checks_run_with_one_blas_thread_and_restore_it(two_blas_threads):
    with threads.checks_threads(threads.SINGLE_BLAS_THREAD_BELOW_AO - 1):
        inside = threads.blas_threads()
    assert (inside, threads.blas_threads()) == (1, 2)


def test_large_case_checks_keep_the_thread_count(two_blas_threads):
    with threads.checks_threads(threads.SINGLE_BLAS_THREAD_BELOW_AO):
        inside = threads.blas_threads()
    assert (inside, threads.blas_threads()) == (2, 2)


def test_restored_when_the_checks_raise(two_blas_threads):
    with pytest.raises(ZeroDivisionError):
        with threads.checks_threads(10):
            1 / 0
    assert threads.blas_threads() == 2


def test_evaluate_case_runs_its_checks_inside_the_limit(two_blas_threads, monkeypatch):
    """The judge step's one entry (evaluate_case) takes the limit: a check that reads the
    thread count sees 1 on a 2-function case, and the count is 2 again after."""
    from harness.contract.problem import Problem
    from harness.contract.solution import extract
    from harness.verdict import evaluate as ev

    seen = []
    original = ev._evaluate

    def spy(*args, **kwargs):
        seen.append(threads.blas_threads())
        return original(*args, **kwargs)

    monkeypatch.setattr(ev, "_evaluate", spy)
    problem = Problem.create(name="h2", numbers=(1, 1),
                             coordinates=np.array([[0, 0, 0], [0, 0, 1.4]], float),
                             basis="sto-3g")
    ev.evaluate_case(problem, extract({"energy": -1.0}), None, stability="off")
    assert (seen, threads.blas_threads()) == ([1], 2)
