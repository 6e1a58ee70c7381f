"""A misbehaving external code, for the tests of the subprocess protocol.

    python tests/external/bad_code.py MODE [--out PATH]

Run in the case's scratch directory. MODE says how to misbehave:
copy (--from F: copy the prepared solution F to --out, status 0: behaves well),
exit3 (stderr line, then status 3), segv (SIGSEGV), sleep (60 s; --pidfile F writes its pid to F), nothing (status 0,
no file), escape (solution.npz is a symbolic link to a file outside the scratch
directory), hardlink (solution.npz is a hard link to a file outside it), moved (a
file made outside moved in, with a modification time 100 s old), object (an .npz with a pickled object array), text (a text file named
.npz), two (both solution.npz and solution.json), noisy (300 characters of stderr on
one line, then status 1), chatty (many stderr lines, then status 1), dir (--out is
made a directory, not a file).
"""

from __future__ import annotations

import os
import signal
import sys
import tempfile
import time
from pathlib import Path



def main(argv) -> int:
    mode = argv[0]
    out = Path(argv[argv.index("--out") + 1]) if "--out" in argv else Path("solution.npz")
    if mode == "copy":  # a well-behaved stand-in: copy a prepared solution file
        source = Path(argv[argv.index("--from") + 1])
        out.write_bytes(source.read_bytes())
        print(f"copied {source.name}")
        return 0
    if mode == "exit3":
        print("bad_code: exiting with status 3", file=sys.stderr)
        return 3
    if mode == "segv":
        sys.stderr.flush()
        os.kill(os.getpid(), signal.SIGSEGV)
        return 0
    if mode == "sleep":
        if "--pidfile" in argv:
            Path(argv[argv.index("--pidfile") + 1]).write_text(str(os.getpid()))
        print("bad_code: sleeping", file=sys.stderr, flush=True)
        time.sleep(60)
        return 0
    if mode == "dir":
        out.mkdir()
        return 0
    if mode == "nothing":
        print("bad_code: done, wrote nothing")
        return 0
    import numpy as np

    if mode == "escape":
        fd, outside = tempfile.mkstemp(suffix=".npz")
        os.close(fd)
        np.savez(outside, energy=-1.0, coefficients=np.eye(2), occupations=[2.0, 0.0])
        os.symlink(outside, out)
        return 0
    if mode in ("hardlink", "moved"):  # a file made outside the scratch directory
        fd, outside = tempfile.mkstemp(suffix=".npz")
        os.close(fd)
        np.savez(outside, energy=-1.0, coefficients=np.eye(2), occupations=[2.0, 0.0])
        if mode == "hardlink":
            os.link(outside, out)
        else:  # moved in with an old modification time
            os.utime(outside, (time.time() - 100, time.time() - 100))
            os.rename(outside, out)
        return 0
    if mode == "object":
        np.savez(out, energy=-1.0, coefficients=np.array([{"a": 1}], dtype=object),
                 occupations=[2.0, 0.0])
        return 0
    if mode == "text":
        out.write_text("energy = -1.1\n")
        return 0
    if mode == "two":
        np.savez("solution.npz", energy=-1.0)
        Path("solution.json").write_text('{"energy": -1.0}')
        return 0
    if mode == "noisy":
        print("x" * 300, file=sys.stderr)
        return 1
    if mode == "chatty":
        for k in range(50):
            print(f"line {k}", file=sys.stderr)
        return 1
    print(f"bad_code: unknown mode {mode}", file=sys.stderr)
    return 2


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
