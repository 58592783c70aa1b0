"""Per-profile accuracy matrices of every reading, for ``Frame.from_array``.

The meters' class specs, ratings and register resolutions laid out as (n, K) arrays (or
(n, 8) for P4 + Q4), so a frame's standard uncertainties are a few whole-array operations.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .columns import I_ANG, I_PH, PF4, S4, V_ANG, V_LL, V_LN, F, FloatArray

if TYPE_CHECKING:
    from .layout import Layout


@dataclass
class Consts:
    """Per-profile matrices for Frame.from_array (shapes (n, K) or (n, 8) for P4 + Q4)."""

    mag_pct: FloatArray
    mag_floor: FloatArray
    const_a: FloatArray
    res_abs: FloatArray
    res_rel: FloatArray
    main: FloatArray
    low_i: FloatArray
    low_i_frac: FloatArray
    low_pf: FloatArray
    low_pf_low_i: FloatArray
    low_pf_i_frac: FloatArray
    min_rated: FloatArray
    i_n_col: FloatArray  # (n, 1) rated current
    v_half: FloatArray  # (n,) half the nominal voltage

    @classmethod
    def build(cls, lay: Layout) -> Consts:
        n, k = lay.has.shape
        i_n, v_n = lay.i_n[:, None], lay.v_n[:, None]
        mag_pct = np.zeros((n, k))
        mag_floor = np.zeros((n, k))
        const_a = np.zeros((n, k))
        sp, sv, si = lay.spec_p, lay.spec_v, lay.spec_i
        rated4 = np.concatenate([np.repeat(v_n * i_n, 3, axis=1), 3 * v_n * i_n], axis=1)
        mag_pct[:, S4] = sp.main_pct / 100.0
        mag_floor[:, S4] = sp.min_i_frac * rated4
        mag_pct[:, V_LN] = sv.main_pct / 100.0
        mag_floor[:, V_LN] = sv.min_i_frac * v_n
        mag_pct[:, V_LL] = sv.main_pct / 100.0
        mag_floor[:, V_LL] = sv.min_i_frac * math.sqrt(3.0) * v_n
        mag_pct[:, I_PH] = si.main_pct / 100.0
        mag_floor[:, I_PH] = si.min_i_frac * i_n
        const_a[:, PF4] = sp.main_pct / 100.0  # PF: the P class as an absolute limit (our rule)
        const_a[:, F] = 0.01  # 0.01 Hz: IEC 61557-12 class 0.02 at 50 Hz [M]
        const_a[:, V_ANG] = 1.0  # 1 degree: our allowance for meter angle outputs
        const_a[:, I_ANG] = 1.0
        res_abs = np.where(lay.is_float, 0.0, np.abs(lay.scale) / 2.0)  # one LSB: +-scale/2
        res_rel = np.where(lay.is_float, 2.0**-24, 0.0)  # float32: half an ulp

        def pair(name: str, scale: float = 1.0) -> FloatArray:
            return (
                np.concatenate(
                    [
                        np.repeat(getattr(lay.spec_p, name), 4, axis=1),
                        np.repeat(getattr(lay.spec_q, name), 4, axis=1),
                    ],
                    axis=1,
                )
                * scale
            )

        min_rated = pair("min_i_frac") * np.concatenate([rated4, rated4], axis=1)
        return cls(
            mag_pct,
            mag_floor,
            const_a,
            res_abs,
            res_rel,
            pair("main_pct", 0.01),
            pair("low_i_pct", 0.01),
            pair("low_i_frac"),
            pair("low_pf_pct", 0.01),
            pair("low_pf_low_i_pct", 0.01),
            pair("low_pf_i_frac"),
            min_rated,
            lay.i_n[:, None],
            0.5 * lay.v_n,
        )
