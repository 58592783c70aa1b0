"""One snapshot as the arrays the checks work on.

``Frame`` turns one Snapshot into a (meters x keys) float array with NaN for anything missing
or not ok, plus the standard uncertainty of every reading, so every check is a few numpy
expressions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..snapshot import Quality, Snapshot
from .columns import I_PH, P4, Q4, S4, V_LL, V_LN, BoolArray, FloatArray, nanmean

if TYPE_CHECKING:
    from .layout import Layout

_OK_SET = frozenset({Quality.OK})
_FMAX = np.finfo(float).max
_PQ = slice(P4.start, Q4.stop)  # P4 then Q4, adjacent columns
assert P4.stop == Q4.start


@dataclass
class Frame:
    """One snapshot as arrays plus standard uncertainties (same shape) of every reading."""

    x: FloatArray  # (n, K) values, NaN = missing / not ok
    u: FloatArray  # (n, K) standard uncertainty of each reading
    energized: BoolArray  # (n,) the meter sees voltage (> 50 % of nominal)
    v_mean: FloatArray  # (n,) mean L-N voltage (from L-L / sqrt 3 without L-N readings)
    v_mean_u: FloatArray  # (n,) its standard uncertainty (the phases share the meter: linear mean)
    i_mean: FloatArray  # (n,) mean phase current
    qual_ok: list[bool] | None = None  # per meter: block present and every quality ok (from build)

    @classmethod
    def build(cls, lay: Layout, snap: Snapshot) -> Frame:
        """One fancy-index store of every meter's values (per-meter stores dominated the run)."""
        n, k = lay.has.shape
        ok = Quality.OK
        ok_set = _OK_SET
        flat: list[float] = []
        fill = flat.extend
        blocks = snap.meters
        qual_ok: list[bool] = []
        flag = qual_ok.append
        for mid, getter, keys, nans in lay.fill:
            block = blocks.get(mid)
            if block is None:
                fill(nans)
                flag(False)
                continue
            vals, qual = block.values, block.quality
            every = ok_set.issuperset(qual.values())  # every value ok (quality.comm asks the same)
            flag(every)
            if every:
                try:
                    getter(qual)  # and every mapped key has a quality: the common case
                    fill(getter(vals))
                    continue
                except KeyError:
                    pass
            fill([vals.get(key, np.nan) if qual.get(key) is ok else np.nan for key in keys])
        x = np.full((n, k), np.nan)
        x[lay.fill_rows, lay.fill_cols] = flat
        fr = cls.from_array(lay, x)
        fr.qual_ok = qual_ok
        return fr

    @classmethod
    def from_array(cls, lay: Layout, x: FloatArray) -> Frame:
        """Values plus standard uncertainties: tolerance.power_limit / magnitude_limit /
        resolution_limit fused into a few whole-array operations (tests check they agree)."""
        c = lay.consts
        ax = np.abs(x)
        i_frac3 = x[:, I_PH] / c.i_n_col
        i_frac = np.concatenate([i_frac3, nanmean(i_frac3)[:, None]], axis=1)
        s4 = ax[:, S4]
        s_ref = np.where(np.isnan(s4), np.hypot(x[:, P4], x[:, Q4]), s4)
        a = c.mag_pct * np.fmax(ax, c.mag_floor) + c.const_a
        v8 = ax[:, _PQ]
        s8 = np.concatenate([s_ref, s_ref], axis=1)
        i8 = np.concatenate([i_frac, i_frac], axis=1)
        low = ~(np.where(s8 > 0, v8 / s8, 1.0) >= 0.5)
        unity = np.where(i8 >= c.low_i_frac, c.main, c.low_i)
        lowpf = np.where(i8 >= c.low_pf_i_frac, c.low_pf, c.low_pf_low_i)
        pct = np.where(low, lowpf, unity)
        # = np.nan_to_num(s8) wherever it is used (under ``low``): s8 is |S| or hypot(P, Q), never
        # negative, and ``low`` is False where s8 is NaN, so only +inf -> FMAX matters
        s8_fin = np.minimum(s8, _FMAX)
        base = np.fmax(np.fmax(v8, np.where(low, 0.5 * s8_fin, 0.0)), c.min_rated)
        a[:, _PQ] = pct * base
        res = c.res_abs + c.res_rel * ax
        u = np.sqrt(a * a + res * res) * (
            1.0 / math.sqrt(3.0)
        )  # rectangular -> standard (GUM 4.3.7)
        m6 = nanmean(
            np.concatenate([x[:, V_LN], x[:, V_LL], u[:, V_LN], u[:, V_LL]], axis=1).reshape(-1, 3)
        ).reshape(-1, 4)
        vmean = np.where(np.isnan(m6[:, 0]), m6[:, 1] / math.sqrt(3.0), m6[:, 0])
        vmean_u = np.where(np.isnan(m6[:, 2]), m6[:, 3] / math.sqrt(3.0), m6[:, 2])
        i_mean = i8[:, 3] * lay.i_n
        energized = vmean > c.v_half
        return cls(x, u, energized, vmean, vmean_u, i_mean)
