"""Load the SCF function a user plugs in: ``MODULE:FUNCTION`` or ``path/to/file.py:FUNCTION``.

The function is called as ``function(problem)`` with a :class:`harness.contract.problem.Problem`
(coordinates in bohr) and returns the mapping described in ``harness.contract.solution``
(energies in hartree). Every way loading can go wrong becomes a one-line
:class:`harness.contract.errors.PluginLoadError`; no traceback reaches the user.
"""

from __future__ import annotations

import hashlib
import importlib
import importlib.util
import os
import sys
from pathlib import Path
from typing import Any, Callable

from harness.contract.errors import PluginLoadError, first_line

FORMS = "MODULE:FUNCTION or path/to/file.py:FUNCTION"
#: What a spec of each kind names after the colon (the word in messages, and in FORMS).
NAMED = {"plug-in": "function", "accelerator": "accelerator"}


def forms(kind: str = "plug-in") -> str:
    """The spec forms of ``kind``, as messages show them (``FORMS`` for plug-ins)."""
    word = NAMED.get(kind, "function").upper()
    return f"MODULE:{word} or path/to/file.py:{word}"


def split_spec(spec: str, kind: str = "plug-in") -> tuple[str, str]:
    """Split ``"target:function"`` at its last colon; raise PluginLoadError if malformed.
    ``kind`` words the error ("plug-in", "accelerator")."""
    target, sep, attr = str(spec).rpartition(":")
    expected = forms(kind)
    if not sep:
        raise PluginLoadError(f"{kind} {spec!r}: no colon; expected {expected}")
    if not target.strip():
        raise PluginLoadError(f"{kind} {spec!r}: nothing before the colon; expected {expected}")
    if not attr.strip():
        raise PluginLoadError(f"{kind} {spec!r}: no {NAMED.get(kind, 'function')} after the "
                              f"colon; expected {expected}")
    return target.strip(), attr.strip()


def is_file_target(target: str) -> bool:
    """True when the part before the colon names a file rather than an importable module."""
    return target.endswith(".py") or "/" in target or os.sep in target


def _put_first_on_path(folder: str) -> None:
    if folder in sys.path:
        sys.path.remove(folder)
    sys.path.insert(0, folder)


def _import_module(spec: str, name: str, kind: str = "plug-in"):
    _put_first_on_path(os.getcwd())
    importlib.invalidate_caches()
    try:
        return importlib.import_module(name)
    except ModuleNotFoundError as exc:
        missing = exc.name or ""
        if missing == name or name.startswith(missing + "."):
            raise PluginLoadError(f"{kind} {spec!r}: module {missing!r} not found (searched "
                                  f"the current directory and sys.path)") from None
        raise PluginLoadError(f"{kind} {spec!r}: importing {name} failed: "
                              f"{first_line(exc)}") from None
    except (Exception, SystemExit) as exc:
        raise PluginLoadError(f"{kind} {spec!r}: importing {name} failed: "
                              f"{first_line(exc)}") from None


def _module_name_for(path: Path) -> str:
    stem = path.stem
    existing = sys.modules.get(stem)
    if stem.isidentifier() and (existing is None or _same_file(existing, path)):
        return stem
    digest = hashlib.sha256(str(path).encode()).hexdigest()[:10]
    return f"_scf_harness_plugin_{stem if stem.isidentifier() else 'file'}_{digest}"


def _same_file(module, path: Path) -> bool:
    origin = getattr(module, "__file__", None)
    return origin is not None and Path(origin).resolve() == path


def _load_file(spec: str, target: str, kind: str = "plug-in"):
    path = Path(target).expanduser()
    if not path.is_file():
        raise PluginLoadError(f"{kind} {spec!r}: file not found: {target}")
    path = path.resolve()
    name = _module_name_for(path)
    if name in sys.modules:
        return sys.modules[name]
    _put_first_on_path(str(path.parent))
    importlib.invalidate_caches()
    module_spec = importlib.util.spec_from_file_location(name, path)
    if module_spec is None or module_spec.loader is None:
        raise PluginLoadError(f"{kind} {spec!r}: cannot load {target} as a Python module")
    module = importlib.util.module_from_spec(module_spec)
    sys.modules[name] = module
    try:
        module_spec.loader.exec_module(module)
    except (Exception, SystemExit) as exc:
        del sys.modules[name]
        raise PluginLoadError(f"{kind} {spec!r}: importing {target} failed: "
                              f"{first_line(exc)}") from None
    return module


_MISSING = object()


def load_object(spec: str, kind: str = "plug-in") -> Any:
    """Import the module or file of ``spec`` and return the (possibly dotted) attribute it
    names. ``kind`` words the error ("plug-in", "accelerator"). Raises
    :class:`PluginLoadError` (one line)."""
    target, attr = split_spec(spec, kind)
    if is_file_target(target):
        module = _load_file(spec, target, kind)
    else:
        module = _import_module(spec, target, kind)
    obj: Any = module
    for part in attr.split("."):
        try:
            obj = getattr(obj, part, _MISSING)
        except KeyboardInterrupt:
            raise
        except BaseException as exc:  # a __getattr__ or property of the user's code
            raise PluginLoadError(f"{kind} {spec!r}: reading {attr} from {target} raised "
                                  f"{first_line(exc)}") from None
        if obj is _MISSING:
            raise PluginLoadError(f"{kind} {spec!r}: {target} has no attribute {attr!r}")
    return obj


def load_plugin(spec: str) -> Callable[[Any], Any]:
    """Import the plug-in named by ``spec`` and return its function.

    ``MODULE:FUNCTION``: MODULE is imported with the current directory first on
    ``sys.path``. ``path/to/file.py:FUNCTION``: the file is loaded as a module with its
    folder first on ``sys.path`` (so it can import its siblings). FUNCTION may be dotted
    (``module:Class.method``). The returned callable takes a ``Problem`` (bohr) and
    returns the solution mapping (Eh). Raises :class:`PluginLoadError` (one line).
    """
    obj = load_object(spec)
    if not callable(obj):
        target, attr = split_spec(spec)
        raise PluginLoadError(f"plug-in {spec!r}: {target}:{attr} is not callable "
                              f"(it is {type(obj).__name__})")
    return obj
