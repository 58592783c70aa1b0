"""How far a reading may be off: accuracy-class limits and GUM propagation.

A class limit +-a (% of reading, at reference conditions, balanced load) is read as a
rectangular distribution, u = a / sqrt(3) (JCGM 100:2008 4.3.7). Independent terms combine
root-sum-square (5.1.2); terms sharing one CT/VT are fully correlated and add linearly
(5.2.2). The expanded limit is U = k u with k = CheckSettings.coverage_k (6.2.1, k = 2 ~ 95 %).

Class tables (see /work/shared/REFERENCES.md section 3; tags: V verified, M from memory):
- active, IEC 62053-21 class 1 [V]; class 2 [M]; IEC 62053-22 class 0.5S [V scope, M table],
  class 0.2S [M];
- reactive, IEC 62053-23 classes 2 and 3 [M]; 62053-24 classes use the same shape [M];
- V and I, IEC 61557-12 style: the class number is the % of reading [M].
Outside the tabulated range the absolute error is held at its value at the edge of the
range (lowest specified current, PF 0.5 / sin phi 0.5): our rule, not the standard's.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import overload

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import BenchwalkError
from .model import CheckSettings
from .results import Status

SQRT3 = math.sqrt(3.0)


@dataclass(frozen=True)
class ClassSpec:
    """One accuracy class of one quantity kind, as % of reading."""

    kind: str  # "p", "q", "v", "i"
    designation: str
    main_pct: float  # main current range, PF 1 (or sin phi 1 for Q)
    low_i_pct: float  # below low_i_frac of In
    low_i_frac: float
    min_i_frac: float  # lowest specified current; below it the absolute error is held
    low_pf_pct: float  # at PF 0.5 (sin phi 0.5 for Q)
    low_pf_low_i_pct: float
    low_pf_i_frac: float
    source: str


_P = {
    "0.2S": ClassSpec(
        "p", "0.2S", 0.2, 0.4, 0.05, 0.01, 0.3, 0.5, 0.10, "IEC 62053-22 class 0.2S [M]"
    ),
    "0.5S": ClassSpec(
        "p", "0.5S", 0.5, 1.0, 0.05, 0.01, 0.6, 1.0, 0.10, "IEC 62053-22 class 0.5S [M table]"
    ),
    "1": ClassSpec(
        "p", "1", 1.0, 1.5, 0.05, 0.02, 1.0, 1.5, 0.10, "IEC 62053-21 class 1, Table 3 [V]"
    ),
    "2": ClassSpec("p", "2", 2.0, 2.5, 0.05, 0.02, 2.0, 2.5, 0.10, "IEC 62053-21 class 2 [M]"),
}
_Q = {
    "2": ClassSpec("q", "2", 2.0, 2.5, 0.10, 0.05, 2.5, 2.5, 0.10, "IEC 62053-23 class 2 [M]"),
    "3": ClassSpec("q", "3", 3.0, 4.0, 0.10, 0.05, 4.0, 4.0, 0.10, "IEC 62053-23 class 3 [M]"),
}


def class_spec(kind: str, designation: str) -> ClassSpec:
    """The limits for a class designation; unknown ones follow a generic shape (our rule).

    The generic shape: main = the class number, 1.5x at low current or low PF, the same
    current fractions as IEC 62053-21. V and I classes are always "class number = % of
    reading" down to 5 % (I) or 10 % (V) of nominal [M].
    """
    table = {"p": _P, "q": _Q}.get(kind, {})
    if designation in table:
        return table[designation]
    try:
        c = float(designation.rstrip("Ss"))
    except ValueError:
        raise BenchwalkError(
            f"accuracy class {designation!r} for {kind!r} is not a number like 0.5S, 1 or 2: fix classes in the profile"
        ) from None
    if kind in ("v", "i"):
        frac = 0.10 if kind == "v" else 0.05
        return ClassSpec(
            kind,
            designation,
            c,
            c,
            frac,
            frac,
            c,
            c,
            frac,
            "IEC 61557-12 style, class = % of reading [M]",
        )
    return ClassSpec(
        kind,
        designation,
        c,
        1.5 * c,
        0.05,
        0.02,
        c,
        1.5 * c,
        0.10,
        "generic class shape (our rule)",
    )


def limit_pct(spec: ClassSpec, i_frac: ArrayLike, low_pf: ArrayLike) -> NDArray[np.float64]:
    """% of reading for the given current fraction of In and a low-PF flag (vectorized).

    NaN current fractions are taken as low current (the wider limit).
    """
    f = np.asarray(i_frac, float)
    lp = np.asarray(low_pf, bool)
    low_i = ~(f >= spec.low_i_frac)
    low_i_pf = ~(f >= spec.low_pf_i_frac)
    unity = np.where(low_i, spec.low_i_pct, spec.main_pct)
    low = np.where(low_i_pf, spec.low_pf_low_i_pct, spec.low_pf_pct)
    return np.where(lp, low, unity)


def power_limit(
    spec: ClassSpec,
    value: ArrayLike,
    s_abs: ArrayLike,
    i_frac: ArrayLike,
    rated: ArrayLike,
    reactive: bool = False,
) -> NDArray[np.float64]:
    """Half-width a (same unit as value) of an active or reactive power reading.

    Below PF 0.5 (sin phi 0.5 for Q) the error is held at the PF 0.5 value of the same
    apparent power (a phase displacement error grows like tan phi, REFERENCES.md 3), and
    below the lowest specified current at its value there (``rated`` = the reading at In).
    """
    v = np.abs(np.asarray(value, float))
    s = np.abs(np.asarray(s_abs, float))
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(s > 0, v / np.where(s > 0, s, 1.0), 1.0)
    low = ~(ratio >= 0.5)  # NaN -> low
    pct = limit_pct(spec, i_frac, low)
    base = np.fmax(v, np.where(low, 0.5 * np.nan_to_num(s), 0.0))
    base = np.fmax(base, spec.min_i_frac * np.asarray(rated, float))
    return pct / 100.0 * base


def magnitude_limit(spec: ClassSpec, value: ArrayLike, rated: ArrayLike) -> NDArray[np.float64]:
    """Half-width a of a V, I or S reading: class % of reading, held below min_i_frac of rated."""
    v = np.abs(np.asarray(value, float))
    return spec.main_pct / 100.0 * np.fmax(v, spec.min_i_frac * np.asarray(rated, float))


def resolution_limit(
    scale: ArrayLike, value: ArrayLike, is_float: ArrayLike
) -> NDArray[np.float64]:
    """Half-width of the register quantization: +-scale/2 for integers, half an ulp for float32."""
    sc = np.abs(np.asarray(scale, float))
    v = np.abs(np.nan_to_num(np.asarray(value, float)))
    return np.where(np.asarray(is_float, bool), v * 2.0**-24, sc / 2.0)


def std_rect(a: ArrayLike) -> NDArray[np.float64]:
    """Standard uncertainty of a rectangular +-a: a / sqrt(3) (JCGM 100:2008 4.3.7)."""
    return np.asarray(a, float) / SQRT3


def rss(*u: ArrayLike) -> NDArray[np.float64]:
    """Root-sum-square of independent standard uncertainties (JCGM 100:2008 5.1.2)."""
    return np.sqrt(sum(np.asarray(x, float) ** 2 for x in u))


def combine(
    u: Sequence[float], groups: Sequence[object] | None = None, coeff: Sequence[float] | None = None
) -> float:
    """Combined standard uncertainty of sum(c_i x_i).

    Terms in one group (for instance readings through one CT or VT) are fully correlated
    and add linearly (JCGM 100:2008 5.2.2, r = 1); groups combine root-sum-square (5.1.2).
    """
    c = [1.0] * len(u) if coeff is None else list(coeff)
    g = list(range(len(u))) if groups is None else list(groups)
    acc: dict[object, float] = {}
    for ui, ci, gi in zip(u, c, g, strict=True):
        acc[gi] = acc.get(gi, 0.0) + ci * ui  # r = +1: signed linear sum
    return math.sqrt(sum(x * x for x in acc.values()))


def expanded(u: ArrayLike, k: float = 2.0) -> NDArray[np.float64]:
    """Expanded uncertainty U = k u (JCGM 100:2008 6.2.1)."""
    return k * np.asarray(u, float)


def judge(value: float, limit: float, warn_fraction: float) -> Status:
    """FAIL beyond the limit, WARN beyond warn_fraction of it, else PASS; NaN -> N/A."""
    if math.isnan(value) or math.isnan(limit):
        return Status.NA
    r = abs(value)
    if r > limit:
        return Status.FAIL
    if r > warn_fraction * limit:
        return Status.WARN
    return Status.PASS


def judge_many(
    value: NDArray[np.float64], limit: NDArray[np.float64], warn_fraction: float
) -> NDArray[np.int8]:
    """Vectorized ``judge``: 0 fail, 1 warn, 2 pass, 3 n/a (the STATUS_RANK order)."""
    r = np.abs(value)
    out = np.full(r.shape, 2, np.int8)
    out[r > warn_fraction * limit] = 1
    out[r > limit] = 0
    out[np.isnan(r) | np.isnan(limit)] = 3
    return out


_UNIT_NAME = {
    "W": "w",
    "var": "var",
    "VA": "va",
    "V": "v",
    "A": "a",
    "Hz": "hz",
    "%": "pct",
    "deg": "deg",
    "1": "pu",
    "": "pu",
}


class Limits:
    """Per-bench overrides of check limits from CheckSettings.overrides.

    ``"<check>.limit_<unit>" = x`` fixes the expanded limit (unit names: w, var, va, v, a,
    hz, pct, deg, pu); ``"<check>.scale" = f`` multiplies the computed limit;
    ``"<check>.<name>"`` gives a named threshold (see docs/checks.md).
    """

    def __init__(self, settings: CheckSettings):
        self.s = settings
        self.k = settings.coverage_k
        self.warn = settings.warn_fraction
        self._o = dict(settings.overrides)

    @overload
    def apply(self, check: str, unit: str, computed: float) -> float: ...
    @overload
    def apply(
        self, check: str, unit: str, computed: NDArray[np.float64]
    ) -> NDArray[np.float64]: ...
    def apply(
        self, check: str, unit: str, computed: float | NDArray[np.float64]
    ) -> float | NDArray[np.float64]:
        """The limit after the overrides: a fixed value in the unit, or the computed one scaled."""
        if not self._o:
            return computed
        fixed = self._o.get(f"{check}.limit_{_UNIT_NAME.get(unit, unit.lower())}")
        if fixed is not None:
            return (
                np.full_like(np.asarray(computed, float), float(fixed))
                if np.ndim(computed)
                else float(fixed)
            )
        return computed * self._o.get(f"{check}.scale", 1.0)

    def param(self, check: str, name: str, default: float) -> float:
        return float(self._o.get(f"{check}.{name}", default))
