"""Run a plug-in on a list of cases, each case in its own child process.

The plug-in runs in a child started by multiprocessing's "forkserver" context (not
"fork": the harness process has used OpenMP through pyscf, and libgomp is not safe to
fork). The child re-imports the plug-in from its spec (or, when the plug-in is given
as a picklable callable such as ``harness.run.external.CommandPlugin``, receives it
pickled), calls it on the case's
``Problem`` (bohr), normalises the return value with ``harness.contract.solution.extract`` and
sends it back, or sends a one-line error naming the plug-in's own innermost frame.
A timeout (seconds), a crash (a signal, an exit), a garbage return value or an
exception fails that case only; the run goes on. The checks run in this process.

Before any case, a spec string is loaded once in a short-lived child of the same kind
(``check_plugin``), so that a bad spec fails the run early, in one line, while the
harness process itself never imports the plug-in: what a module does at import
(``os._exit``, ``os.chdir``, sleeping past the timeout, raising KeyboardInterrupt)
cannot reach the harness.
"""

from __future__ import annotations

import dataclasses
import json
import multiprocessing
import multiprocessing.connection
import os
import signal
import sys
import threading
import time
import traceback
from pathlib import Path
from typing import Any, Callable, Iterable

from harness.contract import defaults as _defaults
from harness.contract.errors import PluginLoadError, innermost_frame
from harness.run.plugins import load_plugin
from harness.contract.results import CaseResult
from harness.run.outcome import RunOutcome  # noqa: F401  (re-exported: run_cases returns it)
from harness.verdict.judge import JudgeSettings, judge, reference_energy

#: Modules the fork server imports once, so each child starts without re-importing them.
PRELOAD = ["numpy", "pyscf", "harness.contract.solution"]

#: Seconds a child gets to exit after SIGTERM before it is killed (timed-out cases,
#: interrupted runs): time for a plug-in's clean-up, such as removing a scratch folder.
TERMINATE_GRACE = 2.0

#: Default per-case timeout of the plug-in call, in seconds (``harness.contract.defaults``).
DEFAULT_TIMEOUT = _defaults.DEFAULT_TIMEOUT

#: Longest the run loop waits (seconds) before it looks at the interrupt flag again.
INTERRUPT_POLL = 0.25

# Set by ``request_interrupt``. A KeyboardInterrupt raised by a signal handler while
# Python runs a finaliser (a pipe's __del__, say) is printed and swallowed, so the
# handler also sets this flag and the run loop raises for it.
_interrupt = threading.Event()


def request_interrupt() -> None:
    """Ask a running ``run_cases`` to stop as if Ctrl-C were pressed (signal-safe)."""
    _interrupt.set()


# --------------------------------------------------------------------------- child side

_THIS_FILE = str(Path(__file__).resolve())


def plugin_frame(tb) -> traceback.FrameSummary | None:
    """The innermost traceback frame that belongs to the plug-in. (An error in the
    harness's checks is located by ``harness.verdict.judge``, with the same rules.)

    Frames up to and including the runner's own call are dropped; of the rest, the
    innermost frame outside the standard library and site-packages is taken (so an
    error raised inside numpy points at the plug-in line that called numpy); if all
    are library frames, the outermost one (the plug-in's entry function).
    """
    return innermost_frame(tb, _THIS_FILE)


#: Stands in for the message of an exception whose ``__str__`` raises.
UNPRINTABLE = "<unprintable message>"


def _type_name(obj) -> str:
    """``type(obj).__name__``, or a placeholder if even that fails (a hostile metaclass)."""
    try:
        name = type(obj).__name__
        return str.__str__(name) if isinstance(name, str) else "<unnamed type>"
    except BaseException:
        return "<unnamed type>"


def _first_line(exc: BaseException) -> str:
    """``"<ExcType>: <first line of str(exc)>"`` (or just the type when the message is
    empty; ``"<ExcType>: <unprintable message>"`` when ``str(exc)`` raises). Never raises."""
    try:
        lines = str.__str__(str(exc)).strip().splitlines()
    except BaseException:
        return f"{_type_name(exc)}: {UNPRINTABLE}"
    return f"{_type_name(exc)}: {lines[0]}" if lines else _type_name(exc)


def _message(exc: BaseException) -> str:
    """``str(exc)``, or ``"<ExcType>: <unprintable message>"`` when that raises. Never raises."""
    try:
        return str.__str__(str(exc))
    except BaseException:
        return f"{_type_name(exc)}: {UNPRINTABLE}"


def describe_exception(exc: BaseException, tb=None) -> str:
    """``"<ExcType>: <message> (at <file>:<line> in <function>)"``, one line. Never raises:
    an exception whose ``__str__`` raises reads ``"<ExcType>: <unprintable message>"``.

    No location for an exception whose class sets ``names_its_source`` (an external
    code's failure: the frame would be the harness's, the message says what failed)."""
    text = _first_line(exc)
    try:
        frame = plugin_frame(tb if tb is not None else exc.__traceback__)
        if frame is not None and not getattr(exc, "names_its_source", False):
            text += f" (at {frame.filename}:{frame.lineno} in {frame.name})"
    except BaseException:  # a frame or attribute the plug-in made unreadable: no location
        pass
    return text


def _send(conn, message: dict, fallback: str) -> None:
    """Send ``message``; if it cannot be pickled, send ``{"error": fallback + why}``
    instead; if the harness is gone, nothing. Never raises (no traceback from a child)."""
    try:
        conn.send(message)
        return
    except BaseException as exc:  # a value that cannot be pickled, or a closed pipe
        why = _first_line(exc)
    try:
        conn.send({"error": f"{fallback}: {why}", "seconds": message.get("seconds")})
    except BaseException:
        pass


def _die_with_harness(conn) -> None:
    """End this child as soon as the harness process ends (even by SIGKILL), so that no
    plug-in is left running. The harness never writes on the connection, so it becomes
    readable only at end-of-file, when the harness's end is closed; a daemon thread
    waits for that. (The fork server cannot do this: it lives as long as any child
    holds its pipe, and a killed harness may linger as a zombie with its pid.)"""
    import select
    import threading

    def watch():
        try:
            select.select([conn.fileno()], [], [])
        except (OSError, ValueError):
            pass
        _kill_own_group()
        os._exit(1)

    threading.Thread(target=watch, name="scf-harness-orphan-watch", daemon=True).start()


def _own_group() -> None:
    """Make this child the leader of its own session and process group, so the parent
    can end whatever the plug-in started (a ``sleep 97 &`` of a shell it ran) with the
    child: :func:`_end_process` kills the group."""
    try:
        os.setsid()
    except OSError:  # already a group leader: left as it is (_end_process then skips it)
        pass


def _kill_own_group() -> None:
    """SIGKILL this process's group, itself included — only when it leads the group."""
    try:
        if os.getpgid(0) == os.getpid():
            os.killpg(os.getpid(), signal.SIGKILL)
    except OSError:
        pass


def _share_cores(jobs: int) -> None:
    """Give each of ``jobs`` concurrent children its share of the cores for pyscf's
    OpenMP threads (environment variables are too late: pyscf is preloaded)."""
    try:
        from harness.backend.mole import set_threads

        set_threads(max(1, (os.cpu_count() or 1) // max(1, jobs)))
    except Exception:  # pragma: no cover - pyscf without OpenMP
        pass


class _Stopped(BaseException):
    """Raised in a child by SIGTERM (a timeout or an interrupted run), so the plug-in's
    ``finally`` blocks run: a ``CommandPlugin`` kills its program and removes its
    scratch directory."""


def _stop_on_sigterm(signum, frame):
    raise _Stopped


def _enter(conn, path: list[str], cwd: str) -> None:
    """Common start of every child: Ctrl-C is the parent's, end with the harness, work in
    the harness's ``cwd`` with its ``sys.path``."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C
    _own_group()
    _die_with_harness(conn)
    try:
        os.chdir(cwd)
    except OSError:
        pass
    sys.path[:] = path


def _load_failure(spec: str, exc: BaseException) -> str:
    """The one-line reason loading ``spec`` failed: a PluginLoadError's own text, or
    ``"plug-in '<spec>': importing it raised <ExcType>: <message>"`` for anything else
    (KeyboardInterrupt, an exception whose ``__str__`` raised). Never raises."""
    if isinstance(exc, PluginLoadError):
        return _message(exc)
    return f"plug-in {spec!r}: importing it raised {_first_line(exc)}"


def _load(spec: str):
    """``(function, None)`` or ``(None, one-line reason)`` for a spec string."""
    try:
        return load_plugin(spec), None
    except BaseException as exc:  # KeyboardInterrupt or SystemExit at import too
        return None, _load_failure(spec, exc)


def _quiet_into(output: str) -> None:
    """Send this process's stdout and stderr (file descriptors 1 and 2) to ``output``."""
    try:
        fd = os.open(output, os.O_WRONLY | os.O_APPEND)
    except OSError:
        fd = os.open(os.devnull, os.O_WRONLY)
    for target in (1, 2):
        try:
            os.dup2(fd, target)
        except OSError:  # pragma: no cover - no such descriptor
            pass
    os.close(fd)


def _load_check_main(conn, plugin_spec: str, path: list[str], cwd: str, output: str) -> None:
    """Entry point of the load-check child: load ``plugin_spec`` as a case child would,
    send ``{"ok": True}`` or ``{"error": one line}``, and end at once (no exit handlers,
    no waiting for threads the module started). What the import prints goes to the file
    ``output`` (shown only when loading fails, so a successful import prints only once,
    in the case child)."""
    _quiet_into(output)
    _enter(conn, path, cwd)
    _, error = _load(plugin_spec)
    _send(conn, {"ok": True} if error is None else {"error": error},
          f"plug-in {plugin_spec!r}: cannot report the load check")
    os._exit(0)


def _child_main(conn, plugin_spec, path: list[str], cwd: str, problem,
                jobs: int = 1) -> None:
    """Entry point of the child process: call the plug-in once, send one message.

    ``plugin_spec`` is a spec string (imported here) or the plug-in callable itself.
    Whatever the plug-in raises, returns or makes unprintable, the child sends one
    one-line message and prints no traceback of its own."""
    if jobs > 1:
        _share_cores(jobs)
    try:
        import faulthandler
        faulthandler.enable()  # a crashing plug-in prints where it crashed on stderr
    except Exception:  # pragma: no cover - stderr unusable
        pass
    _enter(conn, path, cwd)
    from harness.contract.solution import extract

    if isinstance(plugin_spec, str):
        function, error = _load(plugin_spec)
        if error is not None:
            _send(conn, {"error": error}, "cannot send the load error")
            return
    else:
        function = plugin_spec
    start = time.perf_counter()
    parent = os.getppid()
    # Only while the plug-in runs: before and after, SIGTERM ends the child quietly.
    signal.signal(signal.SIGTERM, _stop_on_sigterm)
    try:
        raw, error = function(problem), None
    except _Stopped:  # the parent stopped this case and reads nothing more
        return
    except BaseException as exc:  # SystemExit from a plug-in is a failure too
        raw, error = None, exc
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if os.getppid() != parent:  # the fork server died under the plug-in
        _send(conn, {"error": PARENT_KILLED}, "cannot send that the fork server died")
        return
    if error is not None:
        _send(conn, {"error": describe_exception(error)}, "cannot send the plug-in's error")
        return
    seconds = time.perf_counter() - start
    try:
        message = {"solution": extract(raw), "seconds": seconds}
    except BaseException as exc:  # the returned object's own methods may raise anything
        message = {"error": f"unreadable return value: {_message(exc)}", "seconds": seconds}
    # e.g. a value extract let through that cannot be pickled
    _send(conn, message, "cannot send the plug-in's result")


# -------------------------------------------------------------------------- parent side


def _context():
    ctx = multiprocessing.get_context("forkserver")
    ctx.set_forkserver_preload(PRELOAD)
    return ctx


def _reference(case, directory, write: bool):
    """``harness.catalogue.references.reference_for``, imported when first needed."""
    from harness.catalogue.references import reference_for
    return reference_for(case, directory, write=write)


#: Why a case failed whose worker process lost its parent, the fork server (the
#: plug-in ran ``os.kill(os.getppid(), ...)``): its exit status is then unknown (the
#: fork server reports it), and multiprocessing reads it as 255.
PARENT_KILLED = ("the plug-in's worker process lost its parent, the harness's fork server "
                 "(killed from inside the plug-in? os.getppid() is not the harness): result "
                 "unknown")


def _fork_server_died(wait: float = 1.0) -> bool:
    """Whether multiprocessing's fork server (a child of this process) has ended, waiting
    up to ``wait`` seconds for it to become a zombie (its socket closes a moment before).
    It is not reaped here (WNOWAIT), so multiprocessing sees it and starts a new one."""
    try:
        from multiprocessing import forkserver

        pid = forkserver._forkserver._forkserver_pid
    except AttributeError:  # pragma: no cover - another multiprocessing
        return False
    if pid is None:
        return False
    deadline = time.monotonic() + wait
    while True:
        try:
            if os.waitid(os.P_PID, pid, os.WEXITED | os.WNOHANG | os.WNOWAIT) is not None:
                return True
        except OSError:  # not our child, or reaped already
            return False
        if time.monotonic() >= deadline:
            return False
        time.sleep(0.01)


def death_reason(exitcode: int | None) -> str:
    """Why a child that sent nothing ended: the signal's name or its exit code."""
    if exitcode is None:
        return "plug-in process vanished without sending a result"
    if exitcode < 0:
        try:
            name = signal.Signals(-exitcode).name
        except ValueError:
            name = f"signal {-exitcode}"
        return f"plug-in process died from {name} without sending a result"
    return f"plug-in process exited with code {exitcode} without sending a result"


@dataclasses.dataclass
class _Running:
    index: int
    case: Any
    problem: Any
    process: Any
    conn: Any
    deadline: float
    started: float
    reference: Any = None
    reference_source: str | None = None
    reference_error: str | None = None


def _base_result(case, **fields) -> CaseResult:
    return CaseResult(name=case.name, method=getattr(case, "method", ""),
                      basis=getattr(case, "basis", ""), **fields)


def _finish(run: _Running, message: dict | None, error: str | None,
            settings: JudgeSettings) -> CaseResult:
    """Turn what the child sent (or why it sent nothing) into a CaseResult: an error
    as it is, a solution through ``harness.verdict.judge.judge``."""
    if error is None and message is not None and "error" in message:
        error = message["error"]
    seconds = message.get("seconds") if message else None
    if error is not None:
        return _base_result(run.case, error=error, plugin_seconds=seconds,
                            reference_energy=_ref_energy(run),
                            reference_source=run.reference_source)
    return judge(run.problem, message["solution"], run.reference, dataclasses.replace(
        settings, reference_source=run.reference_source,
        reference_error=run.reference_error, plugin_seconds=seconds))


def _ended(exitcode: int | None) -> str:
    """``"exit code N"`` or ``"signal NAME"`` for a child's ``exitcode``."""
    if exitcode is None:
        return "no exit code"
    if exitcode < 0:
        try:
            return f"signal {signal.Signals(-exitcode).name}"
        except ValueError:
            return f"signal {-exitcode}"
    return f"exit code {exitcode}"


def _end_process(proc, grace: float) -> None:
    """SIGTERM, ``grace`` seconds, SIGKILL (at once when ``grace`` is 0); then reap ``proc``
    and SIGKILL what is left of its process group (the child leads its own: what the
    plug-in started and left running, so nothing outlives its case)."""
    pid = proc.pid
    if proc.is_alive():
        if grace > 0:
            proc.terminate()
            proc.join(grace)
        if proc.is_alive():
            proc.kill()
    proc.join()
    _kill_group(pid)
    try:
        proc.close()
    except ValueError:  # pragma: no cover - still running (cannot happen after join)
        pass


def _kill_group(pgid: int | None) -> None:
    """SIGKILL the process group ``pgid`` if it still has members (none: nothing to do).
    The group of a child that failed to lead its own does not exist: nothing is hit."""
    if pgid is None:
        return
    try:
        os.killpg(pgid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass


def _await_load_check(proc, conn, spec: str, timeout: float) -> str | None:
    """The load-check child's verdict: None (loaded) or the one-line reason it did not."""
    deadline = time.monotonic() + timeout
    while True:
        if _interrupt.is_set():
            raise KeyboardInterrupt
        left = deadline - time.monotonic()
        ready = multiprocessing.connection.wait([conn, proc.sentinel],
                                                timeout=max(0.0, min(INTERRUPT_POLL, left)))
        if conn in ready or conn.poll():
            try:
                reply = conn.recv()
            except (EOFError, OSError):  # the child ended without a reply
                reply = None
            if isinstance(reply, dict):
                return None if reply.get("ok") is True else str(reply.get("error"))
            if reply is not None:
                return f"plug-in {spec!r}: the load check sent an unexpected reply"
        elif proc.sentinel not in ready:
            if left <= 0:
                return f"plug-in {spec!r}: importing it took longer than {timeout:g} s"
            continue
        proc.join(TERMINATE_GRACE)
        return f"plug-in {spec!r}: importing it ended the process ({_ended(proc.exitcode)})"


def _check_spec(spec: str, path: list[str], cwd: str, timeout: float) -> None:
    """Load ``spec`` once in a short-lived child (the case children's context, sys.path
    and cwd), within ``timeout`` seconds; raise PluginLoadError (one line) if it cannot
    be loaded, takes too long, raises a BaseException or ends the process at import.
    The harness process never imports the plug-in. What a failing import printed is
    shown on stderr before the error is raised."""
    import tempfile

    ctx = _context()
    fd, output = tempfile.mkstemp(prefix="scf-harness-load-check-", suffix=".txt")
    os.close(fd)
    reader, writer = ctx.Pipe(duplex=True)  # duplex: the child sees our end close
    proc = ctx.Process(target=_load_check_main, name="scf-harness:load-check",
                       args=(writer, spec, path, cwd, output), daemon=True)
    try:
        proc.start()
        writer.close()
        error = _await_load_check(proc, reader, spec, timeout)
    finally:
        writer.close()
        if proc.pid is not None:  # started (an interrupt may land inside start)
            _end_process(proc, TERMINATE_GRACE)
        reader.close()
        try:
            printed = Path(output).read_text(encoding="utf-8", errors="replace")
        except OSError:
            printed = ""
        try:
            os.unlink(output)
        except OSError:
            pass
    if error is not None:
        if printed:
            sys.stderr.write(printed if printed.endswith("\n") else printed + "\n")
            sys.stderr.flush()
        lines = [line for line in error.splitlines() if line.strip()]
        raise PluginLoadError(lines[0] if lines else f"plug-in {spec!r}: cannot be loaded")


def check_plugin(plugin, *, timeout: float = DEFAULT_TIMEOUT) -> None:
    """Fail early, in one line (PluginLoadError), on a plug-in that cannot run.

    A spec string is loaded in a short-lived child process exactly as each case child
    loads it (same multiprocessing context, ``sys.path`` and current directory), within
    ``timeout`` seconds: the harness process itself never imports the plug-in, so what
    the module does at import (``os._exit``, ``os.chdir``, sleeping, raising
    KeyboardInterrupt, printing) cannot touch the run. A callable must pickle (it is
    sent to each child as it is). Ctrl-C while waiting raises KeyboardInterrupt."""
    _check_plugin(plugin, list(sys.path), os.getcwd(), timeout)


def _check_plugin(plugin, path: list[str], cwd: str, timeout: float) -> None:
    if isinstance(plugin, str):
        _check_spec(plugin, path, cwd, timeout)
        return
    if not callable(plugin):
        raise PluginLoadError(f"plug-in {plugin!r}: not callable "
                              f"(it is {type(plugin).__name__})")
    import pickle

    try:
        pickle.dumps(plugin)
    except Exception as exc:
        raise PluginLoadError(f"plug-in {plugin!r}: cannot be sent to the plug-in process "
                              f"(it does not pickle: {type(exc).__name__}: {exc})"
                              .splitlines()[0]) from None


def _append_jsonl(path: Path | None, result: CaseResult) -> None:
    if path is None:
        return
    with open(path, "a", encoding="utf-8") as fh:
        fh.write(json.dumps(result.to_json()) + "\n")
        fh.flush()


def _stop(run: _Running, *, grace: float) -> None:
    _end_process(run.process, grace)
    run.conn.close()


def run_cases(cases: Iterable, plugin_spec, *, tolerances, convergence: float | None = None,
              ao_convention: str | None = None, stability: str = "internal",
              basis_source: str = "pyscf",
              timeout: float = DEFAULT_TIMEOUT, jobs: int = 1, reference_dir=None,
              write_references: bool = False, results_path=None,
              on_start: Callable[[str], None] | None = None,
              on_result: Callable[[CaseResult], None] | None = None,
              plugin_checked: bool = False) -> RunOutcome:
    """Run ``plugin_spec`` on each case in a child process and check the results here.

    ``plugin_spec`` is a ``MODULE:FUNCTION`` / ``path.py:FUNCTION`` string (re-imported
    in each child) or a picklable callable (sent to each child as it is, e.g. a
    ``harness.run.external.CommandPlugin``).

    ``convergence`` (dimensionless, Eh-based atomic units) is passed to
    ``case.problem``; None means the default. ``timeout`` is per case in seconds (the
    plug-in call, measured from the child's start). Up to ``jobs`` children run at
    once. References come from ``harness.catalogue.references.reference_for`` in this process
    (``write_references`` stores the computed ones). ``results_path``: one JSON line
    per finished case is appended as soon as it is known. ``on_start(name)`` is called
    when a case starts, ``on_result(case_result)`` when it is finished. Ctrl-C stops
    the children and returns the finished cases with ``interrupted=True``.

    ``ao_convention``, ``stability`` and ``basis_source`` are passed to ``harness.verdict.judge.judge``, which
    judges each solution here, in the harness process.

    The outcome also holds, per case name, the problems, the extracted solutions and
    the references (for ``harness.report.certificate``).

    Raises ``PluginLoadError`` before running anything if the spec cannot be loaded
    (or the callable does not pickle): :func:`check_plugin`, in a child process, with
    ``timeout`` as its time limit; ``plugin_checked=True`` skips it (the caller ran
    :func:`check_plugin` already). Ctrl-C during that check returns an empty,
    interrupted outcome.
    """
    settings = JudgeSettings(tolerances=tolerances, ao_convention=ao_convention,
                             stability=stability, basis_source=basis_source)
    cases = list(cases)
    _interrupt.clear()
    jobs = max(1, int(jobs))
    path_now = list(sys.path)
    cwd = os.getcwd()
    started = time.perf_counter()
    if not plugin_checked:
        try:  # fail early, in one line, on a bad spec (loaded in a child, not here)
            _check_plugin(plugin_spec, path_now, cwd, timeout)
        except KeyboardInterrupt:
            _interrupt.clear()
            return RunOutcome(cases=(), interrupted=True,
                              seconds=time.perf_counter() - started)
    results_file = Path(results_path) if results_path is not None else None
    finished: dict[int, CaseResult] = {}
    running: list[_Running] = []
    problems: dict[str, Any] = {}
    solutions: dict[str, Any] = {}
    references: dict[str, Any] = {}
    pending = list(enumerate(cases))
    interrupted = False
    ctx = None

    def record(index: int, result: CaseResult) -> None:
        finished[index] = result
        _append_jsonl(results_file, result)
        if on_result is not None:
            on_result(result)

    def launch(index: int, case) -> None:
        nonlocal ctx
        if on_start is not None:
            on_start(case.name)
        try:
            problem = (case.problem() if convergence is None
                       else case.problem(convergence=convergence))
        except Exception as exc:
            record(index, _base_result(case, error=f"cannot build the problem: {exc}"))
            return
        problems[case.name] = problem
        solutions[case.name] = None
        references[case.name] = None
        if ctx is None:
            ctx = _context()
        reader, writer = ctx.Pipe(duplex=True)  # duplex: the child sees our end close
        proc = ctx.Process(target=_child_main, name=f"scf-harness:{case.name}",
                           args=(writer, plugin_spec, path_now, cwd, problem, jobs), daemon=True)
        proc.start()
        writer.close()
        now = time.monotonic()
        run = _Running(index, case, problem, proc, reader, now + timeout, now)
        running.append(run)
        # The reference is looked up while the child works (a stored one is instant).
        try:
            run.reference, run.reference_source = _reference(case, reference_dir,
                                                             write_references)
        except Exception as exc:
            run.reference_error = f"{type(exc).__name__}: {exc}".splitlines()[0]
        references[case.name] = run.reference

    def collect(run: _Running) -> None:
        message, error = None, None
        if run.conn.poll():
            try:
                message = run.conn.recv()
            except (EOFError, OSError):
                message = None
        if message is None:
            run.process.join(TERMINATE_GRACE)
            error = death_reason(run.process.exitcode)
            if run.process.exitcode == 255 and _fork_server_died():
                error = PARENT_KILLED
        running.remove(run)
        _stop(run, grace=TERMINATE_GRACE)
        if not isinstance(message, dict) and error is None:
            error = f"plug-in process sent an unexpected message ({type(message).__name__})"
        if error is None and isinstance(message, dict) and "solution" in message:
            solutions[run.case.name] = message["solution"]
        record(run.index, _finish(run, message, error, settings))

    try:
        while pending or running:
            if _interrupt.is_set():
                raise KeyboardInterrupt
            while pending and len(running) < jobs:
                launch(*pending.pop(0))
            if not running:
                continue
            now = time.monotonic()
            wait_for = min(INTERRUPT_POLL, max(0.0, min(r.deadline for r in running) - now))
            handles = {}
            for r in running:
                handles[r.conn] = r
                handles[r.process.sentinel] = r
            ready = multiprocessing.connection.wait(list(handles), timeout=wait_for)
            for r in {id(handles[h]): handles[h] for h in ready}.values():
                collect(r)
            now = time.monotonic()
            for r in [r for r in running if now >= r.deadline]:
                if r.conn.poll():  # the result arrived just in time
                    collect(r)
                    continue
                running.remove(r)
                _stop(r, grace=TERMINATE_GRACE)
                record(r.index, _base_result(
                    r.case, error=f"timed out after {timeout:.1f} s",
                    reference_energy=_ref_energy(r), reference_source=r.reference_source))
    except KeyboardInterrupt:
        interrupted = True
    finally:
        _interrupt.clear()
        for r in list(running):
            running.remove(r)
            _stop(r, grace=TERMINATE_GRACE)
    ordered = tuple(finished[i] for i in sorted(finished))
    return RunOutcome(cases=ordered, interrupted=interrupted,
                      seconds=time.perf_counter() - started, problems=problems,
                      solutions=solutions, references=references)


def _ref_energy(run: _Running) -> float | None:
    """The reference total energy in Eh of a running case, if any."""
    return reference_energy(run.reference)
