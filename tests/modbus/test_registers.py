"""Register decoding against published encodings and against pymodbus's own conversions.

Bit patterns: IEEE 754-2008 binary32 / binary64 (e.g. 1.0f = 0x3F800000, pi as binary32 =
0x40490FDB; these are the standard textbook examples), each cross-checked with Python's
``struct``. Within a register Modbus is big-endian (Modbus Application Protocol
Specification V1.1b3, 4.2: "the most significant byte is sent first"); the order of
registers inside a wider value and byte swaps within registers are vendor choices
(ABCD / CDAB / BADC / DCBA naming is common practice).
"""

from __future__ import annotations

import math
import struct

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from pymodbus.client import AsyncModbusTcpClient
from pymodbus.pdu.register_message import ReadHoldingRegistersResponse

from meas.modbus.codec import DecodeError, decode, encode, raw_to_words, words_to_raw
from meas.register_map import RegisterSpec

DT = AsyncModbusTcpClient.DATATYPE
PM_TYPE = {
    "int16": DT.INT16,
    "uint16": DT.UINT16,
    "int32": DT.INT32,
    "uint32": DT.UINT32,
    "float32": DT.FLOAT32,
    "float64": DT.FLOAT64,
    "int64": DT.INT64,
    "uint64": DT.UINT64,
}
# (word_order, byte_order) for the four common layouts of a 32-bit value with bytes A B C D
LAYOUT = {
    "ABCD": ("big", "big"),
    "CDAB": ("little", "big"),
    "BADC": ("big", "little"),
    "DCBA": ("little", "little"),
}


def _words(pattern: int, n: int) -> list[int]:
    return [(pattern >> (16 * (n - 1 - i))) & 0xFFFF for i in range(n)]


@pytest.mark.parametrize(
    "value,pattern",
    [
        (1.0, 0x3F800000),  # IEEE 754-2008 binary32
        (-2.0, 0xC0000000),
        (3.14159274, 0x40490FDB),  # nearest binary32 to pi
        (230.0, 0x43660000),
        (0.0, 0x00000000),
    ],
)
def test_float32_bit_patterns(value, pattern):
    assert struct.unpack(">I", struct.pack(">f", value))[0] == pattern  # cross-check with struct
    words = _words(pattern, 2)
    assert raw_to_words(value, "float32") == words
    assert words_to_raw(words, "float32") == pytest.approx(value, rel=1e-7)
    assert words_to_raw(words, "float32") == struct.unpack(">f", struct.pack(">I", pattern))[0]


@pytest.mark.parametrize(
    "value,pattern",
    [
        (1.0, 0x3FF0000000000000),  # IEEE 754-2008 binary64
        (-2.0, 0xC000000000000000),
        (math.pi, 0x400921FB54442D18),
    ],
)
def test_float64_bit_patterns(value, pattern):
    assert struct.unpack(">Q", struct.pack(">d", value))[0] == pattern
    assert raw_to_words(value, "float64") == _words(pattern, 4)
    assert words_to_raw(_words(pattern, 4), "float64") == value


def test_integer_encodings():
    # two's complement: int16 -1 = 0xFFFF, -32768 = 0x8000; int32 -2 = 0xFFFFFFFE (from memory)
    assert raw_to_words(-1, "int16") == [0xFFFF]
    assert words_to_raw([0xFFFF], "int16") == -1 and words_to_raw([0xFFFF], "uint16") == 65535
    assert words_to_raw([0x8000], "int16") == -32768
    assert raw_to_words(-2, "int32") == [0xFFFF, 0xFFFE]
    assert raw_to_words(0x12345678, "uint32") == [0x1234, 0x5678]
    assert raw_to_words(0x12345678, "uint32", word_order="little") == [0x5678, 0x1234]
    assert raw_to_words(70000, "int16") == [0x7FFF]  # clipped to the type's range


@pytest.mark.parametrize(
    "layout,words",
    [
        ("ABCD", [0x4049, 0x0FDB]),
        ("CDAB", [0x0FDB, 0x4049]),
        ("BADC", [0x4940, 0xDB0F]),
        ("DCBA", [0xDB0F, 0x4940]),
    ],
)
def test_word_and_byte_orders_of_pi(layout, words):
    wo, bo = LAYOUT[layout]
    assert raw_to_words(3.14159274, "float32", wo, bo) == words
    assert (
        words_to_raw(words, "float32", wo, bo) == struct.unpack(">f", bytes.fromhex("40490FDB"))[0]
    )


def test_registers_are_big_endian_on_the_wire():
    # V1.1b3 4.2: register 0x1234 travels as 0x12 then 0x34 (pymodbus's own PDU encoder)
    pdu = ReadHoldingRegistersResponse(registers=raw_to_words(230.0, "float32")).encode()
    assert pdu == bytes([4, 0x43, 0x66, 0x00, 0x00])  # byte count, then A B C D
    assert struct.unpack(">f", pdu[1:])[0] == 230.0


def _swap_bytes(words: list[int]) -> list[int]:
    return [((w & 0xFF) << 8) | (w >> 8) for w in words]


def _values(dtype: str):
    if dtype == "float32":
        return st.floats(width=32, allow_nan=False, allow_infinity=False)
    if dtype == "float64":
        return st.floats(allow_nan=False, allow_infinity=False)
    lo, hi = {
        "int16": (-(2**15), 2**15 - 1),
        "uint16": (0, 2**16 - 1),
        "int32": (-(2**31), 2**31 - 1),
        "uint32": (0, 2**32 - 1),
        "int64": (-(2**63), 2**63 - 1),
        "uint64": (0, 2**64 - 1),
    }[dtype]
    return st.integers(lo, hi)


@st.composite
def typed_values(draw):
    dtype = draw(st.sampled_from(list(PM_TYPE)))
    return (
        dtype,
        draw(_values(dtype)),
        draw(st.sampled_from(["big", "little"])),
        draw(st.sampled_from(["big", "little"])),
    )


@settings(max_examples=400, deadline=None)
@given(tv=typed_values())
def test_agrees_with_pymodbus_conversions(tv):
    dtype, value, wo, bo = tv
    ours = raw_to_words(value, dtype, wo, bo)
    # pymodbus has word order only; byte-swapped layouts are swapped per register first
    theirs = AsyncModbusTcpClient.convert_to_registers(value, PM_TYPE[dtype], word_order=wo)
    assert ours == (theirs if bo == "big" else _swap_bytes(theirs))
    plain = ours if bo == "big" else _swap_bytes(ours)
    back = AsyncModbusTcpClient.convert_from_registers(plain, PM_TYPE[dtype], word_order=wo)
    assert words_to_raw(ours, dtype, wo, bo) == back == value


@settings(max_examples=300, deadline=None)
@given(
    tv=typed_values(),
    scale=st.sampled_from([1.0, 0.1, 0.01, 0.001, 0.0001]),
    offset=st.sampled_from([0.0, -40.0, 1000.0]),
)
def test_encode_decode_round_trip_with_scale(tv, scale, offset):
    dtype, raw, wo, bo = tv
    s = RegisterSpec(
        key="p.T",
        kind="holding",
        address=0,
        dtype=dtype,
        word_order=wo,
        byte_order=bo,  # type: ignore[arg-type]
        scale=scale,
        offset=offset,
    )
    value = raw * scale + offset
    assert len(encode(s, value)) == s.count
    got = decode(s, encode(s, value))
    if dtype.startswith("float"):
        expect = words_to_raw(raw_to_words((value - offset) / scale, dtype), dtype) * scale + offset
        assert got == expect
    else:
        assert got == pytest.approx(value, abs=scale * 0.5 + 1e-9 * abs(value))


@pytest.mark.parametrize("words", [[0x7FC0, 0x0000], [0x7F80, 0x0000], [0xFF80, 0x0000]])
def test_nan_and_infinity_refused(words):
    # binary32 quiet NaN 0x7FC00000, +Inf 0x7F800000, -Inf 0xFF800000
    s = RegisterSpec(key="v_ln.A", kind="input", address=0, dtype="float32")
    with pytest.raises(DecodeError):
        decode(s, words)


def test_wrong_length_refused():
    s = RegisterSpec(key="v_ln.A", kind="input", address=0, dtype="float32")
    with pytest.raises(DecodeError, match="needs 2 registers"):
        decode(s, [0x4366])


@pytest.mark.parametrize(
    ("dtype", "value", "words"),
    [
        # two's complement, most significant word first (Modbus 4.2 big-endian; from memory)
        ("int64", -1, [0xFFFF, 0xFFFF, 0xFFFF, 0xFFFF]),
        ("int64", -(2**63), [0x8000, 0, 0, 0]),
        ("uint64", 2**64 - 1, [0xFFFF, 0xFFFF, 0xFFFF, 0xFFFF]),
        ("uint64", 0x0123456789ABCDEF, [0x0123, 0x4567, 0x89AB, 0xCDEF]),
    ],
)
def test_64_bit_integer_patterns_agree_with_pymodbus(dtype, value, words):
    assert raw_to_words(value, dtype) == words
    assert words_to_raw(words, dtype) == value
    assert AsyncModbusTcpClient.convert_from_registers(words, PM_TYPE[dtype]) == value
    # an energy counter in a little-word-order meter: the same value, words reversed
    assert words_to_raw(list(reversed(words)), dtype, word_order="little") == value


def test_64_bit_energy_counters_through_the_read_decoder():
    """One read holding an int64 and a little-word-order uint64 counter: the poller's
    one-struct decoder gives what ``codec.decode`` gives (the reference path)."""
    from pathlib import Path

    from meas.modbus.decode import RequestDecoder
    from meas.modbus.plan import ReadRequest
    from meas.profile import load_profile

    demo = load_profile(Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml")
    meter = demo.meter("M1")  # reports primary values: no CT/VT ratio applied
    specs = {
        "e_imp.T": RegisterSpec("e_imp.T", "holding", 0, "int64", scale=0.1, unit="Wh"),
        "e_exp.T": RegisterSpec("e_exp.T", "holding", 4, "uint64", "little", scale=1.0, unit="Wh"),
    }
    words = encode(specs["e_imp.T"], 12_345_678_901.2) + encode(specs["e_exp.T"], 2.0**40 + 7)
    values: dict = {}
    quality: dict = {}
    dec = RequestDecoder(ReadRequest("holding", 0, 8, ("e_imp.T", "e_exp.T")), specs, meter)
    assert dec.decode(words, values, quality, []) == 2
    assert (
        values["e_imp.T"] == decode(specs["e_imp.T"], words[:4]) == pytest.approx(12_345_678_901.2)
    )
    assert values["e_exp.T"] == decode(specs["e_exp.T"], words[4:]) == 2.0**40 + 7
