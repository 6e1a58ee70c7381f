"""At import, writes a pickled message into the harness's pipe (the import check's or a
case's) and exits 0: see forges_channel.py. Unpickling it would create FORGED_MARKER."""

from forges_channel import pickle_into_pipe

pickle_into_pipe(None)


def solve(problem):  # never reached
    raise AssertionError("unreachable")
