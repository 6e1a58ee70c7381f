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
    The file gets the permissions a newly created file gets (0666 less the umask), not
    the private 0600 of a temporary file. Raises IsADirectoryError / FileExistsError
    when something other than a regular file is at ``path`` (the rename would replace
    a folder, device or pipe), NotADirectoryError when a parent of ``path`` is a file.
    """
    path = Path(path)
    if path.is_dir():
        raise IsADirectoryError(21, "is a folder, not a file", str(path))
    if path.exists() and not path.is_file():
        raise FileExistsError(17, "not a regular file", str(path))
    for parent in path.parents:
        if parent.exists():
            if not parent.is_dir():
                raise NotADirectoryError(20, f"its parent {parent} is not a folder", str(path))
            break
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        os.chmod(tmp, 0o666 & ~_umask())
        write(tmp)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    return path


def _umask() -> int:
    """The process's umask: from /proc on Linux, else read by setting it and putting it
    back (not thread-safe, hence the first way)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask
