"""The closed child→parent channel (harness.run.channel): plain data only, no pickle.

A round trip keeps every valid message exactly (hypothesis); every malformed header,
dtype, shape, length, kind, key or value is refused with a one-line reason; nothing the
channel reads is ever unpickled. The runner's use of it (hostile plug-ins writing their
own pickles into the pipe) is tested in test_runner.py and tests/cli.
"""

from __future__ import annotations

import json
import multiprocessing
import pickle
import struct

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from hypothesis.extra import numpy as hnp

from harness.contract.solution import KNOWN_KEYS, MAX_ARRAY_ELEMENTS, Malformed, Solution
from harness.run import channel
from harness.run.channel import ChannelError, decode, encode

TEXT_KEYS = ("basis", "functional", "grid")
ARRAY_KEYS = [k for k in KNOWN_KEYS if k not in ("energy", "converged", "iterations",
                                                   "history", "xc_energy") + TEXT_KEYS]


def raw(header: dict, *buffers: bytes) -> bytes:
    """A message with a hand-written header (the way a forger would write one)."""
    text = json.dumps(header).encode()
    return channel.MAGIC + struct.pack("<Q", len(text)) + text + b"".join(buffers)


def same(a, b) -> bool:
    """Equal, arrays by dtype, shape and bytes (NaN equal to NaN); a Solution as its
    given fields."""
    if isinstance(a, Solution):
        a = a.as_dict()
    if isinstance(b, Solution):
        b = b.as_dict()
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return (isinstance(a, np.ndarray) and isinstance(b, np.ndarray)
                and a.dtype == b.dtype and a.shape == b.shape and a.tobytes() == b.tobytes())
    if isinstance(a, dict):
        return isinstance(b, dict) and a.keys() == b.keys() and all(same(a[k], b[k]) for k in a)
    if isinstance(a, float) and isinstance(b, float) and a != a:
        return b != b
    return type(a) is type(b) and a == b


floats = st.floats(allow_nan=True, allow_infinity=True)
arrays = hnp.arrays(np.float64, hnp.array_shapes(min_dims=1, max_dims=4, max_side=4),
                    elements=floats)
malformed = st.builds(Malformed, st.text(max_size=30))
solutions = st.fixed_dictionaries({}, optional={
    "energy": st.one_of(floats, malformed),
    "xc_energy": st.one_of(floats, malformed),
    **{k: st.one_of(st.text(max_size=40), malformed) for k in TEXT_KEYS},
    "converged": st.one_of(st.booleans(), malformed),
    "iterations": st.one_of(st.integers(min_value=0, max_value=10**12), malformed),
    "history": st.one_of(hnp.arrays(np.float64, st.tuples(st.integers(0, 5), st.just(2)),
                                    elements=floats), malformed),
    **{k: st.one_of(arrays, malformed) for k in ARRAY_KEYS}})
case_messages = st.one_of(
    st.builds(lambda s, t: {"solution": s, "seconds": t}, solutions,
              st.floats(min_value=0, max_value=1e6)),
    st.builds(lambda e, t: {"error": e, "seconds": t}, st.text(max_size=80),
              st.one_of(st.none(), st.floats(min_value=0, max_value=1e6))))


class TestRoundTrip:
    @settings(max_examples=150, deadline=None)
    @given(case_messages)
    def test_every_valid_case_message_comes_back_exactly(self, message):
        """A solution (float64 arrays, floats with NaN/inf, bools, counts, Malformed
        markers) or an error crosses unchanged."""
        assert same(decode(encode("case", message), "case"), message)

    @pytest.mark.parametrize("message", [{"ok": True}, {"error": "plug-in 'x': no module"}])
    def test_load_replies(self, message):
        assert decode(encode("load", message), "load") == message

    def test_int_and_bool_arrays_cross_with_their_dtype(self):
        """The generic encoding also carries int64 and bool arrays (dtype kept)."""
        buffers = []
        body = channel._encode_value({"i": np.arange(3, dtype=np.int64),
                                      "b": np.array([True, False])}, buffers)
        assert [b.dtype.str for b in buffers] == ["<i8", "|b1"]
        back = channel._decode_value(body, buffers, set())
        assert back["i"].dtype == np.int64 and back["b"].dtype == np.bool_

    def test_arrays_come_back_writable_and_owned(self):
        out = decode(encode("case", {"solution": {"density": np.eye(2)}, "seconds": 1.0}),
                     "case")
        out["solution"].density[0, 0] = 5.0  # a copy, not a view of the message bytes
        assert out["solution"].density[0, 0] == 5.0

    def test_a_value_that_is_not_plain_data_cannot_be_sent(self):
        with pytest.raises(ChannelError, match="^a object cannot cross$"):
            encode("case", {"error": object()})
        with pytest.raises(ChannelError, match="array of dtype object cannot cross"):
            encode("case", {"solution": {"density": np.array([None])}, "seconds": 1.0})


GOOD = {"solution": {"energy": -1.0, "density": np.eye(2)}, "seconds": 0.5}


def refused(data, kind="case") -> str:
    with pytest.raises(ChannelError) as info:
        decode(data, kind)
    text = str(info.value)
    assert "\n" not in text
    return text


class TestRefused:
    def test_a_pickle_is_refused_unread(self, tmp_path):
        """A pickle whose loading would create a file: refused, the file never made."""
        marker = tmp_path / "ran"

        class Payload:
            def __reduce__(self):
                return (open, (str(marker), "w"))

        assert refused(pickle.dumps({"solution": Payload()})) == (
            "a pickle, not the channel's plain-data format (nothing was unpickled)")
        assert not marker.exists()

    def test_other_bytes(self):
        assert refused(b"hello world") == ("not the channel's format (it starts "
                                           "b'hello wo', not b'SCFHMSG1')")

    def test_cut_off_header_length(self):
        assert refused(channel.MAGIC + b"\x01") == "the header length is cut off"

    def test_header_longer_than_the_message_or_the_limit(self):
        assert refused(channel.MAGIC + struct.pack("<Q", 100) + b"{}") == (
            f"header of 100 bytes is longer than the limit {channel.MAX_HEADER_BYTES} or "
            f"than the message (18 bytes)")
        huge = channel.MAX_HEADER_BYTES + 1
        assert refused(channel.MAGIC + struct.pack("<Q", huge)).startswith(
            f"header of {huge} bytes is longer than the limit")

    def test_header_not_json(self):
        text = b"{not json"
        assert refused(channel.MAGIC + struct.pack("<Q", len(text)) + text) == (
            "the header is not JSON (JSONDecodeError)")

    def test_header_with_other_keys(self):
        assert refused(raw({"kind": "case", "message": {}})) == (
            "the header is not an object of 'kind', 'message' and 'buffers'")

    def test_another_kind(self):
        assert refused(encode("load", {"ok": True})) == (
            "a message of kind 'load', expected 'case'")

    @pytest.mark.parametrize("dtype", ["|O", "<c16", "<U3", ">f8", "|V8", "<f4"])
    def test_dtypes_outside_the_three(self, dtype):
        text = refused(raw({"kind": "case", "buffers": [[dtype, [1]]],
                            "message": {"$dict": {"error": "x"}}}, b"\0" * 16))
        assert text == f"buffer 0: dtype {dtype!r} is not one of <f8, <i8, |b1"

    def test_too_many_elements(self):
        """The shape's product is checked before any allocation."""
        shape = [MAX_ARRAY_ELEMENTS, 2]
        assert refused(raw({"kind": "case", "buffers": [["<f8", shape]], "message": {}})) == (
            f"buffer 0: {2 * MAX_ARRAY_ELEMENTS} elements, more than the limit "
            f"{MAX_ARRAY_ELEMENTS}")

    @pytest.mark.parametrize("shape", [[-1], [1.5], [True], "3"])
    def test_bad_shapes(self, shape):
        text = refused(raw({"kind": "case", "buffers": [["<f8", shape]], "message": {}}))
        assert text in ("buffer 0: shape is not a list of at most 8 non-negative ints",
                        "buffer 0: not a [dtype, shape] pair")

    def test_buffer_shorter_than_announced(self):
        assert refused(raw({"kind": "case", "buffers": [["<f8", [4]]], "message": {}},
                           b"\0" * 8)) == "buffer 0: 32 bytes announced, 8 left in the message"

    def test_bytes_after_the_last_buffer(self):
        assert refused(encode("case", GOOD) + b"\0") == "1 bytes after the last buffer"

    def test_unreferenced_and_reused_buffers(self):
        data = np.zeros(1).tobytes()
        assert refused(raw({"kind": "case", "buffers": [["<f8", [1]]],
                            "message": {"$dict": {"error": "x"}}}, data)) == (
            "1 buffer(s) not referenced")
        assert refused(raw({"kind": "case", "buffers": [["<f8", [1]]], "message": {"$dict": {
            "solution": {"$dict": {"density": {"$array": 0}, "fock": {"$array": 0}}},
            "seconds": 1.0}}}, data)) == "array reference 0 names no unused buffer"

    def test_untagged_object(self):
        assert refused(raw({"kind": "case", "buffers": [], "message": {"error": "x"}})) == (
            "an object that is not a $dict, $array or $malformed tag")

    def test_deep_nesting(self):
        value = "x"
        for _ in range(20):
            value = [value]
        assert refused(raw({"kind": "case", "buffers": [],
                            "message": {"$dict": {"error": value}}})) == (
            "nested deeper than 8 levels")

    def test_unknown_message_key(self):
        assert refused(encode("case", {"error": "x", "run": "rm -rf"})) == (
            "message: unknown key 'run' (known: error, seconds)")

    def test_unknown_solution_key(self):
        assert refused(encode("case", {"solution": {"energy": -1.0, "exploit": 1},
                                       "seconds": 1.0})) == (
            f"solution: unknown key 'exploit' (known: {', '.join(sorted(KNOWN_KEYS))})")

    @pytest.mark.parametrize("key, value, what", [
        ("energy", "-1.1", "a str"), ("energy", True, "a bool"),
        ("converged", 1, "a int"), ("iterations", -3, "a int"),
        ("density", [[1.0]], "a list"),
        ("density", np.eye(2, dtype=np.int64), "a int64 array of shape (2, 2)"),
        ("history", np.zeros((3, 3)), "a float64 array of shape (3, 3)")])
    def test_solution_values_of_the_wrong_type(self, key, value, what):
        assert refused(encode("case", {"solution": {key: value}, "seconds": 1.0})) == (
            f"solution key {key!r} holds {what}, not what the contract extracts")

    def test_messages_without_their_keys(self):
        assert refused(encode("case", {"seconds": 1.0})) == (
            "neither 'solution', 'error' nor an unsupported reason in the message")
        assert refused(encode("case", {"error": 3})) == "'error' is not a string"
        assert refused(encode("case", {"solution": {}, "seconds": "1"})) == (
            "'seconds' is not a number")
        assert refused(encode("load", {"ok": 1}), "load") == "'ok' is not true"

    def test_an_oversized_message_is_refused_before_it_is_read(self):
        mine, theirs = multiprocessing.Pipe()
        try:
            mine.send_bytes(encode("case", GOOD))
            with pytest.raises(ChannelError, match="^a message longer than the limit of 64 "
                                                   "bytes$"):
                channel.receive(theirs, "case", max_bytes=64)
        finally:
            mine.close()
            theirs.close()

    def test_end_of_file_is_none(self):
        mine, theirs = multiprocessing.Pipe()
        mine.close()
        assert channel.receive(theirs, "case") is None
        theirs.close()

    def test_the_reason_a_case_fails_with(self):
        assert channel.unreadable("a pickle") == (
            "the plug-in's process sent a message the harness cannot read: a pickle")


class TestSolutionForms:
    def test_dict_and_object_forms_go_through_one_function(self):
        """The dict goes as it is; an object with as_dict() (the coming Solution) is sent
        as its present keys."""
        class Fake:
            def as_dict(self):
                return {"energy": -1.0, "fock": None}

        assert channel.solution_to_plain({"energy": -1.0}) == {"energy": -1.0}
        assert channel.solution_to_plain(Fake()) == {"energy": -1.0}


class TestTextAndKohnShamKeys:
    def test_basis_functional_grid_and_xc_energy_cross(self):
        """The text keys (basis, functional, grid) and E_xc cross as they are (synthetic)."""
        sol = Solution(energy=-1.0, xc_energy=-0.5, basis="H S\n  1.0  1.0\n",
                       functional="pbe", grid="own", xc_potential=np.eye(2))
        out = channel.decode(channel.encode("case", {"solution": sol, "seconds": 0.1}), "case")
        assert same(out["solution"], sol)

    def test_a_non_text_basis_is_refused(self):
        data = channel.encode("case", {"solution": {"basis": 3.0}, "seconds": 0.1})
        with pytest.raises(channel.ChannelError,
                           match="^solution key 'basis' holds a float, not what the contract "
                                 "extracts$"):
            channel.decode(data, "case")
