"""The closed channel from a plug-in's process to the harness: plain data, no pickle.

Everything a child process that ran plug-in code sends back (a case's solution or error,
the plug-in import check's reply) crosses as one byte string made here, read with
``Connection.recv_bytes`` under a size limit and decoded here. Nothing the child sends is
ever unpickled: a plug-in that finds the connection (through ``gc``, its frames or the
inherited file descriptor) and writes a pickle of its own into it gets its case failed
with a one-line reason, and the pickle's code never runs in the harness.

Wire format (:func:`encode`)::

    MAGIC (8 bytes) | header length (8 bytes, little-endian unsigned) | header | buffers

The header is UTF-8 JSON: ``{"kind": KIND, "message": VALUE, "buffers": [[dtype,
[shape...]], ...]}``. A VALUE is a JSON scalar (null, true/false, an int, a float —
NaN and ±Infinity included — a string), a list of VALUEs, or a one-key object tagging
what JSON cannot hold: ``{"$dict": {str: VALUE}}``, ``{"$array": index}`` (the
index-th buffer) or ``{"$malformed": reason}`` (a
:class:`harness.contract.solution.Malformed` marker). The buffers follow the header in
order, each the C-order little-endian bytes of an array of dtype ``<f8``, ``<i8`` or
``|b1`` (:data:`DTYPES`), exactly as long as its dtype and shape say.

:func:`decode` checks every field on arrival: the magic, the header's length and JSON,
the tags, each buffer's dtype, shape (at most :data:`MAX_ARRAY_ELEMENTS` elements) and
length, that the buffers fill the message exactly, and then the message itself against
the schema of its kind (:data:`KINDS`: the known keys and the type of each value, the
solution's keys and value types). Anything else raises :class:`ChannelError` with a
one-line reason; the runner fails the case with :func:`unreadable`'s text.
"""

from __future__ import annotations

import json
import math
import struct
from typing import Any, Mapping

import numpy as np

from harness.contract.solution import (BASIS_KEY, HISTORY_KEY, KNOWN_KEYS,
                                       MAX_ARRAY_ELEMENTS, MAX_BASIS_TEXT, MAX_HISTORY,
                                       OPTIONAL_TEXT_KEYS, Malformed)

#: Solution keys whose value is text (the basis, the functional, the grid mode).
TEXT_KEYS = (BASIS_KEY,) + OPTIONAL_TEXT_KEYS

#: First bytes of every message (a pickle starts with b"\x80"; this never does).
MAGIC = b"SCFHMSG1"
#: Array dtypes that may cross: float64, int64 and bool, little-endian. No object arrays.
DTYPES = {"<f8": np.dtype("<f8"), "<i8": np.dtype("<i8"), "|b1": np.dtype("|b1")}
#: Longest header accepted (bytes). A solution's header holds the key names, scalars and
#: Malformed reasons, an error message one line: a few kB; 4 MiB leaves room for long
#: reasons and still bounds what a hostile child can make the harness parse as JSON.
MAX_HEADER_BYTES = 4 << 20
#: Longest message accepted (bytes), checked by ``recv_bytes`` before it reads the body:
#: the header plus eight float64 arrays at MAX_ARRAY_ELEMENTS each (the largest, the
#: two-electron integrals, may reach the limit; the others are n² or smaller). A longer
#: message is refused unread.
MAX_MESSAGE_BYTES = MAX_HEADER_BYTES + 8 * 8 * MAX_ARRAY_ELEMENTS
#: Most buffers in one message (a solution has at most one per contract key).
MAX_BUFFERS = 64
#: Deepest nesting of lists/objects in a message (a solution message is 3 levels deep).
MAX_DEPTH = 8

#: Start of the reason a case fails with when its process sent something unreadable.
UNREADABLE = "the plug-in's process sent a message the harness cannot read"

_PREFIX = struct.Struct("<Q")


class ChannelError(ValueError):
    """A message that is not in the channel's format or schema; ``str()`` is one line."""


def unreadable(reason: str) -> str:
    """The one-line reason a case fails with: ``"<UNREADABLE>: <reason>"``."""
    return f"{UNREADABLE}: {reason}"


# --------------------------------------------------------------------------- solutions


def solution_to_plain(solution) -> dict[str, Any]:
    """The extracted solution as the plain dict the channel carries: the dict itself, or
    ``solution.as_dict()`` for a ``Solution`` object (keys present only)."""
    if hasattr(solution, "as_dict"):
        return {k: v for k, v in solution.as_dict().items() if v is not None}
    return dict(solution)


def solution_from_plain(data: dict[str, Any]):
    """The inverse of :func:`solution_to_plain`: ``Solution.from_dict(data)`` when
    ``harness.contract.solution`` defines ``Solution``, else the dict as it is."""
    from harness.contract import solution as _solution

    cls = getattr(_solution, "Solution", None)
    return cls.from_dict(data) if cls is not None and hasattr(cls, "from_dict") else data


# --------------------------------------------------------------------------- encoding


def _encode_value(value, buffers: list, depth: int = 0):
    if depth > MAX_DEPTH:
        raise ChannelError(f"nested deeper than {MAX_DEPTH} levels")
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value)
    if isinstance(value, Malformed):
        return {"$malformed": str(value.reason)}
    if isinstance(value, np.ndarray):
        for name, dtype in DTYPES.items():
            if value.dtype.kind == dtype.kind and value.dtype.itemsize == dtype.itemsize:
                break
        else:
            raise ChannelError(f"an array of dtype {value.dtype} cannot cross (only "
                               f"{', '.join(DTYPES)})")
        buffers.append(np.ascontiguousarray(value, dtype=dtype))
        return {"$array": len(buffers) - 1}
    if isinstance(value, (list, tuple)):
        return [_encode_value(v, buffers, depth + 1) for v in value]
    if isinstance(value, Mapping):
        if not all(isinstance(k, str) for k in value):
            raise ChannelError("a mapping with a key that is not a string cannot cross")
        return {"$dict": {k: _encode_value(v, buffers, depth + 1) for k, v in value.items()}}
    raise ChannelError(f"a {type(value).__name__} cannot cross")


def encode(kind: str, message: Mapping[str, Any]) -> bytes:
    """The bytes of ``message`` (a dict of plain data, see the module docstring) as a
    message of ``kind``; raises ChannelError for a value that cannot cross. A solution
    (dict or ``Solution``) goes under the key ``"solution"``."""
    if "solution" in message and message["solution"] is not None:
        message = {**message, "solution": solution_to_plain(message["solution"])}
    buffers: list[np.ndarray] = []
    body = _encode_value(dict(message), buffers)
    header = json.dumps({"kind": kind, "message": body,
                         "buffers": [[b.dtype.str, list(b.shape)] for b in buffers]},
                        separators=(",", ":")).encode("utf-8")
    # memoryviews of the contiguous arrays: their bytes are copied once, into the message
    return b"".join([MAGIC, _PREFIX.pack(len(header)), header,
                     *(b.reshape(-1).view(np.uint8) for b in buffers)])


# --------------------------------------------------------------------------- decoding


def _buffer_specs(specs) -> list[tuple[np.dtype, tuple[int, ...]]]:
    if not isinstance(specs, list) or len(specs) > MAX_BUFFERS:
        raise ChannelError(f"'buffers' is not a list of at most {MAX_BUFFERS} entries")
    out = []
    for k, spec in enumerate(specs):
        if not (isinstance(spec, list) and len(spec) == 2 and isinstance(spec[0], str)
                and isinstance(spec[1], list)):
            raise ChannelError(f"buffer {k}: not a [dtype, shape] pair")
        dtype = DTYPES.get(spec[0])
        if dtype is None:
            raise ChannelError(f"buffer {k}: dtype {spec[0][:20]!r} is not one of "
                               f"{', '.join(DTYPES)}")
        shape = spec[1]
        if len(shape) > MAX_DEPTH or not all(
                isinstance(n, int) and not isinstance(n, bool) and n >= 0 for n in shape):
            raise ChannelError(f"buffer {k}: shape is not a list of at most {MAX_DEPTH} "
                               f"non-negative ints")
        size = math.prod(shape)
        if size > MAX_ARRAY_ELEMENTS:
            raise ChannelError(f"buffer {k}: {size} elements, more than the limit "
                               f"{MAX_ARRAY_ELEMENTS}")
        out.append((dtype, tuple(shape)))
    return out


def _decode_value(value, arrays: list[np.ndarray], used: set[int], depth: int = 0):
    if depth > MAX_DEPTH:
        raise ChannelError(f"nested deeper than {MAX_DEPTH} levels")
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    if isinstance(value, list):
        return [_decode_value(v, arrays, used, depth + 1) for v in value]
    if isinstance(value, dict) and len(value) == 1:
        (tag, inner), = value.items()
        if tag == "$malformed" and isinstance(inner, str):
            return Malformed(inner)
        if tag == "$array" and isinstance(inner, int) and not isinstance(inner, bool):
            if not 0 <= inner < len(arrays) or inner in used:
                raise ChannelError(f"array reference {inner} names no unused buffer")
            used.add(inner)
            return arrays[inner]
        if tag == "$dict" and isinstance(inner, dict):
            return {k: _decode_value(v, arrays, used, depth + 1) for k, v in inner.items()}
    raise ChannelError("an object that is not a $dict, $array or $malformed tag")


def decode(data: bytes, kind: str) -> dict[str, Any]:
    """Read a message of ``kind`` (:data:`KINDS`) from ``data``; every field is checked
    (module docstring). Raises ChannelError (one line) for anything else: another
    format (a pickle), another kind, a malformed header, a dtype or shape outside the
    limits, missing or extra bytes, unknown keys or values of the wrong type."""
    if not isinstance(data, (bytes, bytearray, memoryview)):
        raise ChannelError(f"not bytes but a {type(data).__name__}")
    data = memoryview(data).cast("B")
    if bytes(data[:len(MAGIC)]) != MAGIC:
        if bytes(data[:1]) == b"\x80":  # the pickle protocols 2 to 5 start so
            raise ChannelError("a pickle, not the channel's plain-data format (nothing "
                               "was unpickled)")
        raise ChannelError(f"not the channel's format (it starts {bytes(data[:8])!r}, "
                           f"not {MAGIC!r})")
    start = len(MAGIC) + _PREFIX.size
    if len(data) < start:
        raise ChannelError("the header length is cut off")
    (length,) = _PREFIX.unpack(data[len(MAGIC):start])
    if length > MAX_HEADER_BYTES or start + length > len(data):
        raise ChannelError(f"header of {length} bytes is longer than the limit "
                           f"{MAX_HEADER_BYTES} or than the message ({len(data)} bytes)")
    try:
        header = json.loads(bytes(data[start:start + length]).decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError) as exc:
        raise ChannelError(f"the header is not JSON ({type(exc).__name__})") from None
    if not isinstance(header, dict) or set(header) != {"kind", "message", "buffers"}:
        raise ChannelError("the header is not an object of 'kind', 'message' and 'buffers'")
    if header["kind"] != kind:
        raise ChannelError(f"a message of kind {str(header['kind'])[:40]!r}, expected "
                           f"{kind!r}")
    specs = _buffer_specs(header["buffers"])
    arrays, offset = [], start + length
    for k, (dtype, shape) in enumerate(specs):
        nbytes = math.prod(shape) * dtype.itemsize
        if offset + nbytes > len(data):
            raise ChannelError(f"buffer {k}: {nbytes} bytes announced, "
                               f"{len(data) - offset} left in the message")
        arr = np.frombuffer(data[offset:offset + nbytes], dtype=dtype).reshape(shape).copy()
        arrays.append(arr)
        offset += nbytes
    if offset != len(data):
        raise ChannelError(f"{len(data) - offset} bytes after the last buffer")
    used: set[int] = set()
    try:
        message = _decode_value(header["message"], arrays, used)
    except RecursionError:
        raise ChannelError("nested too deeply") from None
    if len(used) != len(arrays):
        raise ChannelError(f"{len(arrays) - len(used)} buffer(s) not referenced")
    if not isinstance(message, dict):
        raise ChannelError("the message is not a $dict")
    KINDS[kind](message)
    if message.get("solution") is not None:
        message["solution"] = solution_from_plain(message["solution"])
    return message


# --------------------------------------------------------------------------- schemas


def _is_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def _keys(message: dict, allowed: set[str], what: str) -> None:
    extra = sorted(set(message) - allowed)
    if extra:
        raise ChannelError(f"{what}: unknown key {extra[0][:40]!r} (known: "
                           f"{', '.join(sorted(allowed))})")


def _error_text(message: dict) -> None:
    if not isinstance(message.get("error"), str):
        raise ChannelError("'error' is not a string")


#: A solution key and the value it may hold besides a Malformed marker (what
#: ``harness.contract.solution.extract`` makes): a float, a bool, a count, or a float64
#: array (history: shape (n, 2), n ≤ MAX_HISTORY).
def _check_solution(solution) -> None:
    if not isinstance(solution, dict):
        raise ChannelError("'solution' is not a $dict")
    _keys(solution, set(KNOWN_KEYS), "solution")
    for key, value in solution.items():
        if isinstance(value, Malformed):
            continue
        where = f"solution key {key!r}"
        if key in ("energy", "xc_energy"):
            ok = isinstance(value, float)
        elif key in TEXT_KEYS:
            ok = isinstance(value, str) and len(value) <= MAX_BASIS_TEXT
        elif key == "converged":
            ok = isinstance(value, bool)
        elif key == "iterations":
            ok = isinstance(value, int) and not isinstance(value, bool) and value >= 0
        else:
            ok = isinstance(value, np.ndarray) and value.dtype == np.float64
            if ok and key == HISTORY_KEY:
                ok = value.ndim == 2 and value.shape[1] == 2 and value.shape[0] <= MAX_HISTORY
        if not ok:
            kind = (f"a {value.dtype} array of shape {value.shape}"
                    if isinstance(value, np.ndarray) else f"a {type(value).__name__}")
            raise ChannelError(f"{where} holds {kind}, not what the contract extracts")


def _check_case(message: dict) -> None:
    """A case child's message: ``{"solution": …, "seconds": float}``,
    ``{"error": str, "seconds": float | None}`` or ``{"kind": "unsupported", "reason":
    str, "seconds": float | None}``."""
    if "solution" in message:
        _keys(message, {"solution", "seconds"}, "message")
        _check_solution(message["solution"])
        if not _is_number(message.get("seconds")):
            raise ChannelError("'seconds' is not a number")
    elif "error" in message:
        _keys(message, {"error", "seconds"}, "message")
        _error_text(message)
        if message.get("seconds") is not None and not _is_number(message["seconds"]):
            raise ChannelError("'seconds' is not a number")
    elif message.get("kind") == "unsupported":
        # harness.run.runner.unsupported_message: the plug-in said it cannot run the case
        _keys(message, {"kind", "reason", "seconds"}, "message")
        if not isinstance(message.get("reason"), str):
            raise ChannelError("'reason' of an unsupported message is not a string")
        if message.get("seconds") is not None and not _is_number(message["seconds"]):
            raise ChannelError("'seconds' is not a number")
    else:
        raise ChannelError("neither 'solution', 'error' nor an unsupported reason in the "
                           "message")


def _check_load(message: dict) -> None:
    """The import check's reply: ``{"ok": True}`` or ``{"error": str}``."""
    if "ok" in message:
        _keys(message, {"ok"}, "reply")
        if message["ok"] is not True:
            raise ChannelError("'ok' is not true")
    elif "error" in message:
        _keys(message, {"error"}, "reply")
        _error_text(message)
    else:
        raise ChannelError("neither 'ok' nor 'error' in the reply")


#: Message kinds and their schema check: ``"case"`` (a case child's result) and
#: ``"load"`` (the import check's reply).
KINDS = {"case": _check_case, "load": _check_load}


# --------------------------------------------------------------------------- connections


def send(conn, kind: str, message: Mapping[str, Any]) -> None:
    """Encode ``message`` and write it with ``conn.send_bytes`` (raises ChannelError for a
    value that cannot cross, OSError for a closed pipe)."""
    conn.send_bytes(encode(kind, message))


def receive(conn, kind: str, *, max_bytes: int = MAX_MESSAGE_BYTES) -> dict[str, Any] | None:
    """The next message of ``kind`` from ``conn``, or None when the other end closed
    without sending one. Raises ChannelError for a message longer than ``max_bytes``
    (refused before it is read) or one :func:`decode` refuses. Never unpickles."""
    try:
        data = conn.recv_bytes(max_bytes)
    except EOFError:
        return None
    except OSError as exc:
        if "bad message length" in str(exc):
            raise ChannelError(f"a message longer than the limit of {max_bytes} bytes") \
                from None
        return None  # the connection broke: like an end of file
    return decode(data, kind)
