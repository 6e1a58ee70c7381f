"""An accelerator given as ``MODULE:NAME`` runs in its own process, behind the closed channel.

``scf-harness bench MODULE:ACCELERATOR`` (:func:`harness.bench.runs.run_bench` with a
spec string) never imports the accelerator in the harness's process. A child started
like a case plug-in's (multiprocessing's "forkserver" context, its own session and
process group, ended with the harness) loads the spec and hosts the accelerator objects;
the harness-owned SCF loop stays in the harness process and calls them through a
:class:`Proxy`, one request and one reply per ``reset``/``step`` call:

* harness → child: the call and its inputs (the Problem, the frozen Iterate), written by
  the harness;
* child → harness: one message of the channel's kind ``"accelerator"``
  (:mod:`harness.run.channel`: a JSON header plus raw float64 buffers, never a pickle),
  checked on arrival (:func:`_check_reply`): a name, a declared kind, ``ok``, a float64
  array of the iterate's shape, or a one-line error. The returned matrix then passes the
  loop's own checks (finite, symmetric) and every energy, measure and Fock-build count is
  computed here with the harness's kernels, so nothing the accelerator reports about the
  state is trusted.

What the child does wrong fails that run (or property) with a one-line reason naming the
call, and the bench goes on with a new child: a message that is not the channel's
(forged bytes, a pickle — nothing is unpickled), the process ending without a reply
(``os._exit``, a signal), killing its own parent (the fork server), or a call longer
than the call limit (the child's whole group is killed; the wait is the harness's, not
a signal inside the child). After every case the child's process group is killed, so
nothing it started (a detached ``sleep``) outlives the case.

An accelerator given as a Python object (the API, tests) already lives in the caller's
process and is called there, as before.
"""

from __future__ import annotations

import multiprocessing.connection
import os
import re
import sys
import time

import numpy as np

from harness.bench import accelerators as acc
from harness.contract.errors import PluginLoadError, first_line
from harness.run import channel

#: The channel kind of the child's replies.
KIND = "accelerator"
#: Seconds the child gets to load the spec and reply (the import check's default).
LOAD_TIMEOUT = 60.0
#: Longest one-line text accepted in a reply (characters).
MAX_TEXT = 2000
#: Seconds the harness waits for a call when no call limit is set: the largest allowed.
NO_LIMIT = acc.MAX_CALL_LIMIT

_REPLY_KEYS = {"name": str, "returns": str, "ok": bool, "array": np.ndarray,
               "protocol": str, "error": str, "fatal": str}


def _check_reply(message: dict) -> None:
    """A reply is one key of _REPLY_KEYS (``name`` and ``returns`` together at load),
    each value of its type: texts at most MAX_TEXT characters, ``ok`` true, ``array`` a
    float64 array of at most 3 axes."""
    keys = set(message)
    if not keys or not keys <= set(_REPLY_KEYS) or (len(keys) > 1 and keys != {"name",
                                                                            "returns"}):
        raise channel.ChannelError(f"reply keys {sorted(keys)[:4]} are not one of "
                                   f"{', '.join(_REPLY_KEYS)}")
    for key, value in message.items():
        if not isinstance(value, _REPLY_KEYS[key]):
            raise channel.ChannelError(f"reply {key!r} holds a {type(value).__name__}")
        if isinstance(value, str) and len(value) > MAX_TEXT:
            raise channel.ChannelError(f"reply {key!r} longer than {MAX_TEXT} characters")
    if message.get("ok", True) is not True:
        raise channel.ChannelError("'ok' is not true")
    a = message.get("array")
    if a is not None and (a.dtype != np.float64 or a.ndim > 3):
        raise channel.ChannelError(f"array of dtype {a.dtype} and {a.ndim} axes, expected "
                                   f"float64 with at most 3")


channel.KINDS.setdefault(KIND, _check_reply)


class AcceleratorProcessFailed(Exception):
    """The accelerator's process broke the channel: sent something unreadable, ended
    without replying, or killed its parent. The message says which call and how."""


def _remote(text: str) -> Exception:
    """An exception whose ``first_line`` is ``text`` ("<Type>: <message>" from the child),
    so a run fails with the same reason as when the accelerator runs in-process."""
    name, sep, rest = text.partition(": ")
    if not (sep and re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]{0,60}", name)):
        return AcceleratorProcessFailed(text)
    return type(name, (Exception,), {"__module__": "accelerator"})(rest)


# --------------------------------------------------------------------------- child side


def _reply(conn, message: dict) -> None:
    try:
        channel.send(conn, KIND, message)
    except channel.ChannelError as exc:
        channel.send(conn, KIND, {"protocol": f"cannot send the reply: {exc}"})


def _child_main(conn, watch, spec: str, path: list[str], cwd: str) -> None:
    """The accelerator's process: load ``spec``, reply its name and kind, then serve
    ``("new",)``, ``("reset", problem)`` and ``("step", iterate, kind)`` requests until
    the harness closes the pipe. ``watch`` is a pipe the harness never writes: it becomes
    readable when the harness ends, and then this process ends with its group."""
    from harness.run.runner import PARENT_KILLED, _enter

    _enter(watch, path, cwd)  # Ctrl-C is the harness's, own group, end with the harness
    parent = os.getppid()
    try:
        name, factory = acc.load_accelerator(spec)
        _reply(conn, {"name": name, "returns": "fock"})
    except BaseException as exc:  # anything the import or the load check raises
        text = str(exc) if isinstance(exc, PluginLoadError) else first_line(exc)
        _reply(conn, {"error": " ".join(text.split())[:MAX_TEXT]})
        os._exit(0)
    current = None
    while True:
        try:
            request = conn.recv()  # written by the harness (trusted direction)
        except (EOFError, OSError):
            os._exit(0)
        op = request[0]
        try:
            if op == "new":
                current = factory()
                reply = {"returns": acc.declared_returns(current),
                         "name": acc.accelerator_name(current)}
            elif op == "reset":
                current.reset(request[1])
                reply = {"ok": True}
            else:
                it, kind = request[1], request[2]
                out = current.step(it)
                reply = {"array": acc._as_matrix(out, it.fock.shape, kind)}
        except acc.ProtocolError as exc:
            reply = {"protocol": " ".join(str(exc).split())[:MAX_TEXT]}
        except BaseException as exc:  # the accelerator's own code, sys.exit included
            reply = {"error": first_line(exc)[:MAX_TEXT]}
        if os.getppid() != parent:
            _reply(conn, {"fatal": PARENT_KILLED.replace("plug-in", "accelerator")})
            os._exit(1)
        _reply(conn, reply)


# --------------------------------------------------------------------------- harness side


class Isolated:
    """The accelerator of ``spec`` in a child process (module docstring). :meth:`load`
    starts it and returns the name shown; :meth:`factory` makes a new accelerator in the
    child (starting a new child if the last one ended) and returns its :class:`Proxy`;
    :meth:`close` ends the child and its whole process group."""

    def __init__(self, spec: str, call_limit: float | None = acc.ACCELERATOR_CALL_LIMIT):
        self.spec = spec
        self.call_limit = call_limit or None
        self.proc = None
        self.conn = None

    # -- process
    def _start(self, timeout: float = LOAD_TIMEOUT) -> dict:
        from harness.run.runner import _context

        ctx = _context()
        reader, writer = ctx.Pipe(duplex=True)
        watch_r, watch_w = ctx.Pipe(duplex=False)
        self.proc = ctx.Process(target=_child_main, name="scf-harness:accelerator",
                                args=(writer, watch_r, self.spec, list(sys.path),
                                      os.getcwd()), daemon=True)
        self.proc.start()
        writer.close()
        watch_r.close()
        self.conn, self.watch = reader, watch_w
        reply = self._await("loading it", timeout, f"loading it took longer than "
                                                   f"{timeout:g} s")
        if "error" in reply:
            self.close()
            raise PluginLoadError(reply["error"])
        return reply

    def load(self) -> str:
        """Start the child; the accelerator's name, or PluginLoadError (one line)."""
        try:
            return self._start()["name"]
        except (acc.AcceleratorTimeout, AcceleratorProcessFailed) as exc:
            raise PluginLoadError(f"accelerator {self.spec!r}: {exc}") from None

    def close(self) -> None:
        """End the child (SIGKILL) and everything left in its process group."""
        from harness.run.runner import _end_process

        if self.conn is not None:
            self.conn.close()
            self.watch.close()
            self.conn = self.watch = None
        if self.proc is not None:
            if self.proc.pid is not None:
                _end_process(self.proc, 0)
            self.proc = None

    def _await(self, what: str, seconds: float, late: str) -> dict:
        conn, proc = self.conn, self.proc
        deadline = time.monotonic() + seconds
        while True:
            left = deadline - time.monotonic()
            ready = multiprocessing.connection.wait([conn, proc.sentinel],
                                                    timeout=max(0.0, min(0.25, left)))
            if conn in ready or conn.poll():
                try:  # never conn.recv(): nothing from the accelerator is unpickled
                    reply = channel.receive(conn, KIND)
                except channel.ChannelError as exc:
                    self.close()
                    raise AcceleratorProcessFailed(
                        f"{what}: the accelerator's process sent a message the harness "
                        f"cannot read ({exc})") from None
                if reply is None:
                    break
                if "fatal" in reply:
                    self.close()
                    raise AcceleratorProcessFailed(f"{what}: {reply['fatal']}")
                return reply
            if proc.sentinel in ready:
                break
            if left <= 0:
                self.close()
                raise acc.AcceleratorTimeout(late)
        proc.join(1.0)
        from harness.run.runner import PARENT_KILLED, _ended, _fork_server_died

        code = _ended(proc.exitcode)
        if proc.exitcode == 255 and _fork_server_died():
            self.close()
            raise AcceleratorProcessFailed(
                f"{what}: {PARENT_KILLED.replace('plug-in', 'accelerator')}")
        self.close()
        raise AcceleratorProcessFailed(f"{what}: the accelerator's process ended ({code}) "
                                       f"without replying")

    def call(self, what: str, request: tuple) -> dict:
        """Send ``request``, await the reply within the call limit; raise what the
        accelerator raised (same one-line reason), ProtocolError, AcceleratorTimeout or
        AcceleratorProcessFailed."""
        if self.proc is None:
            self._start()
        try:
            self.conn.send(request)
        except (OSError, ValueError):
            self.close()
            raise AcceleratorProcessFailed(f"{what}: the accelerator's process is gone") \
                from None
        limit = self.call_limit or NO_LIMIT
        reply = self._await(what, limit, f"{what} took longer than {limit:g} s")
        if "error" in reply:
            raise _remote(reply["error"])
        if "protocol" in reply:
            raise acc.ProtocolError(reply["protocol"])
        return reply

    def factory(self) -> "Proxy":
        reply = self.call("creating it", ("new",))
        if "returns" not in reply:
            self.close()
            raise AcceleratorProcessFailed("creating it: the reply has no declared kind")
        if reply["returns"] not in acc.RETURNS:
            raise acc.ProtocolError(f"declares returns={reply['returns'][:40]!r}, expected "
                                    f"'fock' or 'density'")
        return Proxy(self, reply["returns"], reply.get("name", ""))


class Proxy:
    """The harness-side stand-in for one accelerator object in the child: ``returns``
    and ``name`` as the child declared them, ``reset``/``step`` as requests."""

    def __init__(self, owner: Isolated, returns: str, name: str):
        self._owner = owner
        self.returns = returns
        self.name = name

    def reset(self, problem):
        if self._owner.call("reset", ("reset", problem)).get("ok") is not True:
            self._owner.close()  # out of turn: this child's replies cannot be trusted
            raise AcceleratorProcessFailed("reset: the reply is not 'ok'")

    def step(self, it):
        reply = self._owner.call("step", ("step", it, self.returns))
        a = reply.get("array")
        if a is None:
            self._owner.close()
            raise AcceleratorProcessFailed("step: the reply holds no array")
        return a
