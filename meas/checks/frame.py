"""Per-profile layout and per-snapshot arrays the checks work on.

``Layout`` is built once per profile (columns, classes, ratings, topology); ``Frame`` turns
one Snapshot into a (meters x keys) float array with NaN for anything missing or not ok,
plus the reading limits, so every check is a few numpy expressions.
"""

from __future__ import annotations

import math
import operator
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Protocol, TypeVar, cast

import numpy as np
from numpy.typing import NDArray

from ..errors import BenchwalkError
from ..model import Meter, Profile
from ..quantities import all_keys
from ..scaling import ratio
from ..snapshot import Quality, Snapshot
from ..tolerance import (
    ClassSpec,
    Limits,
    class_spec,
)

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]
IndexArray = NDArray[np.intp]

KEYS: tuple[str, ...] = tuple(all_keys())
_OK_SET = frozenset({Quality.OK})
_FMAX = np.finfo(float).max
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
_PQ = slice(P4.start, Q4.stop)  # P4 then Q4, adjacent columns
assert P4.stop == Q4.start


@dataclass(frozen=True)
class StackedSpec:
    """The numeric fields of every meter's ClassSpec as (n, 1) columns, broadcasting over meters."""

    main_pct: FloatArray
    low_i_pct: FloatArray
    low_i_frac: FloatArray
    min_i_frac: FloatArray
    low_pf_pct: FloatArray
    low_pf_low_i_pct: FloatArray
    low_pf_i_frac: FloatArray


def _stack(specs: list[ClassSpec]) -> StackedSpec:
    """One StackedSpec of the meters' ClassSpecs, in meter order."""

    def col(name: str) -> FloatArray:
        return np.array([getattr(s, name) for s in specs], float)[:, None]

    return StackedSpec(
        main_pct=col("main_pct"),
        low_i_pct=col("low_i_pct"),
        low_i_frac=col("low_i_frac"),
        min_i_frac=col("min_i_frac"),
        low_pf_pct=col("low_pf_pct"),
        low_pf_low_i_pct=col("low_pf_low_i_pct"),
        low_pf_i_frac=col("low_pf_i_frac"),
    )


_V = TypeVar("_V")


class _Pick(Protocol):
    """The items of a meter's mapped keys, in map order, from a values or a quality mapping."""

    def __call__(self, d: Mapping[str, _V], /) -> tuple[_V, ...]: ...


# per meter, what Frame.build needs: (meter id, picker of its keys, its keys, one NaN per key)
_Fill = tuple[str, _Pick, list[str], list[float]]


@dataclass
class Layout:
    """What the profile alone decides, built once per profile by ``build``."""

    profile: Profile
    limits: Limits
    meters: tuple[Meter, ...]
    index: dict[str, int]
    cols: list[list[tuple[int, str]]]  # per meter: (column, key) of every mapped key
    has: BoolArray  # (n, K) bool
    scale: FloatArray  # (n, K) register scale (primary units)
    is_float: BoolArray  # (n, K) bool
    i_n: FloatArray  # (n,) rated primary current
    v_n: FloatArray  # (n,) nominal L-N voltage
    vector_s: BoolArray  # (n,) bool: S_total is the IEEE 1459 vector definition
    angles: BoolArray  # (n,) bool: the map has voltage and current angles
    spec_p: StackedSpec = field(repr=False)
    spec_q: StackedSpec = field(repr=False)
    spec_v: StackedSpec = field(repr=False)
    spec_i: StackedSpec = field(repr=False)
    f_nom: float
    axis: NDArray[np.int_] = field(repr=False)  # diagnose.FORWARD ... per meter
    is_load: BoolArray = field(repr=False)
    fill: list[_Fill] = field(repr=False)  # per meter, for Frame.build
    fill_rows: IndexArray = field(repr=False)
    fill_cols: IndexArray = field(repr=False)
    consts: Consts = field(init=False, repr=False)

    def __post_init__(self) -> None:
        self.consts = Consts.build(self)

    @classmethod
    def build(cls, profile: Profile) -> Layout:
        meters = profile.meters
        n, k = len(meters), len(KEYS)
        has = np.zeros((n, k), bool)
        scale = np.ones((n, k))
        is_float = np.zeros((n, k), bool)
        cols: list[list[tuple[int, str]]] = []
        i_n = np.empty(n)
        v_n = np.empty(n)
        vector_s = np.zeros(n, bool)
        for mi, m in enumerate(meters):
            rmap = profile.maps[m.map_id]
            vector_s[mi] = rmap.apparent_power == "vector"
            mc = []
            for spec in rmap.registers:
                c = COL.get(spec.key)
                if c is None:
                    continue
                mc.append((c, spec.key))
                has[mi, c] = True
                scale[mi, c] = spec.scale * ratio(m, spec.key)
                is_float[mi, c] = spec.dtype.startswith("float")
            cols.append(mc)
            zone = profile.zone_of_bus(m.bus)
            v_n[mi] = zone.bench_v_ll / math.sqrt(3.0)
            i_n[mi] = m.ct_primary_a or profile.bench.s_base_va / (math.sqrt(3.0) * zone.bench_v_ll)
        angles = rows_all(has[:, V_ANG]) & rows_all(has[:, I_ANG])
        axis, is_load = _flow_axes(profile)
        spec_p, spec_q, spec_v, spec_i = (
            _stack([_spec(profile, m, kind) for m in meters]) for kind in "pqvi"
        )
        return cls(
            profile,
            Limits(profile.checks),
            meters,
            {m.id: i for i, m in enumerate(meters)},
            cols,
            has,
            scale,
            is_float,
            i_n,
            v_n,
            vector_s,
            angles,
            spec_p,
            spec_q,
            spec_v,
            spec_i,
            f_nom=profile.bench.frequency_hz,
            axis=axis,
            is_load=is_load,
            fill=[
                (
                    m.id,
                    _getter([key for _, key in mc]),
                    [key for _, key in mc],
                    [math.nan] * len(mc),
                )
                for m, mc in zip(meters, cols, strict=True)
            ],
            fill_rows=np.array([mi for mi, mc in enumerate(cols) for _ in mc], np.intp),
            fill_cols=np.array([c for mc in cols for c, _ in mc], np.intp),
        )


def _getter(keys: list[str]) -> _Pick:
    """A tuple of the keys' items, always a tuple (itemgetter of one key returns the bare item)."""
    if not keys:
        return _none
    if len(keys) == 1:
        only = keys[0]

        def one(d: Mapping[str, _V], /) -> tuple[_V, ...]:
            return (d[only],)

        return one
    return cast(_Pick, operator.itemgetter(*keys))


def _none(d: Mapping[str, _V], /) -> tuple[_V, ...]:
    return ()


def _spec(profile: Profile, meter: Meter, kind: str) -> ClassSpec:
    try:
        return class_spec(kind, getattr(meter.classes, kind))
    except BenchwalkError as exc:
        raise BenchwalkError(f"{profile.path}: meter {meter.id}: {exc}") from None


def _flow_axes(profile: Profile) -> tuple[NDArray[np.int_], BoolArray]:
    """Expected power direction of every meter (diagnose.FORWARD ...) and whether it meters a load.

    Loads draw power (forward); shunts exchange reactive power; on a line, power is expected
    to flow away from the sources (shortest electrical distance in branches, all switches
    closed); equal distances at both ends leave the direction open (a tie).
    """
    from .diagnose import BACKWARD, EITHER, FORWARD, REACTIVE

    dist = {br.from_bus: 0 for br in profile.branches if br.kind == "source"}
    frontier = list(dist)
    while frontier:
        nxt = []
        for br in profile.branches:
            if br.to_bus is None:
                continue
            for a, b in ((br.from_bus, br.to_bus), (br.to_bus, br.from_bus)):
                if a in frontier and b not in dist:
                    dist[b] = dist[a] + 1
                    nxt.append(b)
        frontier = nxt
    axis: list[int] = []
    is_load: list[bool] = []
    for m in profile.meters:
        mbr = profile.branch(m.branch) if m.branch else None
        is_load.append(mbr is not None and mbr.kind == "load")
        if mbr is None or mbr.kind == "source":
            axis.append(EITHER)
        elif mbr.kind == "load":
            axis.append(FORWARD)
        elif mbr.kind == "shunt":
            axis.append(REACTIVE)
        else:
            far = mbr.to_bus if mbr.from_bus == m.bus else mbr.from_bus
            d0, d1 = dist.get(m.bus), (None if far is None else dist.get(far))
            if d0 is None or d1 is None or d0 == d1:
                axis.append(EITHER)
            else:
                axis.append(FORWARD if d1 > d0 else BACKWARD)
    return np.array(axis), np.array(is_load, bool)


@dataclass
class Frame:
    """One snapshot as arrays plus standard uncertainties (same shape) of every reading."""

    x: FloatArray  # (n, K) values, NaN = missing / not ok
    u: FloatArray  # (n, K) standard uncertainty of each reading
    present: BoolArray  # (n,) meter block present in the snapshot
    energized: BoolArray  # (n,) the meter sees voltage (> 50 % of nominal)
    loaded: BoolArray  # (n,) mean current above 1 % of In
    v_mean: FloatArray  # (n,) mean L-N voltage (from L-L / sqrt 3 without L-N readings)
    v_mean_u: FloatArray  # (n,) its standard uncertainty (the phases share the meter: linear mean)
    i_mean: FloatArray  # (n,) mean phase current
    qual_ok: list[bool] | None = None  # per meter: block present and every quality ok (from build)

    @classmethod
    def build(cls, lay: Layout, snap: Snapshot) -> Frame:
        """One fancy-index store of every meter's values (per-meter stores dominated the run)."""
        n, k = lay.has.shape
        present = np.zeros(n, bool)
        ok = Quality.OK
        ok_set = _OK_SET
        flat: list[float] = []
        fill = flat.extend
        blocks = snap.meters
        qual_ok: list[bool] = []
        flag = qual_ok.append
        for mi, (mid, getter, keys, nans) in enumerate(lay.fill):
            block = blocks.get(mid)
            if block is None:
                fill(nans)
                flag(False)
                continue
            present[mi] = True
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
        fr = cls.from_array(lay, x, present)
        fr.qual_ok = qual_ok
        return fr

    @classmethod
    def from_array(cls, lay: Layout, x: FloatArray, present: BoolArray) -> Frame:
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
        loaded = i8[:, 3] > 0.01
        return cls(x, u, present, energized, loaded, vmean, vmean_u, i_mean)


@dataclass
class Consts:
    """Per-profile matrices for Frame.from_array (shapes (n, K) or (n, 8) for P4 + Q4)."""

    mag_pct: FloatArray
    mag_floor: FloatArray
    const_a: FloatArray
    res_abs: FloatArray
    res_rel: FloatArray
    pq: IndexArray
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
        pq = np.r_[np.arange(P4.start, P4.stop), np.arange(Q4.start, Q4.stop)]

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
            pq,
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
