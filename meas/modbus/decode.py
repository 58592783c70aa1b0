"""Decode one read's registers into primary values and per-value quality, fast.

The reference is ``codec.decode`` then ``scaling.to_primary``, value by value; a poll cycle
decodes thousands of values, so ``RequestDecoder`` precompiles one read's layout and does the
same arithmetic in one ``struct`` call. Values no healthy meter reports (negative magnitudes,
|PF| > 1, angles beyond a turn) get DECODE quality like NaN and Inf do.
"""

from __future__ import annotations

import itertools
import math
import operator
import struct
from collections.abc import Callable, Sequence

from ..model import Meter
from ..quantities import split_key
from ..register_map import RegisterMap, RegisterSpec
from ..scaling import ratio
from ..snapshot import Quality
from .codec import decode_text
from .plan import ReadRequest

_BOUNDS: dict[
    str, tuple[float, float]
] = {  # no healthy meter reports values outside these (primary units): DECODE quality
    # negative magnitudes, |PF| > 1 (+ one count of a 0.001 resolution), angles beyond a turn
    **dict.fromkeys(("v_ln", "v_ll", "i", "s", "f", "e_imp", "e_exp"), (0.0, math.inf)),
    "pf": (-1.001, 1.001),
    "v_ang": (-360.0, 360.0),
    "i_ang": (-360.0, 360.0),
}
_STRUCT_CHAR = {
    "int16": "h",
    "uint16": "H",
    "int32": "i",
    "uint32": "I",
    "float32": "f",
    "float64": "d",
    "int64": "q",
    "uint64": "Q",
}


class RequestDecoder:
    """Decode every value of one read in one ``struct`` call; same result as ``codec.decode``.

    The word/byte-order permutation of the whole read and one struct format (pad bytes for
    the gaps) are precompiled, so a read costs one pack, at most one permutation and one
    unpack, then the scale, offset and CT/VT ratio in one pass in the reference's order of
    operations (``tests/poll/test_poller.py`` checks it against ``codec.decode`` +
    ``scaling.to_primary``). A read with an impossible or non-finite value takes a slow path
    that names each bad value.
    """

    def __init__(self, req: ReadRequest, specs: dict[str, RegisterSpec], meter: Meter):
        self._pack = struct.Struct(f">{req.count}H").pack
        items = []
        for key in req.keys:
            sp = specs[key]
            off = 2 * (sp.address - req.address)
            nb = 2 * sp.count
            words = list(range(sp.count))
            if sp.word_order == "little":
                words.reverse()
            perm = []
            for w in words:
                perm += (
                    [off + 2 * w, off + 2 * w + 1]
                    if sp.byte_order == "big"
                    else [off + 2 * w + 1, off + 2 * w]
                )
            lo, hi = _BOUNDS.get(split_key(key)[0], (-math.inf, math.inf))
            items.append(
                (
                    off,
                    nb,
                    perm,
                    key,
                    _STRUCT_CHAR[sp.dtype],
                    sp.scale,
                    sp.offset,
                    ratio(meter, key),
                    lo,
                    hi,
                )
            )
        items.sort(key=lambda it: it[0])
        self.keys = tuple(it[3] for it in items)
        self._items = [
            (
                key,
                struct.Struct(">" + ch),
                off,
                None if perm == list(range(off, off + nb)) else perm,
                scale,
                offset,
                r,
                lo,
                hi,
            )
            for off, nb, perm, key, ch, scale, offset, r, lo, hi in items
        ]
        self._scale = tuple(it[5] for it in items)
        self._offset = tuple(it[6] for it in items)
        self._ratio = tuple(it[7] for it in items)
        self._plain = all(
            s == 1.0 and o == 0.0 and r == 1.0
            for s, o, r in zip(self._scale, self._offset, self._ratio, strict=True)
        )
        # bounds per quantity group, checked with min()/max() of one itemgetter (C loops);
        # a pair index gives a tuple even for a group of one
        groups: dict[tuple[float, float], list[int]] = {}
        for n, it in enumerate(items):
            if (it[8], it[9]) != (-math.inf, math.inf):
                groups.setdefault((it[8], it[9]), []).append(n)
        self._bounded = [
            (operator.itemgetter(*(idx if len(idx) > 1 else idx * 2)), lo, hi)
            for (lo, hi), idx in groups.items()
        ]
        self._all_ok = dict.fromkeys(self.keys, Quality.OK)
        overlap = any(b[0] < a[0] + a[1] for a, b in itertools.pairwise(items))
        # overlapping values (no valid profile has them): per-value slow path
        self._unpack: Callable[[bytes], tuple[float, ...]] | None = None
        self._permute: Callable[[bytes], tuple[int, ...]] | None = None
        if not overlap:
            perm_all = list(range(2 * req.count))
            fmt, pos = ">", 0
            for off, nb, perm, _key, ch, *_ in items:
                perm_all[off : off + nb] = perm
                fmt += "x" * (off - pos) + ch
                pos = off + nb
            self._unpack = struct.Struct(fmt).unpack_from
            if perm_all != list(range(2 * req.count)):
                self._permute = operator.itemgetter(*perm_all)

    def decode(
        self,
        words: Sequence[int],
        values: dict[str, float],
        quality: dict[str, Quality],
        errors: list[str],
    ) -> int:
        """Fill ``values``/``quality`` for this read's keys -> how many are ok."""
        buf = self._pack(*words)
        if self._unpack is None:
            return self._decode_each(buf, values, quality, errors)
        if self._permute is not None:
            buf = bytes(self._permute(buf))
        raw = self._unpack(buf)
        if self._plain:  # == (raw * 1.0 + 0.0) * 1.0 bit for bit, ints become float
            vals = [r + 0.0 for r in raw]
        else:
            vals = [
                (r * s + o) * k
                for r, s, o, k in zip(raw, self._scale, self._offset, self._ratio, strict=True)
            ]
        total = sum(vals)  # finite iff no NaN/Inf (an overflow only sends us the slow way)
        if total - total == 0.0 and all(
            lo <= min(g(vals)) and max(g(vals)) <= hi for g, lo, hi in self._bounded
        ):
            values.update(zip(self.keys, vals, strict=True))
            quality.update(self._all_ok)
            return len(vals)
        return self._judge(raw, vals, values, quality, errors)

    def _judge(
        self,
        raw: Sequence[float],
        vals: list[float],
        values: dict[str, float],
        quality: dict[str, Quality],
        errors: list[str],
    ) -> int:
        n_ok = 0
        for (key, _st, _off, _perm, _s, _o, _r, lo, hi), x, v in zip(
            self._items, raw, vals, strict=True
        ):
            if not math.isfinite(v):
                errors.append(f"{key}: register value is {x}")
                quality[key] = Quality.DECODE
            elif not lo <= v <= hi:
                errors.append(f"{key}: impossible value {v:g}")
                quality[key] = Quality.DECODE
            else:
                values[key] = v
                quality[key] = Quality.OK
                n_ok += 1
        return n_ok

    def _decode_each(
        self, buf: bytes, values: dict[str, float], quality: dict[str, Quality], errors: list[str]
    ) -> int:
        raw: list[float] = []
        vals: list[float] = []
        for _key, st, off, perm, scale, offset, r, _lo, _hi in self._items:
            x = (
                st.unpack_from(buf, off)[0]
                if perm is None
                else st.unpack(bytes(buf[i] for i in perm))[0]
            )
            raw.append(x)
            vals.append((x * scale + offset) * r)
        return self._judge(raw, vals, values, quality, errors)


def identification(
    rmap: RegisterMap, blocks: dict[str, tuple[int, Sequence[int]]]
) -> dict[str, str]:
    """A meter's identification strings from register blocks read once at start-up.

    ``blocks`` maps a register kind to (first address, words read); each of the map's text
    registers (``RegisterMap.text``) inside a block becomes ``{key: text}``. Text is never a
    reading: it goes to the meter's identification, not through the numeric decode above.
    """
    out: dict[str, str] = {}
    for spec in rmap.text:
        got = blocks.get(spec.kind)
        if got is None:
            continue
        start, words = got
        lo = spec.address - start
        if lo < 0 or lo + spec.count > len(words):
            continue
        out[spec.key] = decode_text(spec, words[lo : lo + spec.count])
    return out
