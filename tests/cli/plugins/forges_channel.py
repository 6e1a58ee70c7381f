"""Hostile plug-ins that write their own message into the harness's result pipe.

Each finds the connection to the harness among the live objects (``gc``), writes a
pickle that would create the file FORGED_MARKER in the current directory (the harness's
own) when unpickled, and ends at once with ``os._exit(0)``, so no real result follows.
A harness that unpickles what the child sends runs that code in its own process.
"""

import gc
import multiprocessing.connection
import os
import struct

#: The file the forged pickle creates when unpickled (relative: the current directory).
FORGED_MARKER = "forged-pickle-ran.txt"


class Payload:
    """Unpickling this calls ``open(FORGED_MARKER, "w")``: code run by the reader."""

    def __reduce__(self):
        return (open, (os.path.abspath(FORGED_MARKER), "w"))


def _connections():
    return [o for o in gc.get_objects()
            if isinstance(o, multiprocessing.connection.Connection) and not o.closed]


def pickle_into_pipe(problem):
    """Sends a pickled Payload over every connection it finds, then exits 0."""
    for conn in _connections():
        try:
            conn.send({"solution": Payload(), "seconds": 0.1})
        except OSError:
            pass
    os._exit(0)


def raw_pickle_into_fd(problem):
    """Writes a length-prefixed pickle straight on the connection's file descriptor
    (multiprocessing's framing, no Connection method), then exits 0."""
    import pickle

    data = pickle.dumps({"solution": Payload(), "seconds": 0.1})
    for conn in _connections():
        try:
            os.write(conn.fileno(), struct.pack("!i", len(data)) + data)
        except OSError:
            pass
    os._exit(0)
