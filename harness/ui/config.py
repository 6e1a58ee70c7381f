"""The ``[tool.scf-harness]`` table of a user's ``pyproject.toml``, and how flags override it.

Used by the pytest plug-in (``harness.ui.pytest_plugin``). The file is never looked up from
the current directory: the caller names it (pytest passes its ``inipath`` when that is a
``pyproject.toml``, else ``rootpath / "pyproject.toml"``; see :func:`pyproject_for`).

Keys (each has exactly the meaning of the ``--scf-…`` flag of the same name; a flag wins
over its key, and ``--scf-tol`` wins per check over ``tolerances``)::

    [tool.scf-harness]
    plugin = "mypkg.scf:solve"         # MODULE:FUNCTION or path/to/file.py:FUNCTION
    suite = "smoke"                    # a catalogue suite, or a list of them
    cases_file = "tests/my-cases.toml" # your own [[case]] tables (relative to this file)
    tolerances = { stationarity = 1e-5, "reference-energy" = 1e-5 }   # absolute: Eh, ...
    timeout = 600                      # seconds per case (the plug-in call)
    convergence = 1e-6                 # stationarity asked of the plug-in (atomic units)
    stability = "internal"             # internal | external | off (as certify --stability)
    require_all = false                # true: a case the code reports unsupported fails
    scheduler = "local:2"              # a Dask cluster: tcp://HOST:PORT or local:N (as
                                       # certify --scheduler; needs the cluster extra)
    basis_source = "pyscf"             # pyscf | bse (as certify --basis-source)
    grid = "pinned"                    # pinned | own (Kohn–Sham; as certify --grid)

This module imports only the standard library, ``harness.contract.errors``,
``harness.contract.defaults`` and, when needed, ``harness.checks.tolerances`` (all light),
so that reading the table costs nothing heavy.
Units: tolerances are absolute (Eh for energies), timeout in seconds, convergence is the
dimensionless largest element of X(FPS − SPF)X in Eh-based atomic units.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import shlex
import tomllib
from pathlib import Path
from typing import Any, Mapping, Sequence

from harness.contract import defaults as _defaults
from harness.contract.errors import HarnessError

#: Name of the table in pyproject.toml.
TABLE = "tool.scf-harness"

#: Suite run when none is named: the same default as ``scf-harness certify``
#: (``harness.ui.cli.DEFAULT_SUITE``; a test keeps the two equal).
DEFAULT_SUITE = "smoke"

#: Seconds allowed for the plug-in on one case, the stationarity asked of a plug-in when
#: none is configured, the accepted values of ``stability`` and its default: the one
#: definition of each in ``harness.contract.defaults`` (standard library only).
DEFAULT_TIMEOUT = _defaults.DEFAULT_TIMEOUT
DEFAULT_CONVERGENCE = _defaults.DEFAULT_CONVERGENCE
STABILITY_CHOICES = _defaults.STABILITY_MODES
DEFAULT_STABILITY = _defaults.DEFAULT_STABILITY

#: The keys of the table, in the order the documentation lists them.
KEYS = ("plugin", "suite", "cases_file", "tolerances", "timeout", "convergence", "stability",
        "require_all", "scheduler", "basis_source", "grid")


class ConfigError(HarnessError):
    """The ``[tool.scf-harness]`` table (or a ``--scf-…`` flag) has a bad value."""


@dataclasses.dataclass(frozen=True)
class Settings:
    """The resolved configuration of one pytest run (flags over keys over defaults).

    ``plugin``: the plug-in spec, or None (then the plug-in generates no items).
    ``suites``: catalogue suite names (none by default when a cases file is given).
    ``cases_file``: an absolute path to the user's own suite file, or None.
    ``tolerances``: check name → absolute tolerance.
    ``timeout``: seconds per case. ``convergence``: the stationarity asked, or None for
    the default. ``stability``: one of STABILITY_CHOICES, as ``certify --stability``.
    ``require_all``: a case the code reports unsupported (``harness.Unsupported``) fails
    instead of being skipped, as ``certify --require-all``.
    ``scheduler``: a Dask scheduler address or ``local:N`` (the cases then run as tasks
    on that cluster, ``harness.run.cluster``), or None (each item runs its case here).
    ``grid``: Kohn–Sham, "own" when the code integrates on its own grid (as ``certify
    --grid own``), else None (pinned).
    ``source``: the pyproject.toml that was read ("" if none); ``from_flags``: the
    names of the settings that came from flags.
    """

    plugin: str | None = None
    suites: tuple[str, ...] = (DEFAULT_SUITE,)
    cases_file: Path | None = None
    tolerances: Mapping[str, float] = dataclasses.field(default_factory=dict)
    timeout: float = DEFAULT_TIMEOUT
    convergence: float | None = None
    stability: str = DEFAULT_STABILITY
    require_all: bool = False
    scheduler: str | None = None
    basis_source: str = "pyscf"
    grid: str | None = None
    source: str = ""
    from_flags: frozenset = frozenset()

    @property
    def active(self) -> bool:
        """True when a plug-in is configured (then one test item per case is generated)."""
        return self.plugin is not None

    def reproduce_command(self, case_name: str) -> str:
        """``scf-harness certify SPEC [--cases-file F] --case NAME [--tol C=V ...]
        [--convergence X] ...``: the one-line command that reruns one case with these
        settings."""
        parts = ["scf-harness", "certify", _quote(self.plugin or "")]
        if self.cases_file is not None:
            parts += ["--cases-file", _quote(str(self.cases_file))]
        parts += ["--case", case_name]
        for name in sorted(self.tolerances):
            parts += ["--tol", f"{name}={self.tolerances[name]:g}"]
        if self.convergence is not None:
            parts += ["--convergence", f"{self.convergence:g}"]
        if self.timeout != DEFAULT_TIMEOUT:
            parts += ["--timeout", f"{self.timeout:g}"]
        if self.stability != DEFAULT_STABILITY:
            parts += ["--stability", self.stability]
        if self.require_all:
            parts.append("--require-all")
        if self.basis_source != "pyscf":
            parts += ["--basis-source", self.basis_source]
        if self.grid == "own":
            parts += ["--grid", "own"]
        return " ".join(parts)


def _quote(text: str) -> str:
    return shlex.quote(text)


# --------------------------------------------------------------------------- reading


def pyproject_for(rootpath, inipath=None) -> Path | None:
    """The pyproject.toml whose ``[tool.scf-harness]`` applies to a pytest run.

    pytest's ``inipath`` when it is a ``pyproject.toml``; else ``rootpath /
    "pyproject.toml"`` when that file exists; else None. Never the current directory.
    """
    if inipath is not None and Path(inipath).name == "pyproject.toml":
        return Path(inipath)
    candidate = Path(rootpath) / "pyproject.toml"
    return candidate if candidate.is_file() else None


def read_table(path) -> dict[str, Any]:
    """The raw ``[tool.scf-harness]`` table of the file at ``path`` ({} if it has none).

    Raises :class:`ConfigError` (one line, naming the file) when the file is not valid
    TOML or the table is not a table.
    """
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError("file not found", case=str(path)) from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML ({exc})", case=str(path)) from None
    except OSError as exc:
        raise ConfigError(f"cannot read ({type(exc).__name__})", case=str(path)) from None
    table = data.get("tool", {}).get("scf-harness", {})
    if not isinstance(table, dict):
        raise ConfigError("must be a table", case=str(path), field=f"[{TABLE}]")
    return table


# --------------------------------------------------------------------------- values


def _plugin(value, where, field) -> str:
    if not isinstance(value, str) or ":" not in value or not value.strip():
        raise ConfigError(f"expected MODULE:FUNCTION or path/to/file.py:FUNCTION, got "
                          f"{value!r}", case=where, field=field)
    return value.strip()


def _suites(value, where, field) -> tuple[str, ...]:
    items = [value] if isinstance(value, str) else value
    if (not isinstance(items, (list, tuple)) or not items
            or not all(isinstance(s, str) and s.strip() for s in items)):
        raise ConfigError(f"expected a suite name or a list of suite names, got {value!r}",
                          case=where, field=field)
    out: list[str] = []
    for s in items:
        if s.strip() not in out:
            out.append(s.strip())
    return tuple(out)


def _cases_file(value, where, field, base: Path) -> Path:
    """An existing file; a relative path is relative to ``base``."""
    if not isinstance(value, str) or not value.strip():
        raise ConfigError(f"expected the path of a TOML suite file, got {value!r}",
                          case=where, field=field)
    path = Path(value.strip()).expanduser()
    path = path if path.is_absolute() else Path(base) / path
    if not path.is_file():
        raise ConfigError(f"file not found: {path}", case=where, field=field)
    return path.resolve()


def _tolerances(value, where, field) -> dict[str, float]:
    from harness.checks.tolerances import Tolerances

    if not isinstance(value, Mapping):
        raise ConfigError(f"expected a table of check = tolerance, got {value!r}",
                          case=where, field=field)
    try:
        return dict(Tolerances(overrides=dict(value)).overrides)
    except HarnessError as exc:
        raise ConfigError(exc.detail, case=where, field=field) from None


def _number(value, where, field) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise ConfigError(f"expected a number, got {value!r}", case=where, field=field)
    try:
        return float(value)
    except ValueError:
        raise ConfigError(f"expected a number, got {value!r}", case=where, field=field) from None


def _timeout(value, where, field) -> float:
    x = _number(value, where, field)
    if not (x > 0 and math.isfinite(x)):
        raise ConfigError(f"expected a positive number of seconds, got {value!r}",
                          case=where, field=field)
    return x


def _convergence(value, where, field) -> float:
    x = _number(value, where, field)
    if not (0 < x < 1):
        raise ConfigError(f"expected a number in (0, 1), got {value!r}", case=where,
                          field=field)
    return x


def _stability(value, where, field) -> str:
    if not isinstance(value, str) or value.strip().lower() not in STABILITY_CHOICES:
        raise ConfigError(f"expected one of {', '.join(STABILITY_CHOICES)}, got {value!r}",
                          case=where, field=field)
    return value.strip().lower()


def _boolean(value, where, field) -> bool:
    if not isinstance(value, bool):
        raise ConfigError(f"expected true or false, got {value!r}", case=where, field=field)
    return value


def _scheduler(value, where, field) -> str:
    """``tcp://HOST:PORT`` or ``local:N``, checked by ``harness.run.cluster`` (imported
    only when a scheduler is given)."""
    from harness.run.cluster import parse_scheduler

    if not isinstance(value, str):
        raise ConfigError(f"expected tcp://HOST:PORT or local:N, got {value!r}", case=where,
                          field=field)
    try:
        return parse_scheduler(value)
    except HarnessError as exc:
        raise ConfigError(exc.detail, case=where, field=field) from None


def _basis_source(value, where, field) -> str:
    from harness.backend.basis_sources import BASIS_SOURCES, check_basis_source

    if not isinstance(value, str) or value.strip().lower() not in BASIS_SOURCES:
        raise ConfigError(f"expected one of {', '.join(BASIS_SOURCES)}, got {value!r}",
                          case=where, field=field)
    try:
        return check_basis_source(value.strip().lower())
    except HarnessError as exc:
        raise ConfigError(exc.detail, case=where, field=field) from None


GRID_CHOICES = ("pinned", "own")


def _grid(value, where, field) -> str | None:
    if not isinstance(value, str) or value.strip().lower() not in GRID_CHOICES:
        raise ConfigError(f"expected one of {', '.join(GRID_CHOICES)}, got {value!r}",
                          case=where, field=field)
    return "own" if value.strip().lower() == "own" else None


_PARSERS = {"plugin": _plugin, "suite": _suites, "tolerances": _tolerances,
            "timeout": _timeout, "convergence": _convergence, "stability": _stability,
            "require_all": _boolean, "scheduler": _scheduler, "basis_source": _basis_source,
            "grid": _grid}


def parse_table(table: Mapping[str, Any], source: str = "pyproject.toml") -> dict[str, Any]:
    """Validate a raw table: ``{key: value}`` with values parsed (suite → tuple,
    cases_file → an absolute path, relative ones taken from the directory of ``source``).

    Unknown keys raise :class:`ConfigError` with the closest known key.
    """
    where = f"{source}: [{TABLE}]"
    out: dict[str, Any] = {}
    for key, value in table.items():
        if key == "cases_file":
            out[key] = _cases_file(value, where, key, Path(source).parent)
            continue
        if key not in _PARSERS:
            close = difflib.get_close_matches(key, KEYS, n=1)
            hint = f"did you mean {close[0]!r}?" if close else f"known keys: {', '.join(KEYS)}"
            raise ConfigError(f"unknown key ({hint})", case=where, field=key)
        out[key] = _PARSERS[key](value, where, key)
    return out


def parse_flags(*, plugin: str | None = None, suites: Sequence[str] | None = None,
                tolerances: Sequence[str] | None = None, timeout: str | None = None,
                convergence: str | None = None, stability: str | None = None,
                cases_file: str | None = None, require_all: bool | None = None,
                base=None, scheduler: str | None = None,
                basis_source: str | None = None, grid: str | None = None) -> dict[str, Any]:
    """Validate the ``--scf-…`` flag values (strings as typed; None: not given).

    ``tolerances`` are ``CHECK=VALUE`` strings as for ``--tol``; a relative
    ``cases_file`` is taken from ``base`` (default: the current directory, where pytest
    was started). Returns the same keys as :func:`parse_table` for the flags that were
    given.
    """
    out: dict[str, Any] = {}
    if plugin is not None:
        out["plugin"] = _plugin(plugin, None, "--scf-plugin")
    if suites:
        out["suite"] = _suites(list(suites), None, "--scf-suite")
    if cases_file is not None:
        out["cases_file"] = _cases_file(cases_file, None, "--scf-cases-file",
                                        Path.cwd() if base is None else Path(base))
    if tolerances:
        from harness.checks.tolerances import parse_override

        pairs = {}
        for text in tolerances:
            try:
                name, value = parse_override(text)
            except HarnessError as exc:
                raise ConfigError(exc.detail, field="--scf-tol") from None
            pairs[name] = value
        out["tolerances"] = pairs
    if timeout is not None:
        out["timeout"] = _timeout(timeout, None, "--scf-timeout")
    if convergence is not None:
        out["convergence"] = _convergence(convergence, None, "--scf-convergence")
    if stability is not None:
        out["stability"] = _stability(stability, None, "--scf-stability")
    if require_all:
        out["require_all"] = True
    if scheduler is not None:
        out["scheduler"] = _scheduler(scheduler, None, "--scf-scheduler")
    if basis_source is not None:
        out["basis_source"] = _basis_source(basis_source, None, "--scf-basis-source")
    if grid is not None:
        out["grid"] = _grid(grid, None, "--scf-grid")
    return out


def resolve(flags: Mapping[str, Any], keys: Mapping[str, Any], source: str = "") -> Settings:
    """Combine parsed flags and parsed keys: a flag wins over its key, and per check for
    tolerances (``--scf-tol`` entries replace the table's entry for that check only)."""
    def pick(name, default):
        return flags[name] if name in flags else keys.get(name, default)

    tolerances = dict(keys.get("tolerances", {}))
    tolerances.update(flags.get("tolerances", {}))
    cases_file = pick("cases_file", None)
    suites = pick("suite", () if cases_file is not None else (DEFAULT_SUITE,))
    return Settings(plugin=pick("plugin", None), suites=tuple(suites), cases_file=cases_file,
                    tolerances=tolerances, timeout=float(pick("timeout", DEFAULT_TIMEOUT)),
                    convergence=pick("convergence", None),
                    stability=pick("stability", DEFAULT_STABILITY),
                    require_all=bool(pick("require_all", False)),
                    scheduler=pick("scheduler", None),
                    basis_source=pick("basis_source", "pyscf"),
                    grid=pick("grid", None), source=source,
                    from_flags=frozenset(flags))


def load_settings(pyproject, flags: Mapping[str, Any]) -> Settings:
    """Read ``[tool.scf-harness]`` from ``pyproject`` (a path or None) and apply ``flags``
    (already parsed by :func:`parse_flags`)."""
    keys: dict[str, Any] = {}
    source = ""
    if pyproject is not None:
        source = str(pyproject)
        keys = parse_table(read_table(pyproject), source)
    return resolve(flags, keys, source)
