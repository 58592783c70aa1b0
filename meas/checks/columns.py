"""Where each quantity sits in a frame's columns, and the row reductions the checks share.

The column order is ``quantities.all_keys()``; the slices name the per-phase groups (P4 is
phases A, B, C then the total) so every check indexes a frame the same way.
"""

from __future__ import annotations

from typing import cast

import numpy as np
from numpy.typing import NDArray

from ..quantities import all_keys

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]
IndexArray = NDArray[np.intp]

KEYS: tuple[str, ...] = tuple(all_keys())
COL: dict[str, int] = {k: i for i, k in enumerate(KEYS)}


def _cols(quantity: str, phases: str) -> slice:
    idx = [COL[f"{quantity}.{p}"] for p in phases.split(",")]
    return slice(idx[0], idx[-1] + 1)


V_LN = _cols("v_ln", "A,B,C")
V_LL = _cols("v_ll", "AB,BC,CA")
I_PH = _cols("i", "A,B,C")
P4 = _cols("p", "A,B,C,T")
Q4 = _cols("q", "A,B,C,T")
S4 = _cols("s", "A,B,C,T")
PF4 = _cols("pf", "A,B,C,T")
F = COL["f.T"]
V_ANG = _cols("v_ang", "A,B,C")
I_ANG = _cols("i_ang", "A,B,C")


def rows_all(a: BoolArray) -> BoolArray:
    """Per row of a 2-D array, whether every column is True (numpy types a reduction as maybe
    a scalar; along axis 1 of a 2-D array it is always a 1-D array)."""
    return cast(BoolArray, a.all(axis=1))


def rows_any(a: BoolArray) -> BoolArray:
    """Per row of a 2-D array, whether any column is True (see ``rows_all``)."""
    return cast(BoolArray, a.any(axis=1))


def nanmean(a: FloatArray) -> FloatArray:
    """Row mean ignoring NaN, NaN for an all-NaN row, without numpy's warning."""
    ok = ~np.isnan(a)
    c = ok.sum(axis=1)
    return np.where(c > 0, np.where(ok, a, 0.0).sum(axis=1) / c, np.nan)
