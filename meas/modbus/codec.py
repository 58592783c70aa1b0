"""Turn register words into engineering values and back, by data type, word and byte order.

Modbus carries 16-bit registers big-endian (Application Protocol Spec V1.1b3, 4.2); wider
values span consecutive registers whose order the meter vendor chooses. pymodbus's own
helpers cover word order but not byte swapping within a register, so this module does
both with ``struct`` (cross-checked against pymodbus in the tests). The simulated bench
uses ``encode`` so both sides share one definition.
"""

from __future__ import annotations

import math
import struct
from collections.abc import Sequence

from ..register_map import REGISTER_COUNT, RegisterSpec, TextSpec

_FMT = {
    "int16": "h",
    "uint16": "H",
    "int32": "i",
    "uint32": "I",
    "float32": "f",
    "float64": "d",
    "int64": "q",  # 64-bit energy counters; values past 2**53 lose their last digits as floats
    "uint64": "Q",
}
_INT_RANGE = {
    "int16": (-(2**15), 2**15 - 1),
    "uint16": (0, 2**16 - 1),
    "int32": (-(2**31), 2**31 - 1),
    "uint32": (0, 2**32 - 1),
    "int64": (-(2**63), 2**63 - 1),
    "uint64": (0, 2**64 - 1),
}


class DecodeError(ValueError):
    """The words do not make a usable value (wrong length, NaN, Inf)."""


def words_to_raw(
    words: Sequence[int], dtype: str, word_order: str = "big", byte_order: str = "big"
) -> float:
    """Raw number (before scale/offset) from the registers of one value."""
    n = REGISTER_COUNT[dtype]
    if len(words) != n:
        raise DecodeError(f"{dtype} needs {n} registers, got {len(words)}")
    ws = list(words) if word_order == "big" else list(reversed(words))
    buf = bytearray()
    for w in ws:
        hi, lo = (w >> 8) & 0xFF, w & 0xFF
        buf += bytes((hi, lo)) if byte_order == "big" else bytes((lo, hi))
    return struct.unpack(">" + _FMT[dtype], bytes(buf))[0]


def raw_to_words(
    raw: float, dtype: str, word_order: str = "big", byte_order: str = "big"
) -> list[int]:
    """Registers for one raw number; integers are rounded and clipped to the type's range."""
    if dtype in _INT_RANGE:
        lo, hi = _INT_RANGE[dtype]
        raw = 0 if not math.isfinite(raw) else int(min(max(round(raw), lo), hi))
    b = struct.pack(">" + _FMT[dtype], raw)
    words = []
    for i in range(0, len(b), 2):
        hi_b, lo_b = b[i], b[i + 1]
        words.append((hi_b << 8) | lo_b if byte_order == "big" else (lo_b << 8) | hi_b)
    return words if word_order == "big" else list(reversed(words))


def decode(spec: RegisterSpec, words: Sequence[int]) -> float:
    """Engineering value = raw * scale + offset; NaN/Inf raise ``DecodeError``."""
    raw = words_to_raw(words, spec.dtype, spec.word_order, spec.byte_order)
    if isinstance(raw, float) and not math.isfinite(raw):
        raise DecodeError(f"{spec.key}: register value is {raw}")
    return raw * spec.scale + spec.offset


def encode(spec: RegisterSpec, value: float) -> list[int]:
    """Registers that a meter of this map would hold for an engineering value."""
    raw = (value - spec.offset) / spec.scale
    return raw_to_words(raw, spec.dtype, spec.word_order, spec.byte_order)


def words_to_text(words: Sequence[int], byte_order: str = "big") -> str:
    """A text register block (two characters per register, the first in the high byte unless
    ``byte_order`` is little), ASCII/UTF-8, cut at the first NUL and stripped of padding."""
    buf = bytearray()
    for w in words:
        hi, lo = (w >> 8) & 0xFF, w & 0xFF
        buf += bytes((hi, lo)) if byte_order == "big" else bytes((lo, hi))
    return bytes(buf).split(b"\x00", 1)[0].decode("utf-8", "replace").strip()


def decode_text(spec: TextSpec, words: Sequence[int]) -> str:
    """The text of an identification register block (``TextSpec``): padding stripped."""
    if len(words) != spec.count:
        raise DecodeError(f"{spec.key}: string needs {spec.count} registers, got {len(words)}")
    return words_to_text(words, spec.byte_order)


def encode_text(spec: TextSpec, text: str) -> list[int]:
    """The registers a device of this map holds for ``text`` (NUL-padded, ASCII only)."""
    if not text.isascii():
        raise DecodeError(f"{spec.key}: {text!r} is not ASCII")
    return text_to_words(text, spec.count, spec.byte_order)


def text_to_words(text: str, count: int, byte_order: str = "big") -> list[int]:
    """``count`` registers holding ``text`` (NUL-padded); DecodeError when it does not fit."""
    raw = text.encode("utf-8")
    if len(raw) > 2 * count:
        raise DecodeError(f"{text!r} needs {(len(raw) + 1) // 2} registers, {count} given")
    raw = raw.ljust(2 * count, b"\x00")
    words = []
    for i in range(0, len(raw), 2):
        hi_b, lo_b = raw[i], raw[i + 1]
        words.append((hi_b << 8) | lo_b if byte_order == "big" else (lo_b << 8) | hi_b)
    return words
