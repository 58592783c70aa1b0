"""What the profile alone decides for the checks, built once per profile.

``Layout`` holds each meter's mapped columns, register scales, ratings, class specs and
expected power direction, plus what ``Frame.build`` needs to fill a snapshot in one store.
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
from ..scaling import ratio
from ..tolerance import ClassSpec, Limits, class_spec
from .accuracy import Consts
from .columns import COL, I_ANG, KEYS, V_ANG, BoolArray, FloatArray, IndexArray, rows_all


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


def _source_distance(profile: Profile) -> dict[str, int]:
    """Per bus, the fewest branches to a source bus (all switches closed); unreachable: absent."""
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
    return dist


def _flow_axes(profile: Profile) -> tuple[NDArray[np.int_], BoolArray]:
    """Expected power direction of every meter (diagnose.FORWARD ...) and whether it meters a load.

    Loads draw power (forward); shunts exchange reactive power; on a line, power is expected
    to flow away from the sources (shortest electrical distance in branches, all switches
    closed); equal distances at both ends leave the direction open (a tie).
    """
    from .diagnose import BACKWARD, EITHER, FORWARD, REACTIVE

    dist = _source_distance(profile)
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
