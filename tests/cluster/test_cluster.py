"""Distributed runs (``certify --scheduler local:2``, harness.run.cluster) on a real
``distributed.LocalCluster`` on 127.0.0.1 with two worker processes, run as a user runs
them (``python -m harness`` in a scratch folder): the report equals a ``--jobs 1`` run;
a crashing plug-in fails its case alone; a killed worker is survived (its case retried
once; lost twice, the case fails with that reason); Ctrl-C keeps the finished cases;
without dask.distributed ``--scheduler`` is a one-line usage error."""

from __future__ import annotations

import json
import shutil
import signal
import time
from pathlib import Path

import pytest

from tests.cli.test_cli import ERROR, cli, environment, start

pytest.importorskip("distributed")

HERE = Path(__file__).resolve().parent
SMALL = ("h2-sto-3g-rhf", "heh-cation-sto-3g-rhf", "water-sto-3g-rhf", "oh-sto-3g-uhf")
EXAMPLE = "harness.testing.example_scf:solve"


@pytest.fixture
def work(tmp_path) -> Path:
    shutil.copy(HERE / "plugins" / "cluster_plugins.py", tmp_path / "cluster_plugins.py")
    return tmp_path


def _cases(*names: str) -> list[str]:
    return [arg for name in names for arg in ("--case", name)]


def _report(path: Path) -> dict:
    """The JSON report without what differs run to run (times, versions)."""
    data = json.loads(path.read_text())
    for case in data["cases"]:
        case.pop("timings", None)
    for key in ("seconds", "versions"):
        data.pop(key, None)
    return data


def _local(*extra: str) -> list[str]:
    return ["--scheduler", "local:2", *extra]


def _one_thread(*args: str, cwd: Path):
    """``cli`` with OMP_NUM_THREADS=1: the same number of OpenMP threads in every
    process, so the plug-in's floating-point path (and every measured value) is the same
    bit for bit whichever process runs it (with 2 threads against 1, values such as a
    1e-8 energy-error bound differ in their 7th digit)."""
    import subprocess
    import sys

    env = environment()
    env["OMP_NUM_THREADS"] = "1"
    return subprocess.run([sys.executable, "-m", "harness", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=120)


def test_report_equals_a_jobs_1_run(work):
    """Four small cases on two workers: the same JSON report as --jobs 1 (timings aside),
    in the same order; the partial file is removed at the end."""
    one = _one_thread("certify", EXAMPLE, *_cases(*SMALL), "--json", "one.json", "--quiet",
                      cwd=work)
    assert one.returncode == 0, one.stderr
    many = _one_thread("certify", EXAMPLE, *_cases(*SMALL), "--json", "many.json", "--quiet",
                       *_local("--reference-cache", "cache"), cwd=work)
    assert many.returncode == 0, many.stderr
    assert many.stdout.splitlines() == ["4 passed, 0 failed"]
    assert [c["name"] for c in _report(work / "many.json")["cases"]] == list(SMALL)
    assert _report(work / "many.json") == _report(work / "one.json")
    assert not (work / "many.json.partial.jsonl").exists()


@pytest.mark.slow
def test_crashing_case_fails_alone_and_a_killed_worker_is_survived(work):
    """os.abort() in one case fails that case only; the worker killed under another case
    is replaced and the case runs again (and passes); the rest pass."""
    result = cli("certify", "cluster_plugins.py:crash_and_kill_once", *_cases(*SMALL),
                 "--json", "out.json", "--quiet", *_local("--reference-cache", "cache"),
                 cwd=work, timeout=300)
    assert result.returncode == 1, result.stderr
    cases = {c["name"]: c for c in json.loads((work / "out.json").read_text())["cases"]}
    assert list(cases) == list(SMALL)
    assert cases["water-sto-3g-rhf"]["error"] == (
        "plug-in process died from SIGABRT without sending a result")
    assert (work / "killed-once").exists()  # the worker was killed once under oh
    assert [n for n, c in cases.items() if c["passed"]] == [
        "h2-sto-3g-rhf", "heh-cation-sto-3g-rhf", "oh-sto-3g-uhf"]


@pytest.mark.slow
def test_a_case_whose_worker_is_lost_twice_fails_with_that_reason(work):
    result = cli("certify", "cluster_plugins.py:kills_worker",
                 *_cases("h2-sto-3g-rhf", "oh-sto-3g-uhf"), "--json", "out.json",
                 "--quiet", *_local("--reference-cache", "cache"), cwd=work, timeout=300)
    assert result.returncode == 1, result.stderr
    h2, oh = json.loads((work / "out.json").read_text())["cases"]
    assert h2["passed"] and h2["error"] is None
    assert oh["error"].startswith("worker lost twice: worker tcp://127.0.0.1:")
    assert oh["error"].endswith(" died while running the case")


@pytest.mark.slow
def test_interrupt_cancels_the_rest_and_keeps_finished_cases(work):
    """SIGINT while one case sleeps: exit 1 soon after, the finished cases in the
    report, the sleeping one not."""
    proc = start("certify", "cluster_plugins.py:slow_on_one",
                 *_cases("h2-sto-3g-rhf", "nh2-sto-3g-rohf", "heh-cation-sto-3g-rhf"),
                 "--json", "out.json", "--quiet", *_local("--reference-cache", "cache"),
                 cwd=work)
    partial = work / "out.json.partial.jsonl"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        if partial.exists() and len(partial.read_text().splitlines()) >= 2:
            break
        time.sleep(0.2)
    else:
        proc.kill()
        pytest.fail("the two quick cases did not finish")
    sent = time.monotonic()
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 1, err
    assert time.monotonic() - sent < 30
    names = [c["name"] for c in json.loads((work / "out.json").read_text())["cases"]]
    assert names == ["h2-sto-3g-rhf", "heh-cation-sto-3g-rhf"]
    assert json.loads((work / "out.json").read_text())["interrupted"] is True


def test_without_dask_scheduler_is_a_usage_error(work):
    """A distributed package that cannot be imported stands in for a missing one."""
    fake = work / "no-dask" / "distributed"
    fake.mkdir(parents=True)
    (fake / "__init__.py").write_text("raise ImportError('no dask here')\n")
    import subprocess
    import sys

    env = environment()
    env["PYTHONPATH"] = f"{fake.parent}:{env['PYTHONPATH']}"
    result = subprocess.run([sys.executable, "-m", "harness", "certify", "--scheduler",
                             "local:2"], cwd=work, env=env, capture_output=True, text=True,
                            timeout=60)
    assert result.returncode == 2
    assert result.stderr.splitlines() == [
        ERROR + '--scheduler: needs dask.distributed, which is not installed: '
                'pip install -e ".[cluster]"']


@pytest.mark.parametrize("args, message", [
    (["--scheduler", "cluster"], "--scheduler: expected tcp://HOST:PORT (a running Dask "
                                 "scheduler) or local:N (N worker processes on this "
                                 "machine), got 'cluster'"),
    (["--scheduler", "local:0"], "--scheduler: local:N needs N >= 1 worker processes, got "
                                 "'local:0'"),
    (["--scheduler", "local:2", "--jobs", "2"], "give either --jobs or --scheduler, not "
                                                "both (a cluster runs as many cases at once "
                                                "as it has workers)"),
    (["--reference-cache", "x"], "--reference-cache needs --scheduler"),
])
def test_scheduler_usage_errors(work, args, message):
    result = cli("certify", *args, cwd=work)
    assert result.returncode == 2
    assert result.stderr.splitlines() == [ERROR + message]
