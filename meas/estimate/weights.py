"""What each reading weighs: its accuracy class split into a shared gain and a per-reading part.

A class limit ±a is mostly a systematic error of one instrument (CT/VT ratio error and meter
calibration) that holds all session, so the estimator carries it as a per-meter voltage gain
and current gain with prior u = a/√3 (JCGM 100:2008 §4.3.7, the rectangular rule;
CALIBRATION_NOTES §1.2). What is left per reading is the part of the class that can differ
between phases and readings (our rule: ``PER_READING_SHARE`` = 0.5 of the class standard
uncertainty), the register resolution, and the repeatability within the capture (the standard
deviation of the mean over the capture's snapshots). They combine root-sum-square (GUM §5.1.2).

Angles: a meter's current-to-voltage angle gets u = max(``ANGLE_U_DEG``, u(I)/|I|): the first
is a CT's phase displacement of about 0.5° read as a rectangular limit (IEC 61869-2 class 0.5
allows 30', from memory), the second the angle an error of the current magnitude's size makes.
Angles are used only above ``ANGLE_MIN_FRAC`` of rated current (our rule).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..model import Meter, Profile
from ..quantities import split_key
from ..scaling import ratio
from ..snapshot import Quality, Snapshot
from ..tolerance import (
    SQRT3,
    ClassSpec,
    class_spec,
    magnitude_limit,
    power_limit,
    resolution_limit,
)

FArray = NDArray[np.float64]
IArray = NDArray[np.int64]

PER_READING_SHARE = 0.5
ANGLE_U_DEG = 0.5 / SQRT3
ANGLE_MIN_FRAC = 0.02
_CLASS_OF = {"v_ln": "v", "v_ll": "v", "i": "i", "p": "p", "q": "q"}


def rated(profile: Profile, meter: Meter) -> tuple[float, float]:
    """(nominal phase voltage, rated current) of a meter: its CT primary, else the bench base."""
    zone = profile.zone_of_bus(meter.bus)
    v_n = zone.bench_v_ll / SQRT3
    i_n = meter.ct_primary_a or profile.bench.s_base_va / (SQRT3 * zone.bench_v_ll)
    return v_n, i_n


def gain_std(meter: Meter) -> tuple[float, float]:
    """Prior standard uncertainty of the voltage and the current gain: class / √3."""
    v = class_spec("v", meter.classes.v).main_pct / 100 / SQRT3
    i = class_spec("i", meter.classes.i).main_pct / 100 / SQRT3
    return v, i


_SLOT_KEYS = (
    "v_ln.A", "v_ln.B", "v_ln.C", "v_ll.AB", "v_ll.BC", "v_ll.CA", "i.A", "i.B", "i.C",
    "p.A", "p.B", "p.C", "q.A", "q.B", "q.C", "p.T", "q.T",
    "i_ang.A", "i_ang.B", "i_ang.C", "v_ang.B", "v_ang.C",
)  # fmt: skip
_AT = {k: j for j, k in enumerate(_SLOT_KEYS)}


_QUANTITIES = ("v_ln", "v_ll", "i", "p", "q", "i_ang", "v_ang")


@dataclass(frozen=True)
class _Recipe:
    """Where each reading of one meter's key list finds what its uncertainty depends on."""

    res_scale: FArray  # register scale x ratio, NaN without a register
    res_float: NDArray[np.bool_]
    quantity: IArray  # index into ``_QUANTITIES``
    i_src: IArray  # index into the meter's slot vector of the phase current (-1: none)
    p_src: IArray
    q_src: IArray
    total: NDArray[np.bool_]


class ReadingStd:
    """Standard uncertainty of each reading beyond the meter's gains (the module docstring's
    rules), for all readings of a step at once: class specs, rated values, register
    resolutions and who-depends-on-what are looked up once per meter and key list; each
    capture is then arithmetic on arrays."""

    def __init__(self, profile: Profile):
        self.profile = profile
        self._meter: dict[str, tuple[float, float, tuple[ClassSpec, ...]]] = {}
        self._recipes: dict[tuple[str, tuple[str, ...]], _Recipe] = {}

    def _static(self, meter: Meter) -> tuple[float, float, tuple[ClassSpec, ...]]:
        hit = self._meter.get(meter.id)
        if hit is None:
            v_n, i_n = rated(self.profile, meter)
            specs = tuple(class_spec(k, getattr(meter.classes, k)) for k in ("v", "i", "p", "q"))
            hit = self._meter[meter.id] = (v_n, i_n, specs)
        return hit

    def _recipe(self, meter: Meter, keys: tuple[str, ...]) -> _Recipe:
        hit = self._recipes.get((meter.id, keys))
        if hit is not None:
            return hit
        scale, flt = [], []
        for key in keys:
            try:
                spec_reg = self.profile.meter_map(meter.id).spec(key)
                scale.append(spec_reg.scale * ratio(meter, key))
                flt.append(spec_reg.dtype.startswith("float"))
            except KeyError:
                scale.append(math.nan)
                flt.append(False)
        split = [split_key(k) for k in keys]
        hit = _Recipe(
            np.array(scale, float),
            np.array(flt, bool),
            np.array([_QUANTITIES.index(q) for q, _ in split], np.int64),
            np.array([_AT.get(f"i.{ph}", -1) for _, ph in split], np.int64),
            np.array([_AT.get(f"p.{ph}", -1) for _, ph in split], np.int64),
            np.array([_AT.get(f"q.{ph}", -1) for _, ph in split], np.int64),
            np.array([ph == "T" for _, ph in split], bool),
        )
        self._recipes[(meter.id, keys)] = hit
        return hit

    def __call__(
        self, meter: Meter, keys: Sequence[str], vals: Mapping[str, float], reps: FArray
    ) -> FArray:
        """The standard uncertainty of each of ``keys`` of one meter."""
        return self.many([(meter, keys, vals, reps)])[0]

    def many(
        self, items: Sequence[tuple[Meter, Sequence[str], Mapping[str, float], FArray]]
    ) -> list[FArray]:
        """``__call__`` for several meters: (meter, keys, values, repeatabilities) each."""
        if not items:
            return []
        nan, ns = math.nan, len(_SLOT_KEYS) + 1
        recipes = [self._recipe(m, tuple(k)) for m, k, _, _ in items]
        statics = [self._static(m) for m, _, _, _ in items]
        counts = [len(k) for _, k, _, _ in items]
        mi = np.repeat(np.arange(len(items)), counts)
        slot = np.array(
            [[vals.get(k, nan) for k in _SLOT_KEYS] + [nan] for _, _, vals, _ in items], float
        )
        x = np.array([vals[k] for _, keys, vals, _ in items for k in keys], float)
        rep = np.concatenate([np.asarray(r, float) for _, _, _, r in items])

        def cat(field: str) -> NDArray:
            return np.concatenate([getattr(rc, field) for rc in recipes])

        qty, tot = cat("quantity"), cat("total")
        scale, flt = cat("res_scale"), cat("res_float")
        src = mi * ns
        i_dep = slot.reshape(-1)[src + np.where(cat("i_src") < 0, ns - 1, cat("i_src"))]
        p_dep = slot.reshape(-1)[src + np.where(cat("p_src") < 0, ns - 1, cat("p_src"))]
        q_dep = slot.reshape(-1)[src + np.where(cat("q_src") < 0, ns - 1, cat("q_src"))]
        if tot.any():
            abc = slot[:, 6:9]
            ok = ~np.isnan(abc)
            with np.errstate(invalid="ignore", divide="ignore"):
                i_tot = np.where(ok, abc, 0.0).sum(1) / ok.sum(1)
            i_dep[tot] = i_tot[mi[tot]]
        v_n = np.array([st[0] for st in statics])[mi]
        i_n = np.array([st[1] for st in statics])[mi]
        res = np.zeros(len(x))
        has_reg = ~np.isnan(scale)
        if has_reg.any():
            res[has_reg] = resolution_limit(scale[has_reg], x[has_reg], flt[has_reg])
        a = np.zeros(len(x))
        u_deg = np.full(len(x), ANGLE_U_DEG)
        spec_of = [st[2] for st in statics]
        for specs in dict.fromkeys(spec_of):
            mine = np.array([sp == specs for sp in spec_of], bool)[mi]
            sv, si, sp, sq = specs
            for k, q in enumerate(_QUANTITIES):
                sel = mine & (qty == k)
                if not sel.any() or q == "v_ang":
                    continue
                if q in ("v_ln", "v_ll"):
                    a[sel] = magnitude_limit(sv, x[sel], v_n[sel] * (SQRT3 if q == "v_ll" else 1.0))
                elif q == "i":
                    a[sel] = magnitude_limit(si, x[sel], i_n[sel])
                elif q == "i_ang":
                    i = np.abs(i_dep[sel])
                    u_i = magnitude_limit(si, i, i_n[sel]) / SQRT3
                    with np.errstate(invalid="ignore", divide="ignore"):
                        u_deg[sel] = np.maximum(
                            ANGLE_U_DEG, np.where(i > 0, np.degrees(u_i / i), 180.0)
                        )
                else:
                    pd, qd = p_dep[sel], q_dep[sel]
                    s_abs = np.hypot(
                        np.where(np.isnan(pd), 0.0, pd), np.where(np.isnan(qd), 0.0, qd)
                    )
                    n = np.where(tot[sel], 3.0, 1.0)
                    a[sel] = power_limit(
                        sp if q == "p" else sq,
                        x[sel],
                        s_abs,
                        i_dep[sel] / i_n[sel],
                        n * v_n[sel] * i_n[sel],
                        reactive=q == "q",
                    )
        out = np.sqrt((PER_READING_SHARE * a / SQRT3) ** 2 + (res / SQRT3) ** 2 + rep**2)
        ang = qty >= _QUANTITIES.index("i_ang")
        out[ang] = np.radians(np.hypot(u_deg[ang], rep[ang]))
        return np.split(out, np.cumsum(counts)[:-1])


def capture_means(
    meters: Sequence[str], snaps: Sequence[Snapshot], keys: Sequence[str] = _SLOT_KEYS
) -> tuple[dict[str, dict[str, float]], dict[str, dict[str, float]]]:
    """Per meter, the mean of every ok reading of ``keys`` over the capture and its
    repeatability (the standard deviation of the mean); all meters at once.

    A reading counts only if it is ok in every snapshot of the capture; angles are averaged
    about the first snapshot's value (no jump at ±180°).
    """
    nan, ok_q = math.nan, Quality.OK
    ang = np.array([split_key(k)[0] in ("i_ang", "v_ang") for k in keys], bool)
    present = [m for m in meters if all(s.meters.get(m) is not None for s in snaps)]
    values: dict[str, dict[str, float]] = {m: {} for m in meters}
    reps: dict[str, dict[str, float]] = {m: {} for m in meters}
    if not present or not snaps:
        return values, reps
    rows = []
    for s in snaps:
        for m in present:
            b = s.meters[m]
            vals, qual = b.values, b.quality
            rows.append([vals.get(k, nan) if qual.get(k) is ok_q else nan for k in keys])
    arr = np.array(rows, float).reshape(len(snaps), len(present), len(keys))
    first = snaps[0].meters
    known = np.array([[k in first[m].values for k in keys] for m in present], bool)
    ok = ~np.isnan(arr).any(axis=0) & known
    if ang.any():
        ref = arr[0][:, ang]
        arr[:, :, ang] = ref + (np.mod(arr[:, :, ang] - ref + 180.0, 360.0) - 180.0)
    n = arr.shape[0]
    mean = arr.mean(axis=0)
    rep = arr.std(axis=0, ddof=1) / math.sqrt(n) if n > 1 else np.zeros(mean.shape)
    for j, m in enumerate(present):
        idx: list[int] = np.nonzero(ok[j])[0].tolist()
        mj, rj = mean[j].tolist(), rep[j].tolist()
        values[m] = {keys[t]: mj[t] for t in idx}
        reps[m] = {keys[t]: rj[t] for t in idx}
    return values, reps
