"""Run a plug-in on a list of cases, each case in its own child process.

The plug-in runs in a child started by multiprocessing's "forkserver" context (not
"fork": the harness process has used OpenMP through pyscf, and libgomp is not safe to
fork). The child re-imports the plug-in from its spec (or, when the plug-in is given
as a picklable callable such as ``harness.run.external.CommandPlugin``, receives it
pickled), calls it on the case's
``Problem`` (bohr), normalises the return value with ``harness.contract.solution.extract`` and
sends it back, or sends a one-line error naming the plug-in's own innermost frame. What
crosses back goes through the closed channel of ``harness.run.channel`` (plain data, a
JSON header and raw buffers, checked on arrival): nothing a child sends is unpickled, so
a plug-in that writes into the pipe itself gets its case failed, never code run here.
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

from harness.backend.threads import use_threads
from harness.contract import defaults as _defaults
from harness.contract.errors import PluginLoadError, Unsupported, innermost_frame
from harness.run import channel
from harness.run.plugins import load_plugin
from harness.contract.results import CaseResult
from harness.run.outcome import RunOutcome  # noqa: F401  (re-exported: run_cases returns it)
from harness.verdict.judge import JudgeSettings, judge, reference_energy

#: Environment variable naming a file to which every process of a run (the harness, the
#: case children, the judge workers) appends its timeline: one JSON line per event,
#: ``{"t": wall-clock s (time.time()), "pid", "case", "event"}``. A debugging aid for
#: ``--jobs`` (``ci/bench_jobs.py --timeline`` summarises it); unset: nothing is written.
TIMELINE_ENV = "SCF_HARNESS_TIMELINE"


def timeline(event: str, case: str = "") -> None:
    """Append ``event`` of ``case`` to the ``$SCF_HARNESS_TIMELINE`` file, if set (never raises)."""
    path = os.environ.get(TIMELINE_ENV)
    if not path:
        return
    try:
        line = json.dumps({"t": time.time(), "pid": os.getpid(), "case": case,
                           "event": event}) + "\n"
        fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
        try:
            os.write(fd, line.encode())
        finally:
            os.close(fd)
    except Exception:
        pass


#: Modules the fork server imports once, so each child starts without re-importing them.
PRELOAD = ["numpy", "pyscf", "harness.contract.solution", "harness.run.channel"]

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


#: The ``kind`` of the child's message for a case the plug-in does not support.
UNSUPPORTED_KIND = "unsupported"


def unsupported_message(reason: str, seconds: float | None = None) -> dict:
    """The plain message a child sends for an unsupported case:
    ``{"kind": "unsupported", "reason": str, "seconds": float | None}``."""
    return {"kind": UNSUPPORTED_KIND, "reason": str(reason), "seconds": seconds}


def _reason(exc: BaseException) -> str:
    """The one-line reason of an ``Unsupported`` (its ``reason``, or its text when a
    subclass made that unreadable). Never raises."""
    try:
        reason = exc.reason
        if isinstance(reason, str) and reason.strip():
            return " ".join(reason.split())
    except BaseException:
        pass
    return " ".join(_message(exc).split()) or "no reason given"


def _send(conn, message: dict, fallback: str, kind: str = "case") -> None:
    """Send ``message`` over the closed channel (``harness.run.channel``: plain data, no
    pickle); if it cannot cross, send ``{"error": fallback + why}`` instead; if the
    harness is gone, nothing. Never raises (no traceback from a child)."""
    try:
        channel.send(conn, kind, message)
        return
    except BaseException as exc:  # a value that cannot cross, or a closed pipe
        why = _first_line(exc)
    fallback_message = {"error": f"{fallback}: {why}"}
    if kind == "case":
        seconds = message.get("seconds")
        fallback_message["seconds"] = seconds if isinstance(seconds, float) else None
    try:
        channel.send(conn, kind, fallback_message)
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
    OpenMP threads and numpy's BLAS threads (environment variables are too late: pyscf
    and numpy are preloaded), so that N processes do not run 2N threads on N cores."""
    use_threads((os.cpu_count() or 1) // max(1, jobs))


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
          f"plug-in {plugin_spec!r}: cannot report the load check", kind="load")
    os._exit(0)


def _child_main(conn, plugin_spec, path: list[str], cwd: str, problem,
                jobs: int = 1) -> None:
    """Entry point of the child process: call the plug-in once, send one message.

    ``plugin_spec`` is a spec string (imported here) or the plug-in callable itself.
    Whatever the plug-in raises, returns or makes unprintable, the child sends one
    one-line message and prints no traceback of its own."""
    name = multiprocessing.current_process().name.partition(":")[2]
    timeline("child-enter", name)
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
    timeline("plugin-start", name)
    parent = os.getppid()
    # Only while the plug-in runs: before and after, SIGTERM ends the child quietly.
    signal.signal(signal.SIGTERM, _stop_on_sigterm)
    unsupported = None
    try:
        raw, error = function(problem), None
    except _Stopped:  # the parent stopped this case and reads nothing more
        return
    except Unsupported as exc:  # the code cannot run this case: neither pass nor fail
        raw, error, unsupported = None, None, _reason(exc)
    except BaseException as exc:  # SystemExit from a plug-in is a failure too
        raw, error = None, exc
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    timeline("plugin-end", name)
    if os.getppid() != parent:  # the fork server died under the plug-in
        _send(conn, {"error": PARENT_KILLED}, "cannot send that the fork server died")
        return
    if unsupported is not None:
        _send(conn, unsupported_message(unsupported, time.perf_counter() - start),
              "cannot send that the case is unsupported")
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
    timeline("child-sent", name)


# -------------------------------------------------------------------------- parent side


def _context():
    ctx = multiprocessing.get_context("forkserver")
    ctx.set_forkserver_preload(PRELOAD)
    return ctx


def start_fork_server() -> None:
    """Start the fork server of the plug-in processes (:func:`_context`, with its
    ``PRELOAD`` imports, ~0.4 s) in a background thread now, so that it comes up while
    this process does other work (the command line reads its cases meanwhile); the first
    child then waits only for what is left of it. multiprocessing's own lock makes a
    child started meanwhile wait for the same server. Never raises."""
    def start():
        try:
            from multiprocessing import forkserver

            _context()
            forkserver.ensure_running()
        except Exception:  # the first child starts it as usual, and reports any error
            pass

    threading.Thread(target=start, name="scf-harness-fork-server", daemon=True).start()


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
    handoff: str | None = None  # the file a prepared judge task waits for (prepare_and_judge)
    concluded: tuple | None = None  # (message, error) once the child has ended


def _base_result(case, **fields) -> CaseResult:
    return CaseResult(name=case.name, method=getattr(case, "method", ""),
                      basis=getattr(case, "basis", ""), **fields)


#: The error of an unsupported case under require-all (``--require-all``,
#: ``require_all`` in ``[tool.scf-harness]``): ``{reason}`` is the code's reason.
REQUIRED_ERROR = "unsupported: {reason} (require-all: every selected case must run)"


def unsupported_result(case, reason: str, *, require_all: bool = False,
                       **fields) -> CaseResult:
    """The CaseResult of a case the code does not support: ``unsupported=reason``
    (neither passed nor failed), or, with ``require_all``, also an error
    (REQUIRED_ERROR), so that the case failed."""
    error = REQUIRED_ERROR.format(reason=reason) if require_all else None
    return _base_result(case, unsupported=reason, error=error, **fields)


def _finish(run: _Running, message: dict | None, error: str | None,
            settings: JudgeSettings, require_all: bool = False) -> CaseResult:
    """Turn what the child sent (or why it sent nothing) into a CaseResult: an error
    as it is, an unsupported case as :func:`unsupported_result`, a solution through
    ``harness.verdict.judge.judge``."""
    return finish_case(run.case, run.problem, message, error, settings, run.reference,
                       run.reference_source, run.reference_error, require_all=require_all)


def finish_case(case, problem, message: dict | None, error: str | None,
                settings: JudgeSettings, reference, reference_source: str | None,
                reference_error: str | None, *, require_all: bool = False,
                integrals=None) -> CaseResult:
    """The CaseResult of one case from what its child sent (``message``: a dict with
    ``"solution"`` or ``"error"``, and ``"seconds"``; or an unsupported message) or why
    it sent nothing (``error``): an error as it is (with the reference energy, Eh), an
    unsupported case as :func:`unsupported_result`, a solution through
    ``harness.verdict.judge.judge``. No process, no I/O: the same in the harness
    process and in a judge worker (:func:`judge_case`)."""
    if error is None and message is not None and "error" in message:
        error = message["error"]
    seconds = message.get("seconds") if message else None
    if error is None and message is not None and message.get("kind") == UNSUPPORTED_KIND:
        return unsupported_result(case, str(message.get("reason") or "no reason given"),
                                  require_all=require_all, plugin_seconds=seconds,
                                  reference_energy=reference_energy(reference),
                                  reference_source=reference_source)
    if error is not None:
        return _base_result(case, error=error, plugin_seconds=seconds,
                            reference_energy=reference_energy(reference),
                            reference_source=reference_source)
    return judge(problem, message["solution"], reference, dataclasses.replace(
        settings, reference_source=reference_source,
        reference_error=reference_error, plugin_seconds=seconds), integrals=integrals)


# ------------------------------------------------------------------- judge workers
#
# With --jobs N > 1 the checks of finished cases run in N judge worker processes
# (started by the same fork server, so numpy and pyscf are preloaded) instead of one
# at a time in the harness process, which would otherwise be the bottleneck: every
# case's checks cost about as much as its plug-in run. Judge workers never run
# plug-in code: they receive the Problem, the extracted Solution (plain arrays) and
# the settings, look the reference up and return the CaseResult. A plug-in therefore
# still cannot touch the checks.


def judge_case(case, problem, message: dict | None, error: str | None,
               settings: JudgeSettings, reference_dir, write_references: bool,
               require_all: bool = False):
    """The task of a judge worker: ``(CaseResult, reference, reference_source)`` for a
    case whose child has ended. The reference is found as the harness process finds it
    (``harness.catalogue.references.reference_for``); then :func:`finish_case`."""
    timeline("judge-start", case.name)
    reference, source, reference_error = None, None, None
    try:
        reference, source = _reference(case, reference_dir, write_references)
    except Exception as exc:
        reference_error = f"{type(exc).__name__}: {exc}".splitlines()[0]
    timeline("reference-loaded", case.name)
    result = finish_case(case, problem, message, error, settings, reference, source,
                         reference_error, require_all=require_all)
    timeline("judge-end", case.name)
    return result, reference, source


#: With ``--jobs N > 1``, a case of at least this many basis functions gets its judge task
#: at once, while its plug-in runs (:func:`prepare_and_judge`): the work that does not
#: depend on the solution (reference lookup, AO integrals, the packed ERIs of the
#: stability analysis: 2.3 of the 5 s of benzene/cc-pVDZ's checks) is then done on the
#: other core instead of after the plug-in, on the run's critical path. Below it the
#: preparation costs about as much as it saves.
PREPARE_MIN_AO = 50

#: Seconds between two looks of a prepared judge task for its hand-off file.
HANDOFF_POLL = 0.02


def prepare_and_judge(case, problem, settings: JudgeSettings, reference_dir,
                      write_references: bool, require_all: bool, handoff: str):
    """A judge worker's task started with the case's plug-in: look the reference up and
    build the integrals (and the packed ERIs, ``AOIntegrals.prepare_packed_eri``, when the
    stability analysis will need them), then wait for the harness to write
    ``(message, error, threads)`` to the file ``handoff`` (:func:`_write_handoff`: the
    channel's plain-data format, never a pickle), and judge as :func:`judge_case` does,
    with ``threads`` OpenMP threads.
    Returns what :func:`judge_case` returns; the verdict is the same."""
    timeline("prepare-start", case.name)
    parent = os.getppid()
    reference, source, reference_error = None, None, None
    try:
        reference, source = _reference(case, reference_dir, write_references)
    except Exception as exc:
        reference_error = f"{type(exc).__name__}: {exc}".splitlines()[0]
    ints = None
    try:
        from harness.backend.integrals import integrals_for

        ints = integrals_for(problem)
        if settings.stability != "off" and getattr(problem, "method", "") in ("rhf", "uhf",
                                                                              "rohf"):
            ints.prepare_packed_eri()
        if getattr(reference, "density", None) is not None:  # else never used
            ints.prepare_fitting()  # for J/K of the density difference (verdict.coulomb)
    except Exception:  # judged without: judge() builds them and reports what fails
        ints = None
    timeline("prepared", case.name)
    while not os.path.exists(handoff):
        if os.getppid() != parent:  # the harness is gone
            os._exit(1)
        time.sleep(HANDOFF_POLL)
    message, error, threads = _read_handoff(handoff)
    timeline("judge-start", case.name)
    use_threads(threads)
    try:
        result = finish_case(case, problem, message, error, settings, reference, source,
                             reference_error, require_all=require_all, integrals=ints)
    finally:
        use_threads(_worker_threads)
    timeline("judge-end", case.name)
    return result, reference, source


def _write_handoff(path: str, message: dict | None, error: str | None, threads: int) -> None:
    """Write a prepared task's hand-off: the child's decoded message re-encoded in the
    channel's plain-data format (``channel.encode``, kind "case") in ``path``, and the
    error and thread count as JSON in ``path + ".json"`` (written first; ``path`` appears
    last, atomically). The folder is the harness's, but a plug-in of the same user could
    write there: what the judge worker reads is checked as the child's message was, and
    nothing is unpickled."""
    import json

    from harness.run import channel

    with open(path + ".json.part", "w", encoding="utf-8") as fh:
        json.dump({"error": error, "threads": int(threads)}, fh)
    os.replace(path + ".json.part", path + ".json")
    with open(path + ".part", "wb") as fh:
        fh.write(b"" if message is None else channel.encode("case", message))
    os.replace(path + ".part", path)


def _read_handoff(path: str) -> tuple[dict | None, str | None, int]:
    """``(message, error, threads)`` of :func:`_write_handoff`'s files, removed once read;
    a file that does not decode becomes the case's error (one line)."""
    import json

    from harness.run import channel

    message, error, threads = None, None, 1
    try:
        with open(path + ".json", encoding="utf-8") as fh:
            meta = json.load(fh)
        error = meta.get("error") if isinstance(meta.get("error"), str) else None
        if isinstance(meta.get("threads"), int) and not isinstance(meta["threads"], bool):
            threads = max(1, meta["threads"])
        with open(path, "rb") as fh:
            data = fh.read()
        if data:
            message = channel.decode(data, "case")
    except (OSError, ValueError) as exc:
        message, error = None, channel.unreadable(f"judge hand-off: {exc}".splitlines()[0])
    for name in (path, path + ".json"):
        try:
            os.unlink(name)
        except OSError:
            pass
    return message, error, threads


#: The OpenMP threads a judge worker uses between tasks (set by _judge_worker_init).
_worker_threads = 1


def _judge_worker_init(threads: int) -> None:
    """Start of a judge worker: Ctrl-C is the harness's (it cancels the work), pyscf's
    OpenMP threads are this worker's share of the cores."""
    global _worker_threads
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _worker_threads = max(1, threads)
    use_threads(_worker_threads)


def _size(case) -> int:
    """The number of basis functions of ``case`` (0 when it cannot be told): a cost
    estimate for the launch order."""
    try:
        return int(case.mole().nao)
    except Exception:
        return 0


def launch_order(cases: list, jobs: int) -> list[tuple[int, Any]]:
    """``(index, case)`` in the order the cases are started: with one job the given
    order; with more, the largest first (by number of basis functions, ties in the given
    order), so that the longest case does not start last and run alone while the other
    cores idle (a 114-AO benzene costs more than the other 27 standard cases together).
    Results keep the given order."""
    indexed = list(enumerate(cases))
    if jobs <= 1 or len(indexed) <= 1:
        return indexed
    sizes = {i: _size(case) for i, case in indexed}
    return sorted(indexed, key=lambda item: -sizes[item[0]])


class JudgePool:
    """``workers`` judge worker processes (:func:`judge_case`), whose finished tasks the
    run loop waits for with its children: :attr:`fileno` becomes readable when a task
    is done. A broken pool (a worker killed) is not fatal: :meth:`done` returns the
    failed tasks, which the caller judges in its own process."""

    def __init__(self, workers: int, waiting: int = 0):
        from concurrent.futures import ProcessPoolExecutor

        self.workers = max(1, int(workers))
        threads = max(1, (os.cpu_count() or 1) // self.workers)
        # ``waiting`` more processes for prepared tasks (prepare_and_judge), which sleep
        # while their plug-in runs
        self._executor = ProcessPoolExecutor(max_workers=self.workers + max(0, int(waiting)),
                                             mp_context=_context(),
                                             initializer=_judge_worker_init,
                                             initargs=(threads,))
        self._read, self._write = os.pipe()
        os.set_blocking(self._read, False)
        self._tasks: dict[Any, Any] = {}  # future -> the caller's key
        self._lock = threading.Lock()
        self._closed = False

    @property
    def fileno(self) -> int:
        return self._read

    def __len__(self) -> int:
        return len(self._tasks)

    def submit(self, key, *args, task=None) -> None:
        """Judge ``judge_case(*args)`` (or ``task(*args)``) in a worker; ``key`` comes back
        from :meth:`done`."""
        try:
            future = self._executor.submit(task or judge_case, *args)
        except Exception as exc:  # a broken pool: reported as a failed task at once
            from concurrent.futures import Future

            future = Future()
            future.set_exception(exc)
        self._tasks[future] = (key, args)
        future.add_done_callback(self._wake)

    def _wake(self, future) -> None:
        with self._lock:
            if self._closed:  # the run is over (and the descriptor may be reused)
                return
            try:
                os.write(self._write, b"x")
            except OSError:
                pass

    def done(self) -> list[tuple[Any, tuple, Any, BaseException | None]]:
        """The finished tasks: ``(key, args, value, exception)`` each (once)."""
        try:
            while os.read(self._read, 4096):
                pass
        except (BlockingIOError, OSError):
            pass
        out = []
        for future in [f for f in self._tasks if f.done()]:
            key, args = self._tasks.pop(future)
            try:
                out.append((key, args, future.result(), None))
            except BaseException as exc:  # a broken pool, an unpicklable value
                out.append((key, args, None, exc))
        return out

    def close(self) -> None:
        """Cancel what has not started, end the workers (SIGTERM, then reap)."""
        processes = list((getattr(self._executor, "_processes", None) or {}).values())
        busy = bool(self._tasks)
        self._executor.shutdown(wait=not busy, cancel_futures=True)
        for proc in processes if busy else ():
            try:
                proc.terminate()
            except Exception:
                pass
        for proc in processes if busy else ():
            try:
                proc.join(TERMINATE_GRACE)
                if proc.is_alive():
                    proc.kill()
                    proc.join()
            except Exception:
                pass
        with self._lock:
            self._closed = True
            for fd in (self._read, self._write):
                try:
                    os.close(fd)
                except OSError:
                    pass
        self._tasks.clear()


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
            try:  # never conn.recv(): nothing from plug-in code is unpickled
                reply = channel.receive(conn, "load")
            except channel.ChannelError as exc:
                return f"plug-in {spec!r}: the load check failed: {channel.unreadable(str(exc))}"
            if reply is not None:
                return None if reply.get("ok") is True else reply["error"]
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
              basis_source: str = "pyscf", grid: str | None = None,
              timeout: float = DEFAULT_TIMEOUT, jobs: int = 1, reference_dir=None,
              write_references: bool = False, results_path=None,
              on_start: Callable[[str], None] | None = None,
              on_result: Callable[[CaseResult], None] | None = None,
              plugin_checked: bool = False, require_all: bool = False,
              judge_workers: int | None = None,
              reference_lookup: Callable[[Any], tuple[Any, str]] | None = None
              ) -> RunOutcome:
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

    ``ao_convention``, ``stability``, ``basis_source`` and ``grid`` (Kohn–Sham: "own"
    as ``certify --grid own``, or None) are passed to ``harness.verdict.judge.judge``.
    ``judge_workers``: how many judge worker processes (:class:`JudgePool`, processes
    that never run plug-in code) check the solutions and look the references up; 0
    judges each solution here, in the harness process, one at a time. Default: ``jobs``
    when ``jobs > 1`` (so the checks run in parallel as the plug-in calls do), else 0.
    With more than one job the largest cases (by number of basis functions) start
    first (:func:`launch_order`); results keep the input order. A case of at least
    ``PREPARE_MIN_AO`` basis functions gets its judge task when it starts
    (:func:`prepare_and_judge`: reference, integrals and packed ERIs built while the
    plug-in runs; the child's message is handed over in a file when it ends). Set
    ``$SCF_HARNESS_TIMELINE`` to a file to log every process's timeline (:func:`timeline`).
    ``reference_lookup(case) -> (reference, source)`` replaces the usual lookup
    (``reference_dir``, ``write_references``) in this process, e.g. the shared cache of
    ``harness.run.cluster``; it is not used by judge workers (give ``judge_workers=0``).

    The outcome also holds, per case name, the problems, the extracted solutions and
    the references (for ``harness.report.certificate``).

    A plug-in that raises ``harness.Unsupported`` (a ``CommandPlugin`` whose command
    exits with ``UNSUPPORTED_STATUS`` or writes ``unsupported.txt``) makes its case
    unsupported (``CaseResult.unsupported``, neither passed nor failed);
    ``require_all=True`` makes such a case fail instead (:func:`unsupported_result`).

    Raises ``PluginLoadError`` before running anything if the spec cannot be loaded
    (or the callable does not pickle): :func:`check_plugin`, in a child process, with
    ``timeout`` as its time limit; ``plugin_checked=True`` skips it (the caller ran
    :func:`check_plugin` already). Ctrl-C during that check returns an empty,
    interrupted outcome.
    """
    settings = JudgeSettings(tolerances=tolerances, ao_convention=ao_convention,
                             stability=stability, basis_source=basis_source, grid=grid)
    cases = list(cases)
    _interrupt.clear()
    jobs = max(1, int(jobs))
    path_now = list(sys.path)
    cwd = os.getcwd()
    started = time.perf_counter()
    timeline("run-start")
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
    timeline("plugin-checked")
    pending = launch_order(cases, jobs)
    timeline("ordered")
    interrupted = False
    ctx = None
    # --jobs > 1: the checks run in judge workers, not one at a time here
    workers = (jobs if jobs > 1 else 0) if judge_workers is None else int(judge_workers)
    pool = JudgePool(workers, waiting=workers) if workers > 0 and len(cases) > 1 else None
    handoffs = None  # the folder of the prepared tasks' hand-off files, made when needed
    prepared: list[_Running] = []  # runs whose judge task waits for its hand-off
    timeline("pool-made")

    def record(index: int, result: CaseResult) -> None:
        finished[index] = result
        timeline("recorded", result.name)
        _append_jsonl(results_file, result)
        if on_result is not None:
            on_result(result)

    def launch(index: int, case) -> None:
        nonlocal ctx
        if on_start is not None:
            on_start(case.name)
        timeline("launch", case.name)
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
        timeline("problem-built", case.name)
        proc.start()
        writer.close()
        timeline("child-started", case.name)
        now = time.monotonic()
        run = _Running(index, case, problem, proc, reader, now + timeout, now)
        running.append(run)
        if pool is not None:  # looked up by the judge worker
            if len(prepared) < pool.workers and _size(case) >= PREPARE_MIN_AO:
                prepare(run)
            return
        # The reference is looked up while the child works (a stored one is instant).
        try:
            if reference_lookup is not None:
                run.reference, run.reference_source = reference_lookup(case)
            else:
                run.reference, run.reference_source = _reference(case, reference_dir,
                                                                 write_references)
        except Exception as exc:
            from harness.catalogue.references import reference_error_text
            run.reference_error = reference_error_text(exc)
        references[case.name] = run.reference
        timeline("reference-loaded", case.name)

    def collect(run: _Running) -> None:
        timeline("collect", run.case.name)
        message, error = None, None
        if run.conn.poll():
            try:  # never conn.recv(): nothing from plug-in code is unpickled
                message = channel.receive(run.conn, "case")
            except channel.ChannelError as exc:
                error = channel.unreadable(str(exc))
        if message is None and error is None:
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
        conclude(run, message, error)

    def prepare(run: _Running) -> None:
        """Start the judge task of ``run`` now (:func:`prepare_and_judge`)."""
        nonlocal handoffs
        import tempfile

        if handoffs is None:
            handoffs = tempfile.mkdtemp(prefix="scf-harness-judge-")
        run.handoff = os.path.join(handoffs, f"{run.index}.msg")
        prepared.append(run)
        pool.submit(run, run.case, run.problem, settings, reference_dir, write_references,
                    require_all, run.handoff, task=prepare_and_judge)
        timeline("submitted-prepared", run.case.name)

    def hand_off(run: _Running) -> None:
        """Give a prepared task what the child sent (the harness's own decoded data) and
        the cores left free (its OpenMP threads)."""
        busy = len(running) + len(pool) - len(prepared)
        threads = max(1, jobs - busy) if not pending else 1
        _write_handoff(run.handoff, *run.concluded, threads)
        prepared.remove(run)
        timeline("handed-off", run.case.name)

    def conclude(run: _Running, message: dict | None, error: str | None) -> None:
        """Judge a case whose child has ended: in a judge worker, or here."""
        run.concluded = (message, error)
        if run.handoff is not None:
            hand_off(run)
            return
        if pool is None:
            timeline("judge-start", run.case.name)
            result = _finish(run, message, error, settings, require_all)
            timeline("judge-end", run.case.name)
            record(run.index, result)
            return
        pool.submit(run, run.case, run.problem, message, error, settings, reference_dir,
                    write_references, require_all)
        timeline("submitted", run.case.name)

    def judged() -> None:
        """Record the cases the judge workers have finished (a failed task is judged
        here instead: a judge worker that died takes no case with it)."""
        for run, args, value, exc in pool.done():
            if exc is not None and run.handoff is not None:  # a prepared task failed
                if run in prepared:
                    prepared.remove(run)
                run.handoff = None
                if run.concluded is None:  # still running: judged as usual when it ends
                    continue
                value = judge_case(run.case, run.problem, *run.concluded, settings,
                                   reference_dir, write_references, require_all)
            elif exc is not None:
                value = judge_case(*args)
            result, reference, source = value
            references[run.case.name] = reference
            record(run.index, result)

    try:
        while pending or running or (pool is not None and len(pool)):
            if _interrupt.is_set():
                raise KeyboardInterrupt
            while pending and len(running) < jobs:
                launch(*pending.pop(0))
            if pool is not None:
                judged()
            if not running and not (pool is not None and len(pool)):
                continue
            now = time.monotonic()
            wait_for = min([INTERRUPT_POLL] + [max(0.0, r.deadline - now) for r in running])
            handles = {}
            for r in running:
                handles[r.conn] = r
                handles[r.process.sentinel] = r
            waited = list(handles) + ([pool.fileno] if pool is not None else [])
            ready = multiprocessing.connection.wait(waited, timeout=wait_for)
            for r in {id(handles[h]): handles[h] for h in ready if h in handles}.values():
                collect(r)
            now = time.monotonic()
            for r in [r for r in running if now >= r.deadline]:
                if r.conn.poll():  # the result arrived just in time
                    collect(r)
                    continue
                running.remove(r)
                _stop(r, grace=TERMINATE_GRACE)
                conclude(r, None, f"timed out after {timeout:.1f} s")
    except KeyboardInterrupt:
        interrupted = True
    finally:
        _interrupt.clear()
        for r in list(running):
            running.remove(r)
            _stop(r, grace=TERMINATE_GRACE)
        if pool is not None:  # judging not finished is dropped with the run
            pool.close()
        if handoffs is not None:
            import shutil

            shutil.rmtree(handoffs, ignore_errors=True)
    ordered = tuple(finished[i] for i in sorted(finished))
    timeline("run-end")
    return RunOutcome(cases=ordered, interrupted=interrupted,
                      seconds=time.perf_counter() - started, problems=problems,
                      solutions=solutions, references=references)


def _ref_energy(run: _Running) -> float | None:
    """The reference total energy in Eh of a running case, if any."""
    return reference_energy(run.reference)
