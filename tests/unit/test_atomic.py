"""harness.run.atomic.atomic_write: all or nothing, ordinary permissions, never onto a
folder, device or pipe."""

from __future__ import annotations

import os
import stat

import pytest

from harness.run.atomic import atomic_write


def fill(text):
    def write(tmp):
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
    return write


@pytest.fixture
def umask_027():
    before = os.umask(0o027)
    yield
    os.umask(before)


def test_writes_with_the_permissions_of_a_new_file(tmp_path, umask_027):
    """0666 less the umask (here 0640), not the 0600 of a temporary file: a reviewer in
    the group can read the report."""
    path = atomic_write(tmp_path / "report.json", fill("{}"))
    assert path.read_text() == "{}"
    assert stat.S_IMODE(path.stat().st_mode) == 0o640


def test_a_failing_write_leaves_the_old_file_and_no_temporary(tmp_path):
    path = tmp_path / "report.json"
    path.write_text("old")

    def broken(tmp):
        fill("half")(tmp)
        raise RuntimeError("disk full")

    with pytest.raises(RuntimeError):
        atomic_write(path, broken)
    assert path.read_text() == "old" and sorted(p.name for p in tmp_path.iterdir()) == [
        "report.json"]


def test_refuses_a_folder(tmp_path):
    with pytest.raises(IsADirectoryError):
        atomic_write(tmp_path, fill("x"))
    assert tmp_path.is_dir()


def test_refuses_a_pipe(tmp_path):
    pipe = tmp_path / "pipe"
    os.mkfifo(pipe)
    with pytest.raises(FileExistsError, match="not a regular file"):
        atomic_write(pipe, fill("x"))
    assert stat.S_ISFIFO(pipe.stat().st_mode)
