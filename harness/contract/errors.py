"""Exceptions raised by the harness.

Every error carries structured fields (which case, which field) and subclasses
``ValueError`` so that both people and tools can read it. The CLI prints
``str(error)`` as a single line and exits with status 2; it never shows a traceback
for these.
"""

from __future__ import annotations

import sysconfig
import traceback
from pathlib import Path


class HarnessError(ValueError):
    """Base class: a one-line, user-facing problem with the harness's input.

    ``case`` names the case (or file) concerned, ``field`` the offending field or key.
    """

    def __init__(self, message: str, *, case: str | None = None, field: str | None = None):
        self.case = case
        self.field = field
        self.detail = message
        prefix = ""
        if case is not None and field is not None:
            prefix = f"{case}: {field}: "
        elif case is not None:
            prefix = f"{case}: "
        elif field is not None:
            prefix = f"{field}: "
        super().__init__(prefix + message)


class CaseError(HarnessError):
    """A case, suite file or geometry file is invalid."""


class CaseListError(CaseError):
    """Several bad cases (or matrix entries) of one suite file, found together before
    anything runs. ``problems`` holds one line per bad entry (each naming the case or
    entry and the field); the message is a count line followed by those lines, one
    per line, so the CLI prints each on its own line."""

    def __init__(self, problems, *, case: str | None = None):
        self.problems = tuple(str(p) for p in problems)
        count = len(self.problems)
        super().__init__(f"{count} bad entr{'y' if count == 1 else 'ies'}:\n"
                         + "\n".join(self.problems), case=case)

    @property
    def lines(self) -> tuple[str, ...]:
        """The lines to print: the count line, then one per problem."""
        return tuple(str(self).splitlines())


class PluginLoadError(HarnessError):
    """A ``MODULE:FUNCTION`` plug-in specification cannot be imported or called."""


class ReferenceDataError(HarnessError):
    """A stored reference is unreadable or does not belong to the case."""


class ToleranceError(HarnessError):
    """A tolerance override names an unknown check or is not a positive number."""


#: Longest reason an :class:`Unsupported` keeps (characters; a longer one is cut with …).
UNSUPPORTED_REASON_LIMIT = 200


class Unsupported(Exception):
    """Raised by a plug-in for a case its code cannot run at all (a basis, an element or
    a method it does not have): ``raise harness.Unsupported("no cc-pVTZ in this code")``.

    Not a failure and not a pass: the case is reported ``unsupported: <reason>`` in the
    table, the JSON (``"status": "unsupported"``), the certificate and the closing line
    (``N passed, M failed, K unsupported``), and a run with nothing failed exits 0 —
    unless ``--require-all`` (``require_all`` in ``[tool.scf-harness]``) makes every
    unsupported case a failure. ``reason`` is the message on one line (whitespace
    runs joined, at most UNSUPPORTED_REASON_LIMIT characters; ``"no reason given"`` when
    empty). Not a ``HarnessError``: nothing is wrong with the harness's input.
    """

    def __init__(self, reason: str = ""):
        try:
            text = " ".join(str(reason).split())
        except Exception:  # a reason whose __str__ raises
            text = ""
        if len(text) > UNSUPPORTED_REASON_LIMIT:
            text = text[:UNSUPPORTED_REASON_LIMIT - 1] + "…"
        super().__init__(text)
        self.reason = text or "no reason given"

    def __str__(self) -> str:
        text = self.args[0] if self.args else ""
        return text if isinstance(text, str) and text else "no reason given"


def first_line(exc: BaseException) -> str:
    """``"<ExcType>: <first line of its message>"`` (or just the type), for one-line
    reports of an exception raised by a user's code. A message that cannot be made
    into text (its ``__str__`` raises or returns a non-string) reads
    ``"<ExcType>: <unprintable message>"``."""
    try:
        text = str(exc).strip().splitlines()
    except KeyboardInterrupt:
        raise
    except BaseException:  # the user's __str__
        return f"{type(exc).__name__}: <unprintable message>"
    return f"{type(exc).__name__}: {text[0]}" if text else type(exc).__name__


_LIBRARY_DIRS = tuple(
    str(Path(p).resolve()) for key in ("stdlib", "platstdlib", "purelib", "platlib")
    if (p := sysconfig.get_paths().get(key)))


def _is_library(filename: str) -> bool:
    try:
        path = str(Path(filename).resolve())
    except (OSError, ValueError):
        return True
    return filename.startswith("<") or path.startswith(_LIBRARY_DIRS)


def innermost_frame(tb, after: str) -> traceback.FrameSummary | None:
    """The frame of ``tb`` that an error report should name: frames up to and including
    the last one in the file ``after`` (a resolved path: the harness module that made the
    call) are dropped; of the rest, the innermost one outside the standard library and
    site-packages (so an error raised inside numpy names the line that called numpy); if
    all are library frames, the outermost one; None if nothing is left."""
    frames = traceback.extract_tb(tb)
    start = 0
    for i, fr in enumerate(frames):
        if str(Path(fr.filename).resolve()) == after:
            start = i + 1
    frames = frames[start:]
    if not frames:
        return None
    own = [fr for fr in frames if not _is_library(fr.filename)]
    return own[-1] if own else frames[0]
