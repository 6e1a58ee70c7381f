"""The bench's accelerator channel: ``scf-harness bench MODULE:NAME`` runs the accelerator
in its own process and reads its replies through the closed channel (plain data, never a
pickle). Hostile accelerators — forged bytes or a pickle written into the pipe followed
by ``os._exit(0)``, one that kills its parent (the fork server), one that hangs, one
that leaves a ``sleep`` behind — fail their runs with one line naming the case, and the
harness and the baselines go on. Energies in Eh, times in s.
"""

from __future__ import annotations

import os
import time

import numpy as np
import pytest

from harness.bench import accelerators as acc
from harness.bench import isolated
from harness.bench import runs as bench
from harness.contract.errors import PluginLoadError
from harness.run import channel

HOSTILE = '''
import gc, os, pickle, signal, subprocess, sys, time
from multiprocessing.connection import Connection


class Base:
    def reset(self, problem):
        pass

    def step(self, it):
        return it.fock


def _pipes():
    return [o for o in gc.get_objects() if isinstance(o, Connection) and not o.closed]


class _Boom:
    def __reduce__(self):
        return (os.system, ("touch " + MARKER,))


MARKER = os.path.join(os.path.dirname(__file__), "pickle-ran")


class ForgesPickle(Base):
    def step(self, it):
        for c in _pipes():
            try:
                c.send_bytes(pickle.dumps(_Boom()))
            except OSError:
                pass
        os._exit(0)


class ForgesBytes(Base):
    def step(self, it):
        for c in _pipes():
            try:
                c.send_bytes(b"converged, trust me")
            except OSError:
                pass
        os._exit(0)


class Exits(Base):
    def step(self, it):
        os._exit(0)


class KillsParent(Base):
    def step(self, it):
        os.kill(os.getppid(), signal.SIGKILL)
        time.sleep(0.2)
        return it.fock


class Hangs(Base):
    def step(self, it):
        while True:
            try:
                time.sleep(60)
            except BaseException:
                pass


class LeavesSleep(Base):
    def reset(self, problem):
        p = subprocess.Popen(["sleep", "97"])
        with open(os.path.join(os.path.dirname(__file__), "pids"), "a") as fh:
            fh.write(f"{p.pid}\\n")


class ImportsHarness(Base):
    def step(self, it):
        return it.fock * 1.0
'''


@pytest.fixture(scope="module")
def hostile(tmp_path_factory):
    path = tmp_path_factory.mktemp("hostile") / "hostile_acc.py"
    path.write_text(HOSTILE, encoding="utf-8")
    return path


def _bench(spec, catalogue, guesses=0, **kw):
    kw.setdefault("properties", False)
    return bench.run_bench(spec, cases=[catalogue.case("water-sto-3g-rhf")], guesses=guesses,
                           baselines=("roothaan",), **kw)


def _mine(outcome):
    return [r for r in outcome.records if r.method == outcome.accelerator]


def _baselines_ran(outcome):
    return all(r.status == "converged" for r in outcome.records
               if r.method != outcome.accelerator)


def test_a_forged_pickle_is_never_unpickled(hostile, catalogue):
    marker = hostile.parent / "pickle-ran"  # made if the pickle's code ever ran
    outcome = _bench(f"{hostile}:ForgesPickle", catalogue, guesses=1)
    for rec in _mine(outcome):
        assert rec.status == "failed"
        assert rec.reason == (
            "step raised AcceleratorProcessFailed: step: the accelerator's process sent a "
            "message the harness cannot read (a pickle, not the channel's plain-data format "
            "(nothing was unpickled)) at Fock build 1")
    assert not marker.exists()
    assert _baselines_ran(outcome) and outcome.exit_status == 1


def test_forged_bytes_fail_the_run(hostile, catalogue):
    (rec,) = _mine(_bench(f"{hostile}:ForgesBytes", catalogue))
    assert rec.reason == (
        "step raised AcceleratorProcessFailed: step: the accelerator's process sent a "
        "message the harness cannot read (not the channel's format (it starts "
        "b'converge', not b'SCFHMSG1')) at Fock build 1")


def test_an_exit_without_reply_fails_the_run(hostile, catalogue):
    (rec,) = _mine(_bench(f"{hostile}:Exits", catalogue))
    assert rec.reason == ("step raised AcceleratorProcessFailed: step: the accelerator's "
                          "process ended (exit code 0) without replying at Fock build 1")


def test_killing_its_parent_is_named(hostile, catalogue):
    outcome = _bench(f"{hostile}:KillsParent", catalogue, guesses=1)
    recs = _mine(outcome)
    assert len(recs) == 2  # the second run got a new fork server and a new child
    for rec in recs:
        assert rec.status == "failed"
        assert rec.reason.startswith(
            "step raised AcceleratorProcessFailed: step: the accelerator's worker process "
            "lost its parent, the harness's fork server (killed from inside the accelerator?")
    assert _baselines_ran(outcome)


def test_a_hanging_step_is_ended_at_the_call_limit(hostile, catalogue):
    t0 = time.monotonic()
    (rec,) = _mine(_bench(f"{hostile}:Hangs", catalogue, call_limit=1.0))
    assert rec.reason == ("step raised AcceleratorTimeout: step took longer than 1 s at "
                          "Fock build 1")
    assert time.monotonic() - t0 < 30


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    try:  # a zombie left for init to reap counts as ended
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().split(") ")[-1][0] != "Z"
    except OSError:
        return False


def test_a_left_grandchild_is_ended_with_the_case(hostile, catalogue):
    pids = hostile.parent / "pids"
    outcome = _bench(f"{hostile}:LeavesSleep", catalogue)
    assert _mine(outcome)[0].status == "converged", _mine(outcome)[0].reason
    started = [int(x) for x in pids.read_text().split()]
    assert started
    deadline = time.monotonic() + 5
    while any(_alive(p) for p in started) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not any(_alive(p) for p in started)


def test_the_isolated_accelerator_runs_as_in_process(catalogue):
    """The same accelerator by spec (its own process) and as an object (this process):
    the same Fock builds, energies bitwise and property verdicts."""
    spec = "harness.bench.example_accelerator:CommutatorDIIS"
    from harness.bench.example_accelerator import CommutatorDIIS

    a = _bench(spec, catalogue, properties=True)
    b = _bench(CommutatorDIIS, catalogue, properties=True)
    assert [(r.fock_builds, r.energy) for r in _mine(a)] == \
        [(r.fock_builds, r.energy) for r in _mine(b)]
    assert [(p.name, p.passed) for p in a.properties] == \
        [(p.name, p.passed) for p in b.properties]
    assert all(p.passed for p in a.properties if p.name != "invariance")


def test_a_load_failure_in_the_child_is_one_line(hostile):
    with pytest.raises(PluginLoadError) as info:
        isolated.Isolated(f"{hostile}:Missing").load()
    assert "\n" not in str(info.value) and "Missing" in str(info.value)


@pytest.mark.parametrize("message, why", [
    ({"array": np.zeros((2, 2), dtype=np.int64)}, "array of dtype int64"),
    ({"ok": False}, "'ok' is not true"),
    ({"name": "x", "array": np.zeros(2)}, "reply keys"),
    ({"error": "x" * (isolated.MAX_TEXT + 1)}, "longer than"),
])
def test_replies_are_checked_on_arrival(message, why):
    with pytest.raises(channel.ChannelError, match=why):
        channel.decode(channel.encode(isolated.KIND, message), isolated.KIND)


@pytest.mark.slow  # the smoke suite with properties: ~18 s
def test_the_command_line_names_the_case_and_goes_on(hostile, capsys, tmp_path):
    """On the command line a forging accelerator's run fails in one progress line naming
    the case; the baselines run, bench.json is written, the exit status is 1."""
    from harness.ui.cli import main

    code = main(["bench", f"{hostile}:ForgesBytes", "--suite", "smoke",
                 "--guesses", "0", "--baselines", "roothaan",
                 "--report", str(tmp_path / "rep")])
    out = capsys.readouterr()
    assert code == 1, out.out + out.err
    assert "Traceback" not in out.out + out.err
    assert ("[3/8] water-sto-3g-rhf guess 0 ForgesBytes: failed (step raised "
            "AcceleratorProcessFailed: step: the accelerator's process sent a message the "
            "harness cannot read (not the channel's format (it starts b'converge', not "
            "b'SCFHMSG1')) at Fock build 1), 1 Fock builds, —") in out.out.splitlines()
    assert "[4/8] water-sto-3g-rhf guess 0 roothaan: converged" in out.out
    assert (tmp_path / "rep" / "bench.json").exists()


def test_a_reply_out_of_turn_fails_the_run(hostile, catalogue, tmp_path):
    """A reply of the channel's own format but for another call (an array written during
    reset) is refused: each call accepts only its own reply."""
    path = tmp_path / "out_of_turn.py"
    path.write_text(HOSTILE + '''

class ExtraReply(Base):
    def reset(self, problem):
        import numpy as np
        from harness.run import channel
        for c in _pipes():
            try:
                channel.send(c, "accelerator", {"array": np.zeros((1, 7, 7))})
            except OSError:
                pass
''', encoding="utf-8")
    (rec,) = _mine(_bench(f"{path}:ExtraReply", catalogue))
    assert rec.reason == ("reset raised AcceleratorProcessFailed: reset: the reply is not "
                          "'ok'")
