"""Atomic file writes: a temporary file in the same folder, then a rename.

A reader (or an interrupted run) never sees half a report, certificate or reference.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import Callable


def atomic_write(path, write: Callable[[str], None]) -> Path:
    """Call ``write(tmp_path)`` to fill a temporary file, then rename it onto ``path``.

    The temporary file is removed if ``write`` fails; the folder is created if needed.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        write(tmp)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    return path
