"""Distributed runs on a Dask cluster (``dask.distributed``, the optional extra
``pip install -e ".[cluster]"``).

``certify --scheduler tcp://HOST:PORT`` submits each case as one task to a running
Dask scheduler; ``--scheduler local:N`` starts a ``LocalCluster`` of N worker processes
on 127.0.0.1 (one thread each) for the run. On the worker, a task is the ordinary
single-case run path, :func:`harness.run.runner.run_cases` with one case and one job:
the plug-in runs in its own child process with the same timeout and isolation as
on one machine (a segfaulting or hanging plug-in ends its case, not the worker), the
plug-in spec is loaded there, and the checks run in the worker, never in plug-in code.

References: a stored one (``--references`` or the bundled store, as usual) is used when
its input hash matches; otherwise the worker looks in a content-addressed cache
``<cache>/<sha256 of the inputs>.json`` (``--reference-cache DIR``; default
``$SCF_HARNESS_REFERENCE_CACHE`` or ``~/.cache/scf-harness/references``: on a real
cluster give a directory on a file system every worker shares). A missing one is
computed under an exclusive lock on ``<hash>.lock`` (``fcntl.flock``, released if its
holder dies) and written atomically (``harness.run.atomic``), so two workers never
compute the same reference at once, and no reader ever sees half a file.

Results come back as the cases finish (the ``on_result`` callback, the
``.partial.jsonl`` file); the outcome lists them in the input order. Ctrl-C cancels the
tasks not finished and keeps the finished ones. A case whose worker was lost (killed,
out of memory, its machine gone) is run once more on another worker; lost twice, it is
reported failed: ``worker lost twice: …``. Energies in Eh, times in seconds.
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import logging
import os
import re
import sys
import time
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator

from harness.contract.errors import HarnessError, PluginLoadError
from harness.contract.results import CaseResult
from harness.run.outcome import RunOutcome

#: How to install what ``--scheduler`` needs.
INSTALL_HINT = 'pip install -e ".[cluster]"'

#: Environment variable naming the default reference cache directory.
CACHE_ENV = "SCF_HARNESS_REFERENCE_CACHE"

#: Times a case is run when its worker is lost: once, then once more.
ATTEMPTS = 2

#: Seconds between looks at the interrupt flag while waiting for results.
POLL = 0.25

#: Seconds allowed to connect to a scheduler, and for a LocalCluster to start.
CONNECT_TIMEOUT = 30.0

_LOCAL = re.compile(r"^local:(\d+)$")
_TCP = re.compile(r"^(tcp|tls|ws|wss|inproc|ucx)://\S+$")


class SchedulerError(HarnessError):
    """``--scheduler`` (or ``scheduler`` in [tool.scf-harness]) cannot be used."""


def parse_scheduler(text: str, field: str = "--scheduler") -> str:
    """``"local:N"`` (N ≥ 1) or a scheduler address ``tcp://HOST:PORT``, as given;
    anything else raises :class:`SchedulerError` (one line, naming ``field``)."""
    text = str(text).strip()
    m = _LOCAL.match(text)
    if m:
        if int(m.group(1)) < 1:
            raise SchedulerError(f"local:N needs N >= 1 worker processes, got {text!r}",
                                 field=field)
        return text
    if _TCP.match(text):
        return text
    raise SchedulerError(f"expected tcp://HOST:PORT (a running Dask scheduler) or local:N "
                         f"(N worker processes on this machine), got {text!r}", field=field)


def require_dask(field: str = "--scheduler") -> None:
    """Raise :class:`SchedulerError` saying how to install dask.distributed if it is
    missing."""
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise SchedulerError(f"needs dask.distributed, which is not installed: "
                             f"{INSTALL_HINT}", field=field) from None


def default_cache_dir() -> Path:
    """``$SCF_HARNESS_REFERENCE_CACHE``, else ``~/.cache/scf-harness/references``."""
    env = os.environ.get(CACHE_ENV)
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "scf-harness" / "references"


# --------------------------------------------------------------------------- references


def cache_path(case, cache_dir) -> Path:
    """``<cache_dir>/<hex digest of the case's input hash>.json``: content-addressed
    (the name of the case is not part of it)."""
    from harness.catalogue.references import input_hash

    return Path(cache_dir) / (input_hash(case).split(":", 1)[-1] + ".json")


def _read_cached(case, path: Path):
    """The reference in ``path`` if it exists, reads and matches ``case``'s input
    hash (named for ``case``), else None."""
    import json

    from harness.catalogue.references import Reference, input_hash

    try:
        ref = Reference.from_json(json.loads(path.read_text(encoding="utf-8")))
    except (OSError, ValueError):
        return None
    if ref.input_hash != input_hash(case):
        return None
    return ref if ref.case == case.name else dataclasses.replace(ref, case=case.name)


def cached_reference(case, *, reference_dir=None, cache_dir=None, write: bool = False
                     ) -> tuple[Any, str]:
    """The reference of ``case`` and where it came from: ``"stored"`` (a matching file
    of the reference store ``reference_dir``), ``"cached"`` (the shared cache), or
    computed now (``"computed"``; ``"written"`` when ``write`` also stored it in the
    reference store). A computed reference is written to the cache atomically, under an
    exclusive lock, so concurrent workers compute it once."""
    import fcntl
    import json

    from harness.catalogue.references import (ReferenceDataError, compute_reference,
                                              load_reference, write_reference)
    from harness.run.atomic import atomic_write

    try:
        return load_reference(case, reference_dir), "stored"
    except ReferenceDataError:
        pass
    cache = Path(cache_dir) if cache_dir is not None else default_cache_dir()
    path = cache_path(case, cache)
    ref = _read_cached(case, path)
    if ref is not None:
        return ref, "cached"
    cache.mkdir(parents=True, exist_ok=True)
    with open(path.with_suffix(".lock"), "a+b") as lock:
        fcntl.flock(lock.fileno(), fcntl.LOCK_EX)  # released when closed, or at death
        try:
            ref = _read_cached(case, path)  # written while we waited for the lock
            if ref is not None:
                return ref, "cached"
            ref = compute_reference(case)
            text = json.dumps(ref.to_json(), indent=1) + "\n"
            atomic_write(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
        finally:
            fcntl.flock(lock.fileno(), fcntl.LOCK_UN)
    if write:
        write_reference(ref, reference_dir)
        return ref, "written"
    return ref, "computed"


# --------------------------------------------------------------------------- the task


@dataclasses.dataclass(frozen=True)
class TaskOptions:
    """What every case task needs besides its case and the plug-in: the judge settings,
    the convergence asked (None: default), the per-case timeout (s), where references
    are read (``reference_dir``), cached (``cache_dir``) and, with
    ``write_references``, written; the submitting process's ``sys.path`` and current
    directory (used on the worker where they exist, so a relative ``path.py:FUNCTION``
    spec and local modules resolve on a worker of this machine)."""

    tolerances: Any
    convergence: float | None = None
    ao_convention: str | None = None
    stability: str = "internal"
    timeout: float = 600.0
    reference_dir: str | None = None
    cache_dir: str | None = None
    write_references: bool = False
    path: tuple[str, ...] = ()
    cwd: str = ""
    require_all: bool = False
    basis_source: str = "pyscf"
    grid: str | None = None


def _allow_children() -> None:
    """Let this (Dask worker) process start the case's child process: Dask may run its
    workers as daemonic processes, which multiprocessing forbids to have children. The
    children end with the worker anyway: each watches its pipe to the worker and exits
    when it closes (``harness.run.runner._die_with_harness``)."""
    import multiprocessing

    proc = multiprocessing.current_process()
    config = getattr(proc, "_config", None)
    if isinstance(config, dict) and config.get("daemon"):
        config["daemon"] = False


@contextlib.contextmanager
def _submitter_context(path: Iterable[str], cwd: str):
    """The submitter's current directory and ``sys.path`` entries, where they exist on
    this worker, for the duration of one task (a worker runs one task at a time)."""
    before_cwd = os.getcwd()
    before_path = list(sys.path)
    try:
        if cwd and os.path.isdir(cwd):
            os.chdir(cwd)
        extra = [p for p in path if p not in sys.path and (p == "" or os.path.isdir(p))]
        sys.path[:0] = extra
        yield
    finally:
        sys.path[:] = before_path
        try:
            os.chdir(before_cwd)
        except OSError:
            pass


def run_case_task(case, plugin_spec, options: TaskOptions) -> dict:
    """One case on a worker: ``harness.run.runner.run_cases([case], ..., jobs=1)`` (the
    plug-in in a child process, the checks in this one), references through
    :func:`cached_reference`. Returns ``{"result", "problem", "solution",
    "reference"}``."""
    from harness.run.runner import run_cases

    _allow_children()
    lookup = functools.partial(cached_reference, reference_dir=options.reference_dir,
                               cache_dir=options.cache_dir, write=options.write_references)
    with _submitter_context(options.path, options.cwd):
        outcome = run_cases([case], plugin_spec, tolerances=options.tolerances,
                            convergence=options.convergence,
                            ao_convention=options.ao_convention, stability=options.stability,
                            timeout=options.timeout, jobs=1, plugin_checked=True,
                            judge_workers=0, reference_lookup=lambda c: lookup(c),
                            require_all=options.require_all,
                            basis_source=options.basis_source, grid=options.grid)
    if not outcome.cases:
        raise RuntimeError(f"case {case.name} was interrupted on the worker")
    return {"result": outcome.cases[0], "problem": outcome.problems.get(case.name),
            "solution": outcome.solutions.get(case.name),
            "reference": outcome.references.get(case.name)}


def check_plugin_task(plugin_spec, path: tuple[str, ...], cwd: str, timeout: float
                      ) -> str | None:
    """On a worker: None if the plug-in loads there (in a short-lived child, as
    ``harness.run.runner.check_plugin`` does), else the one-line reason."""
    from harness.run.runner import _check_plugin

    _allow_children()
    try:
        with _submitter_context(path, cwd):
            _check_plugin(plugin_spec, list(sys.path), os.getcwd(), timeout)
    except PluginLoadError as exc:
        return str(exc)
    return None


# --------------------------------------------------------------------------- the client


def _lost_reason(exc: BaseException) -> str:
    """One line: which worker was lost (a KilledWorker), or what went wrong."""
    worker = getattr(exc, "last_worker", None)
    address = getattr(worker, "address", None)
    if address:
        return f"worker {address} died while running the case"
    from harness.contract.errors import first_line

    return first_line(exc)


def _is_worker_loss(exc: BaseException) -> bool:
    from distributed.scheduler import KilledWorker

    return isinstance(exc, KilledWorker)


class ClusterRun:
    """A connection to a Dask scheduler (or a LocalCluster started for the run) that
    runs cases as tasks (:func:`run_case_task`), retries a case whose worker was lost
    once, and hands back the results as they finish."""

    def __init__(self, scheduler: str, plugin_spec, options: TaskOptions):
        require_dask()
        import dask
        import distributed

        self.scheduler = parse_scheduler(scheduler)
        self.plugin_spec = plugin_spec
        self.options = options
        self._cluster = None
        self._futures: dict[Any, int] = {}  # future -> index
        self._cases: dict[int, Any] = {}
        self._attempts: dict[int, int] = {}
        self._done: dict[int, dict] = {}
        # a lost worker is seen at once (our own retry gives the second attempt); workers
        # may start the case's child process
        dask.config.set({"distributed.scheduler.allowed-failures": 0,
                         "distributed.worker.daemon": False})
        m = _LOCAL.match(self.scheduler)
        try:
            if m:
                n = int(m.group(1))
                # each worker's share of the cores for pyscf's OpenMP threads, unless
                # the environment says otherwise
                threads = os.environ.get("OMP_NUM_THREADS") or max(1, (os.cpu_count() or 1)
                                                                  // n)
                self._cluster = distributed.LocalCluster(
                    n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1",
                    dashboard_address=":0", silence_logs=logging.CRITICAL, memory_limit=0,
                    env={"OMP_NUM_THREADS": str(threads)})
                self.client = distributed.Client(self._cluster, timeout=CONNECT_TIMEOUT)
            else:
                self.client = distributed.Client(self.scheduler, timeout=CONNECT_TIMEOUT)
        except (OSError, TimeoutError) as exc:
            self.close()
            from harness.contract.errors import first_line

            raise SchedulerError(f"cannot connect to {self.scheduler} ({first_line(exc)})",
                                 field="--scheduler") from None

    @property
    def workers(self) -> list[str]:
        """The addresses of the workers now connected."""
        return sorted(self.client.scheduler_info().get("workers", {}))

    def check_plugin(self, timeout: float) -> None:
        """Load the plug-in on every worker (in a short-lived child there); raise
        PluginLoadError naming the first worker where it does not load."""
        replies = self.client.run(check_plugin_task, self.plugin_spec, self.options.path,
                                  self.options.cwd, timeout)
        for worker, error in sorted(replies.items()):
            if error is not None:
                raise PluginLoadError(f"on worker {worker}: {error}")

    def submit(self, cases: Iterable) -> None:
        """Submit each case as one task (index = position in ``cases``)."""
        for index, case in enumerate(cases):
            self._cases[index] = case
            self._attempts[index] = 0
            self._launch(index)

    def _launch(self, index: int) -> None:
        case = self._cases[index]
        self._attempts[index] += 1
        future = self.client.submit(run_case_task, case, self.plugin_spec, self.options,
                                    key=f"scf-harness-{case.name}-{self._attempts[index]}-"
                                        f"{os.getpid()}-{time.monotonic_ns()}",
                                    pure=False, retries=0)
        self._futures[future] = index

    def _conclude(self, future, index: int) -> dict | None:
        """The payload of a finished future; None when the case was relaunched."""
        case = self._cases[index]
        try:
            return future.result()
        except Exception as exc:
            if _is_worker_loss(exc):
                if self._attempts[index] < ATTEMPTS:
                    self._launch(index)
                    return None
                error = f"worker lost twice: {_lost_reason(exc)}"
            else:
                from harness.contract.errors import first_line

                error = f"the case's task failed on the worker: {first_line(exc)}"
            return {"result": CaseResult(name=case.name, method=getattr(case, "method", ""),
                                         basis=getattr(case, "basis", ""), error=error),
                    "problem": None, "solution": None, "reference": None}

    def results(self, stop: Callable[[], bool] = lambda: False) -> Iterator[tuple[int, dict]]:
        """``(index, payload)`` of each case as it finishes (after at most one retry of a
        lost worker's case). Raises KeyboardInterrupt when ``stop()`` becomes true."""
        import distributed

        while self._futures:
            if stop():
                raise KeyboardInterrupt
            try:
                done = distributed.wait(list(self._futures), timeout=POLL,
                                        return_when="FIRST_COMPLETED").done
            except (TimeoutError, distributed.TimeoutError):
                continue
            for future in done:
                index = self._futures.pop(future)
                payload = self._conclude(future, index)
                if payload is not None:
                    self._done[index] = payload
                    yield index, payload

    def wait_for(self, index: int) -> dict:
        """The payload of case ``index`` (others finishing meanwhile are kept)."""
        if index in self._done:
            return self._done[index]
        for i, payload in self.results():
            if i == index:
                return payload
        return self._done[index]

    def cancel(self) -> None:
        """Cancel every task not finished."""
        if self._futures:
            try:
                self.client.cancel(list(self._futures), force=True)
            except Exception:
                pass
            self._futures.clear()

    def close(self) -> None:
        """Cancel what is left, disconnect, stop a LocalCluster started for the run."""
        self.cancel()
        client = getattr(self, "client", None)
        if client is not None:
            with contextlib.suppress(Exception):
                client.close(timeout=10)
        if self._cluster is not None:
            with contextlib.suppress(Exception):
                self._cluster.close(timeout=10)
            self._cluster = None


def task_options(*, tolerances, convergence=None, ao_convention=None, stability="internal",
                 timeout: float, reference_dir=None, cache_dir=None,
                 write_references: bool = False, require_all: bool = False,
                 basis_source: str = "pyscf", grid: str | None = None) -> TaskOptions:
    """:class:`TaskOptions` with this process's ``sys.path`` and current directory."""
    return TaskOptions(tolerances=tolerances, convergence=convergence,
                       ao_convention=ao_convention, stability=stability, timeout=timeout,
                       reference_dir=None if reference_dir is None else str(
                           Path(reference_dir).resolve()),
                       cache_dir=None if cache_dir is None else str(Path(cache_dir).resolve()),
                       write_references=write_references, path=tuple(sys.path),
                       cwd=os.getcwd(), require_all=require_all, basis_source=basis_source,
                       grid=grid)


def run_cases_on_cluster(cases: Iterable, plugin_spec, *, scheduler: str, tolerances,
                         convergence: float | None = None, ao_convention: str | None = None,
                         stability: str = "internal", timeout: float = 600.0,
                         reference_dir=None, reference_cache=None,
                         write_references: bool = False, results_path=None,
                         on_start: Callable[[str], None] | None = None,
                         on_result: Callable[[CaseResult], None] | None = None,
                         plugin_checked: bool = False, require_all: bool = False,
                         basis_source: str = "pyscf", grid: str | None = None) -> RunOutcome:
    """``harness.run.runner.run_cases`` on a Dask cluster: same arguments (``jobs`` is the
    cluster's workers; ``reference_cache`` the shared cache directory) and the same
    outcome, cases in input order. ``plugin_checked=False`` first loads the plug-in on
    every worker (PluginLoadError naming the worker). Ctrl-C (or
    ``runner.request_interrupt``) cancels what is not finished and returns the finished
    cases with ``interrupted=True``."""
    from harness.run import runner

    cases = list(cases)
    started = time.perf_counter()
    options = task_options(tolerances=tolerances, convergence=convergence,
                           ao_convention=ao_convention, stability=stability, timeout=timeout,
                           reference_dir=reference_dir, cache_dir=reference_cache,
                           write_references=write_references, require_all=require_all,
                           basis_source=basis_source, grid=grid)
    results_file = Path(results_path) if results_path is not None else None
    finished: dict[int, CaseResult] = {}
    problems: dict[str, Any] = {}
    solutions: dict[str, Any] = {}
    references: dict[str, Any] = {}
    interrupted = False
    runner._interrupt.clear()
    run = None
    try:
        run = ClusterRun(scheduler, plugin_spec, options)
        if not plugin_checked:
            run.check_plugin(timeout)
        if on_start is not None:
            for case in cases:
                on_start(case.name)
        run.submit(cases)
        for index, payload in run.results(stop=runner._interrupt.is_set):
            result = payload["result"]
            name = cases[index].name
            finished[index] = result
            if payload["problem"] is not None:
                problems[name] = payload["problem"]
                solutions[name] = payload["solution"]
                references[name] = payload["reference"]
            runner._append_jsonl(results_file, result)
            if on_result is not None:
                on_result(result)
    except KeyboardInterrupt:
        interrupted = True
    finally:
        runner._interrupt.clear()
        if run is not None:
            run.close()
    ordered = tuple(finished[i] for i in sorted(finished))
    return RunOutcome(cases=ordered, interrupted=interrupted,
                      seconds=time.perf_counter() - started, problems=problems,
                      solutions=solutions, references=references)
