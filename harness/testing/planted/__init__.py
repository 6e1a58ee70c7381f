"""Built-in plug-ins with planted bugs, and correct variants, with what must catch them.

Used by ``scf-harness selftest`` and by tests/quality. Each module (``core``, ``hints``,
``conventions``, ...) defines ``CATALOGUE``: a tuple of :class:`Planted` entries saying
which case to run the plug-in on and exactly which checks must fail (none for a correct
variant), and, where relevant, which hint or AO convention the harness must report.
"""

from __future__ import annotations

import dataclasses
import importlib
from typing import Callable

#: Modules of this package that contribute entries, in the order the self-test shows them.
MODULES = ("core", "hints", "conventions", "integrals", "states", "orientation", "variants",
           "ks")


@dataclasses.dataclass(frozen=True)
class Planted:
    """One planted-bug plug-in (or correct variant) and its expected verdict.

    ``fails``: exactly the checks that must fail (empty: every check passes or is n.a.).
    ``hint``: text the hint on ``hint_check`` must contain; None: no hint required
    (``no_hint_on``: checks that must carry *no* hint, for the confidence tests).
    ``convention``: words the detected AO convention must contain (None: not checked).
    """

    name: str
    solve: Callable
    case: str
    fails: frozenset
    note: str
    hint: str | None = None
    hint_check: str | None = None
    no_hint_on: frozenset = frozenset()
    convention: str | None = None

    @property
    def spec(self) -> str:
        return f"{self.solve.__module__}:{self.solve.__name__}"

    @property
    def correct(self) -> bool:
        return not self.fails


def note_of(function) -> str:
    """What a plug-in plants, for ``scf-harness selftest``: the first paragraph of its
    docstring, joined into one line (a docstring's first line may wrap; the note never
    ends mid-sentence). It may name checks only if they fail for every entry of the
    function (tests/cli/test_selftest.py checks each note against its entry's ``fails``);
    the "expected failing checks" column lists them exactly."""
    paragraph = (function.__doc__ or "").strip().split("\n\n")[0]
    return " ".join(line.strip() for line in paragraph.splitlines())


def entries(caught, correct=()) -> tuple[Planted, ...]:
    """Catalogue entries from ``(function, cases, fails)`` rows of planted bugs and
    ``(function, cases)`` rows of correct variants; each entry's note is the first line of
    the function's docstring (:func:`note_of`)."""
    out: list[Planted] = []
    rows = [(f, cases, fails) for f, cases, fails in caught] + \
        [(f, cases, ()) for f, cases in correct]
    for function, cases, fails in rows:
        note = note_of(function)
        out += [Planted(function.__name__, function, case, frozenset(fails), note)
                for case in cases]
    return tuple(out)


def catalogue() -> tuple[Planted, ...]:
    """Every entry of every module in :data:`MODULES` that exists."""
    entries: list[Planted] = []
    for name in MODULES:
        try:
            module = importlib.import_module(f"harness.testing.planted.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"harness.testing.planted.{name}":
                raise
            continue
        entries.extend(module.CATALOGUE)
    return tuple(entries)
