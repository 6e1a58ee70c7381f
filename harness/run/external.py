"""Codes in any language: run an SCF program as a command, per case, through files.

:class:`CommandPlugin` turns a command template into a plug-in (``plugin(problem) ->
dict``). For each case it makes a scratch directory and writes the problem there:

``problem.json``
    Format ``"scf-harness-problem/1"`` (see :func:`problem_document`): the fields of the
    Python ``Problem`` (coordinates in **bohr**, electron counts, basis name, cartesian
    flag, method, convergence, AO labels), ``units`` and the names of the files below.
``geometry.xyz``
    The molecule in standard XYZ, coordinates in **ångström**; the comment line names
    the case and says so.
``basis.nwchem``
    The basis in NWChem's text format, exactly as the reference uses it, at full
    precision: ``Problem.basis_nwchem`` (``harness.contract.basis.nwchem_text`` of
    ``Problem.basis_set``).
``ao_order.txt``
    The AO order the harness expects, one label per line (pyscf's order).

Then it runs the command with ``cwd`` = the scratch directory, no shell, stdin closed,
stdout and stderr captured in ``stdout.log`` and ``stderr.log`` there, and reads the
solution file the code wrote (``harness.run.files``: ``.npz``, ``.json``, ``.h5``,
``.molden`` + ``.json``).

Placeholders, replaced inside each word of the template after it is split like a
shell line (``shlex.split``), by absolute paths: ``{problem}``, ``{geometry}``,
``{basis}``, ``{ao_order}``, ``{dir}`` (the scratch directory) and ``{solution}``
(``<dir>/solution.npz``, or the ``solution=`` name given). Without ``{solution}`` in
the template, the code writes ``solution.npz``, ``solution.json``, ``solution.h5``,
``solution.hdf5`` or ``solution.molden`` (+ ``solution.json`` for the energy) in its
working directory, and exactly one of them is read.

A word (not a placeholder, not an option starting with ``-``) that names an existing
file or directory relative to the directory the harness was started from is made
absolute, since the command runs in the scratch directory: ``python run_mine.py
{problem}`` runs ``run_mine.py`` of the start directory. The names of the files in
the scratch directory (``problem.json``, ``solution.npz``, ...; SCRATCH_NAMES) stay
relative. The program (the first word) is made absolute only when it is a file in
the start directory; a bare name such as ``python`` is otherwise looked up on
``PATH``. A solution path that resolves outside the scratch directory (``..``, a
symbolic link) is refused, and so is a solution file (or a Molden file's energy file)
that was not written inside the scratch directory during the run: a regular file with
more than one link (a hard link to a file elsewhere), on another device than the
scratch directory, or last modified before the command started (moved or copied in
with its old time; compared with the file system's own clock through ``stdout.log``).

A case the code cannot run (a basis, element or method it lacks) is *unsupported*,
neither passed nor failed: the command writes ``unsupported.txt`` in its working
directory (first non-empty line: the reason; any exit status) or exits with status
``77`` (UNSUPPORTED_STATUS; the reason is its last stderr line). The plug-in then
raises ``harness.Unsupported`` with that reason.

Failures raise :class:`ExternalCodeError` with one line: ``exited with status 3``,
``killed by signal SIGSEGV``, ``timed out after 5 s``, ``cannot start ...``,
``wrote no solution file ...``, or the solution file's own error, each followed by
``" | stderr: <last line(s) of stderr, at most 200 characters>"``. The longer tails
of stdout and stderr are kept on the exception for reports.
"""

from __future__ import annotations

import json
import os
import re
import shlex
import shutil
import signal
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Any

from harness.contract.errors import HarnessError, Unsupported
from harness.contract.units import BOHR_IN_ANGSTROM

#: Format tag of ``problem.json``.
PROBLEM_FORMAT = "scf-harness-problem/1"
#: File names written into each scratch directory.
PROBLEM_FILE = "problem.json"
GEOMETRY_FILE = "geometry.xyz"
BASIS_FILE = "basis.nwchem"
AO_ORDER_FILE = "ao_order.txt"
INITIAL_DENSITY_FILE = "initial_density.npy"
#: Kohn–Sham cases: the pinned grid, ``coords`` (ngrid, 3) bohr and ``weights`` (ngrid,).
GRID_FILE = "grid.npz"
STDOUT_FILE = "stdout.log"
STDERR_FILE = "stderr.log"
#: A command that cannot run a case (a basis, element or method it does not have) says
#: so by writing this file in its working directory, its first non-empty line the
#: reason, or by exiting with UNSUPPORTED_STATUS (the reason: its last stderr line). The
#: case is then unsupported (``harness.Unsupported``), neither passed nor failed.
UNSUPPORTED_FILE = "unsupported.txt"
#: Exit status meaning "this case is unsupported": 77, the "skipped" status of the GNU
#: Automake test driver (so a test script may already use it); not 1-3, which programs
#: use for errors (the bundled C example exits 3 when it does not converge).
UNSUPPORTED_STATUS = 77
#: Most bytes of ``unsupported.txt`` read.
UNSUPPORTED_READ = 4096
#: The solution file ``{solution}`` names unless another name is given.
DEFAULT_SOLUTION = "solution.npz"
#: Names looked for when the template has no ``{solution}`` (a Molden file first: its
#: ``solution.json`` then holds the energy).
SOLUTION_CANDIDATES = ("solution.molden", "solution.npz", "solution.json", "solution.h5",
                       "solution.hdf5")
#: Files of the scratch directory a command may name relatively (they are never made
#: absolute against the start directory).
SCRATCH_NAMES = (PROBLEM_FILE, GEOMETRY_FILE, BASIS_FILE, AO_ORDER_FILE, INITIAL_DENSITY_FILE,
                 GRID_FILE,
                 STDOUT_FILE, STDERR_FILE, UNSUPPORTED_FILE) + SOLUTION_CANDIDATES
#: Placeholders a template may use.
PLACEHOLDERS = ("problem", "solution", "geometry", "basis", "ao_order", "dir")
#: Longest stderr excerpt put into an error message (characters).
MESSAGE_TAIL = 200
#: How much of stdout and stderr is kept on the exception (characters).
KEPT_TAIL = 4000

_PLACEHOLDER = re.compile(r"\{([A-Za-z_][A-Za-z0-9_]*)\}")


class CommandSetupError(HarnessError):
    """The command plug-in cannot be set up: a bad template (``--command``), scratch
    directory (``--scratch``), timeout or solution name. Raised at construction."""


class ExternalCodeError(HarnessError):
    """The external code failed on one case; ``str()`` is one line.

    Attributes: ``case`` (the case name), ``reason`` (the message without the stderr
    excerpt), ``returncode`` (None if it did not finish), ``stdout_tail`` and
    ``stderr_tail`` (the last KEPT_TAIL characters), ``scratch`` (the directory; it
    is removed afterwards unless the plug-in keeps it).
    """

    #: The message names the external code's failure; a harness frame would add nothing.
    names_its_source = True

    def __init__(self, reason: str, *, case: str | None = None, stderr_tail: str = "",
                 stdout_tail: str = "", returncode: int | None = None,
                 scratch: str | None = None):
        super().__init__(f"{reason} | stderr: {stderr_excerpt(stderr_tail)}")
        self.case = case
        self.reason = reason
        self.returncode = returncode
        self.stdout_tail = stdout_tail
        self.stderr_tail = stderr_tail
        self.scratch = scratch


def stderr_excerpt(text: str, limit: int = MESSAGE_TAIL) -> str:
    """The last non-empty lines of ``text`` joined by `` / ``, at most ``limit``
    characters (a longer last line keeps its end); ``(empty)`` if there are none."""
    lines = [" ".join(line.split()) for line in text.splitlines()]
    lines = [line for line in lines if line]
    if not lines:
        return "(empty)"
    kept: list[str] = []
    for line in reversed(lines):
        candidate = " / ".join([line, *kept])
        if len(candidate) > limit:
            break
        kept.insert(0, line)
    if not kept:
        return "…" + lines[-1][-(limit - 1):]
    return " / ".join(kept)


# --------------------------------------------------------------------------- inputs


def problem_document(problem, *, solution: str = DEFAULT_SOLUTION) -> dict[str, Any]:
    """The content of ``problem.json`` for ``problem`` (version PROBLEM_FORMAT).

    Keys: ``format``, ``name``, ``numbers``, ``coordinates_bohr`` (natm × 3, bohr),
    ``charge``, ``multiplicity``, ``n_electrons``, ``n_alpha``, ``n_beta``, ``basis``
    (the pyscf name), ``cartesian``, ``method``, ``convergence`` (max element of the
    Löwdin-basis commutator X(FPS − SPF)X to reach), ``nao``, ``ao_labels``, ``units``
    (``{"length": "bohr", "energy": "hartree"}``) and ``files`` (names relative to this
    file's directory: geometry, basis, ao_order, solution, and initial_density when the
    problem has one). Floats are written at full precision.

    Kohn–Sham problems add ``functional`` (libxc name as pyscf spells it) and ``grid``
    (``{"description": ..., "hash": ..., "points": ngrid}``), and ``files.grid`` names
    ``grid.npz`` (arrays ``coords`` (ngrid, 3) in bohr and ``weights`` (ngrid,)).
    """
    files = {"geometry": GEOMETRY_FILE, "basis": BASIS_FILE, "ao_order": AO_ORDER_FILE,
             "solution": solution}
    if problem.initial_density is not None:
        files["initial_density"] = INITIAL_DENSITY_FILE
    ks = {}
    if getattr(problem, "functional", None):
        files["grid"] = GRID_FILE
        ks = {"functional": problem.functional,
              "grid": {"description": dict(problem.grid.description),
                       "hash": problem.grid.hash, "points": int(problem.grid.size)}}
    return {
        "format": PROBLEM_FORMAT,
        "name": problem.name,
        "numbers": [int(z) for z in problem.numbers],
        "coordinates_bohr": [[float(x) for x in row] for row in problem.coordinates],
        "charge": int(problem.charge),
        "multiplicity": int(problem.multiplicity),
        "n_electrons": int(problem.n_electrons),
        "n_alpha": int(problem.n_alpha),
        "n_beta": int(problem.n_beta),
        "basis": problem.basis,
        "cartesian": bool(problem.cartesian),
        "method": problem.method,
        "convergence": float(problem.convergence),
        "nao": int(problem.nao),
        "ao_labels": [" ".join(label.split()) for label in problem.ao_labels],
        "units": {"length": "bohr", "energy": "hartree"},
        "files": files,
        **ks,
    }


def geometry_xyz(problem) -> str:
    """Standard XYZ text of the molecule, coordinates in ångström (Å = bohr × a0)."""
    from harness.backend.mole import element_symbols

    symbols = element_symbols()
    lines = [str(len(problem.numbers)),
             f"{problem.name} units=angstrom (coordinates in bohr are in {PROBLEM_FILE})"]
    for z, xyz in zip(problem.numbers, problem.coordinates):
        x, y, w = (float(v) * BOHR_IN_ANGSTROM for v in xyz)
        lines.append(f"{symbols[int(z)]:<2} {x:20.12f} {y:20.12f} {w:20.12f}")
    return "\n".join(lines) + "\n"


def write_inputs(problem, directory, *, solution: str = DEFAULT_SOLUTION) -> dict[str, Path]:
    """Write problem.json, geometry.xyz, basis.nwchem, ao_order.txt (and
    initial_density.npy) into ``directory``; return their absolute paths by
    placeholder name (``problem``, ``geometry``, ``basis``, ``ao_order``, ``dir``)."""
    import numpy as np

    directory = Path(directory).resolve()
    doc = problem_document(problem, solution=solution)
    (directory / PROBLEM_FILE).write_text(json.dumps(doc, indent=1) + "\n", encoding="utf-8")
    (directory / GEOMETRY_FILE).write_text(geometry_xyz(problem), encoding="utf-8")
    (directory / BASIS_FILE).write_text(problem.basis_nwchem, encoding="utf-8")
    (directory / AO_ORDER_FILE).write_text("\n".join(doc["ao_labels"]) + "\n", encoding="utf-8")
    if problem.initial_density is not None:
        np.save(directory / INITIAL_DENSITY_FILE, np.asarray(problem.initial_density))
    if getattr(problem, "grid", None) is not None:
        np.savez(directory / GRID_FILE, coords=np.asarray(problem.grid.coords),
                 weights=np.asarray(problem.grid.weights))
    return {"problem": directory / PROBLEM_FILE, "geometry": directory / GEOMETRY_FILE,
            "basis": directory / BASIS_FILE, "ao_order": directory / AO_ORDER_FILE,
            "dir": directory}


# --------------------------------------------------------------------------- running


def _within(path: Path, root: Path) -> bool:
    try:
        path.resolve().relative_to(root.resolve())
    except ValueError:
        return False
    return True


def _tail(path: Path, limit: int = KEPT_TAIL) -> str:
    try:
        with open(path, "rb") as fh:
            fh.seek(0, os.SEEK_END)
            size = fh.tell()
            fh.seek(max(0, size - 4 * limit))
            data = fh.read()
    except OSError:
        return ""
    return data.decode("utf-8", errors="replace")[-limit:]


def _parent_death_hook():
    """A ``preexec_fn`` that makes the kernel SIGKILL the command when the process that
    started it dies (Linux ``prctl(PR_SET_PDEATHSIG)``), so a case killed by the
    harness's timeout leaves no program running. None where unavailable."""
    if not sys.platform.startswith("linux"):
        return None
    try:
        import ctypes

        prctl = ctypes.CDLL(None, use_errno=True).prctl
    except (OSError, AttributeError):
        return None
    parent = os.getpid()

    def hook():
        prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG = 1
        if os.getppid() != parent:  # the parent died before prctl took effect
            os._exit(1)

    return hook


def _signal_name(number: int) -> str:
    try:
        return signal.Signals(number).name
    except ValueError:
        return f"signal {number}"


class CommandPlugin:
    """A plug-in that runs an external program per case (see the module docstring).

    ``template``: the command line with placeholders, e.g.
    ``"./my_scf --in {problem} --out {solution}"``. ``scratch_root``: where the
    per-case directories are made (default: the system's temporary directory).
    ``keep``: leave them in place (default: remove them after reading the solution).
    ``timeout``: seconds for the command (None: none of its own; the harness's
    per-case timeout still applies). ``solution``: the file name ``{solution}``
    stands for (default ``solution.npz``; ``.json``, ``.h5``, ``.molden`` work too).

    Calling it with a ``Problem`` (bohr) returns the solution mapping (Eh), or raises
    :class:`ExternalCodeError`, or ``harness.Unsupported`` when the command says it
    cannot run the case (UNSUPPORTED_FILE or UNSUPPORTED_STATUS). It pickles (plain attributes), so it can be sent to
    the harness's child process. Raises :class:`CommandSetupError` (a
    ``HarnessError``) at construction for a bad template (empty, no program, unknown
    placeholder), a ``scratch_root`` that is not a directory or cannot be created, a
    non-positive timeout or a solution name outside the scratch directory.
    """

    def __init__(self, template: str, *, scratch_root=None, keep: bool = False,
                 timeout: float | None = None, solution: str | None = None):
        self.template = str(template)
        try:
            words = shlex.split(self.template)
        except ValueError as exc:
            raise CommandSetupError(f"cannot split the command {self.template!r}: {exc}",
                                    field="--command") from None
        if not words:
            raise CommandSetupError("the command is empty", field="--command")
        if not words[0].strip():
            raise CommandSetupError(f"the command {self.template!r} names no program (its "
                                    f"first word is empty)", field="--command")
        unknown = sorted({m.group(1) for w in words for m in _PLACEHOLDER.finditer(w)}
                         - set(PLACEHOLDERS))
        if unknown:
            raise CommandSetupError(f"unknown placeholder {{{unknown[0]}}} (known: "
                                    f"{', '.join('{' + p + '}' for p in PLACEHOLDERS)})",
                                    field="--command")
        if timeout is not None and not timeout > 0:
            raise CommandSetupError(f"timeout must be positive, got {timeout!r}",
                                    field="timeout")
        self.names_solution = any("{solution}" in w for w in words) or solution is not None
        self.solution = solution if solution is not None else DEFAULT_SOLUTION
        if Path(self.solution).is_absolute() or ".." in Path(self.solution).parts:
            raise CommandSetupError(f"the solution file {self.solution!r} must be a plain "
                                    f"name inside the scratch directory", field="solution")
        self.base_dir = os.getcwd()
        self.words = [self._absolute(w, program=(k == 0)) for k, w in enumerate(words)]
        self.scratch_root = _scratch_root(scratch_root) if scratch_root is not None else None
        self.keep = bool(keep)
        self.timeout = float(timeout) if timeout is not None else None

    def _absolute(self, word: str, *, program: bool = False) -> str:
        """``word`` made absolute when it names an existing file or directory relative
        to the start directory (the program: a file only, else PATH finds it). The
        names of the files in the scratch directory (SCRATCH_NAMES, the solution name)
        stay relative: they name the files the command finds in its working directory."""
        if not word or word.startswith("/") or _PLACEHOLDER.search(word) \
                or word.startswith("-"):
            return word
        if os.path.normpath(word) in SCRATCH_NAMES + (os.path.normpath(self.solution),):
            return word
        candidate = Path(self.base_dir, word)
        try:
            found = candidate.is_file() if program else candidate.exists()
        except OSError:  # e.g. a word too long to be a file name
            return word
        return str(candidate.resolve()) if found else word

    def __repr__(self) -> str:
        return f"CommandPlugin({self.template!r})"

    def argv(self, paths: dict[str, Path]) -> list[str]:
        """The command's words with the placeholders replaced by ``paths``."""
        values = {k: str(v) for k, v in paths.items()}
        return [_PLACEHOLDER.sub(lambda m: values[m.group(1)], w) for w in self.words]

    def __call__(self, problem) -> dict[str, Any]:
        try:
            if self.scratch_root is not None:
                Path(self.scratch_root).mkdir(parents=True, exist_ok=True)
            scratch = Path(tempfile.mkdtemp(prefix=f"{problem.name}-", dir=self.scratch_root))
        except OSError as exc:  # removed or made read-only since construction
            raise ExternalCodeError(f"cannot make a scratch directory in "
                                    f"{self.scratch_root or tempfile.gettempdir()}: "
                                    f"{exc.strerror or type(exc).__name__}",
                                    case=problem.name) from None
        try:
            return self._run(problem, scratch.resolve())
        finally:
            if not self.keep:
                shutil.rmtree(scratch, ignore_errors=True)

    def _run(self, problem, scratch: Path) -> dict[str, Any]:
        from harness.run.files import SolutionFileError, read_solution

        paths = write_inputs(problem, scratch, solution=self.solution)
        solution_path = scratch / self.solution
        if not _within(solution_path, scratch):
            raise ExternalCodeError(f"solution path {self.solution!r} escapes the scratch "
                                    f"directory", case=problem.name, scratch=str(scratch))
        paths["solution"] = solution_path
        argv = self.argv(paths)

        def fail(reason: str, returncode: int | None = None):
            return ExternalCodeError(reason, case=problem.name, returncode=returncode,
                                     stderr_tail=_tail(scratch / STDERR_FILE),
                                     stdout_tail=_tail(scratch / STDOUT_FILE),
                                     scratch=str(scratch))

        program = argv[0]
        if "/" not in program and shutil.which(program) is None:
            raise fail(f"cannot start {program!r}: not found on PATH")
        with open(scratch / STDOUT_FILE, "wb") as out, open(scratch / STDERR_FILE, "wb") as err:
            started = os.fstat(out.fileno())  # the file system's time, before the run
            try:
                proc = subprocess.Popen(argv, cwd=scratch, stdin=subprocess.DEVNULL,
                                        stdout=out, stderr=err, start_new_session=True,
                                        preexec_fn=_parent_death_hook())
            except OSError as exc:
                raise fail(f"cannot start {program!r}: {exc.strerror or exc}") from None
            try:
                code = proc.wait(timeout=self.timeout)
            except subprocess.TimeoutExpired:
                _kill_group(proc)
                raise fail(f"timed out after {self.timeout:g} s") from None
            except BaseException:  # interrupted: leave nothing running
                _kill_group(proc)
                raise
            _kill_group(proc)  # what the command left running in its group ends with it
        if code < 0:
            raise fail(f"killed by signal {_signal_name(-code)}", code)
        reason = _unsupported_reason(scratch, code)
        if reason is not None:
            raise Unsupported(reason)
        if code > 0:
            raise fail(f"exited with status {code}", code)
        found = self._solution_file(scratch, fail)
        if not _within(found, scratch):
            raise fail(f"solution path {found.name} escapes the scratch directory "
                       f"(it resolves to {found.resolve()})")
        for written in (found, found.with_suffix(".json")) if found.suffix == ".molden" \
                else (found,):
            problem_text = _not_written_here(written, started)
            if problem_text is not None:
                raise fail(f"solution file {written.name} {problem_text}")
        try:
            return read_solution(found, problem=problem)
        except SolutionFileError as exc:
            raise fail(str(exc)) from None

    def _solution_file(self, scratch: Path, fail) -> Path:
        if self.names_solution:
            path = scratch / self.solution
            if not (path.exists() or path.is_symlink()):
                raise fail(f"wrote no solution file (expected {self.solution})", 0)
            return path
        present = [scratch / n for n in SOLUTION_CANDIDATES
                   if (scratch / n).exists() or (scratch / n).is_symlink()]
        if present and present[0].name == "solution.molden":
            return present[0]  # its solution.json is the energy file
        if not present:
            raise fail(f"wrote no solution file (expected one of "
                       f"{', '.join(SOLUTION_CANDIDATES)} in its working directory)", 0)
        if len(present) > 1:
            raise fail(f"wrote several solution files ({', '.join(p.name for p in present)}): "
                       f"write one", 0)
        return present[0]


def _unsupported_reason(scratch: Path, code: int) -> str | None:
    """The reason a command that ended with status ``code`` gave for not running its
    case, or None when it did not say so: the first non-empty line of UNSUPPORTED_FILE
    (a regular file, not a link; whatever the status), else, for UNSUPPORTED_STATUS, the
    last line of its stderr."""
    path = scratch / UNSUPPORTED_FILE
    if path.is_file() and not path.is_symlink():
        try:
            with open(path, "rb") as fh:
                text = fh.read(UNSUPPORTED_READ).decode("utf-8", errors="replace")
        except OSError:
            text = ""
        lines = [line.strip() for line in text.splitlines() if line.strip()]
        return lines[0] if lines else f"no reason given ({UNSUPPORTED_FILE} is empty)"
    if code == UNSUPPORTED_STATUS:
        lines = [line.strip() for line in _tail(scratch / STDERR_FILE).splitlines()
                 if line.strip()]
        return lines[-1] if lines else (f"exited with status {UNSUPPORTED_STATUS} "
                                        f"(unsupported) and gave no reason on stderr")
    return None


def _not_written_here(path: Path, started: os.stat_result) -> str | None:
    """Why the regular file ``path`` was not written in the scratch directory during the
    run (``started``: the stat of a file made there just before it), or None."""
    import stat as st

    try:
        info = os.stat(path)
    except OSError:
        return None  # absent or unreadable: the reader says so
    if not st.S_ISREG(info.st_mode):
        return None  # a directory etc.: the reader says so
    if info.st_nlink > 1:
        return (f"has {info.st_nlink} links (a hard link to a file elsewhere?): refused; "
                f"write the file itself")
    if info.st_dev != started.st_dev:
        return "is on another device than the scratch directory: refused"
    if info.st_mtime_ns < started.st_mtime_ns:
        return (f"was not written during the run (last modified "
                f"{(started.st_mtime_ns - info.st_mtime_ns) / 1e9:.3g} s before it started): "
                f"refused")
    return None


def _scratch_root(root) -> str:
    """``root`` as a string, made if missing; :class:`CommandSetupError` (field
    ``--scratch``) if it exists and is not a directory, or cannot be made."""
    path = Path(root)
    if path.exists() and not path.is_dir():
        raise CommandSetupError(f"{root} exists and is not a directory", field="--scratch")
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise CommandSetupError(f"cannot create the directory {root} "
                                f"({exc.strerror or type(exc).__name__})",
                                field="--scratch") from None
    if not os.access(path, os.W_OK | os.X_OK):
        raise CommandSetupError(f"cannot write in the directory {root}", field="--scratch")
    return str(root)


def _kill_group(proc: subprocess.Popen) -> None:
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass
    try:
        proc.wait(timeout=5)
    except subprocess.TimeoutExpired:  # pragma: no cover - unkillable
        pass
