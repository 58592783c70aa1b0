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

import functools
import math
from collections.abc import Sequence
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
from .core import slot_keys

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


# the estimator's reading slots (one owner: ``core.slot_keys``); a capture's means are laid out
# in this order, so a slot's index is its column
SLOT_KEYS = tuple(k for k, _ in slot_keys(3))
SLOT_INDEX = {k: j for j, k in enumerate(SLOT_KEYS)}


@dataclass(frozen=True)
class _Layout:
    """Where each reading of a list of (meter, keys) finds what its uncertainty depends on.

    Indexes are flat positions in the (meters, slots + 1) matrix of readings whose last
    column is NaN (a reading that depends on nothing there)."""

    split: IArray  # where each meter's readings end
    at: IArray  # the reading itself
    i_at: IArray  # its phase current
    p_at: IArray
    q_at: IArray
    total: IArray  # rows of totals, and their meter
    total_meter: IArray
    res_rows: IArray  # rows with a register: its scale x ratio, float or integer
    res_scale: FArray
    res_float: NDArray[np.bool_]
    v_n: FArray
    i_n: FArray
    angle: NDArray[np.bool_]
    groups: tuple[tuple[str, ClassSpec, IArray, FArray], ...]  # quantity, class, rows, phases


_NS = len(SLOT_KEYS) + 1


class ReadingStd:
    """Standard uncertainty of each reading beyond the meter's gains (the module docstring's
    rules), for all readings of a step at once: class specs, rated values, register
    resolutions and who-depends-on-what are laid out once per list of meters and keys (a
    session repeats a few); each capture is then arithmetic on arrays."""

    MAX = 256

    def __init__(self, profile: Profile):
        self.profile = profile
        self._layouts: dict[tuple[tuple[str, tuple[str, ...]], ...], _Layout] = {}

    def _layout(self, items: Sequence[tuple[Meter, tuple[str, ...]]]) -> _Layout:
        memo = tuple((m.id, k) for m, k in items)
        hit = self._layouts.get(memo)
        if hit is not None:
            return hit
        at, i_at, p_at, q_at, tot, tot_m, counts = [], [], [], [], [], [], []
        res_rows, res_scale, res_float, v_n, i_n, qty, spec_of = [], [], [], [], [], [], []
        row = 0
        for mi, (meter, keys) in enumerate(items):
            vn, inom = rated(self.profile, meter)
            specs = {c: class_spec(c, getattr(meter.classes, c)) for c in "vipq"}
            counts.append(len(keys))
            base = mi * _NS
            for key in keys:
                q, ph = split_key(key)
                at.append(base + SLOT_INDEX[key])
                i_at.append(base + SLOT_INDEX.get(f"i.{ph}", _NS - 1))
                p_at.append(base + SLOT_INDEX.get(f"p.{ph}", _NS - 1))
                q_at.append(base + SLOT_INDEX.get(f"q.{ph}", _NS - 1))
                if ph == "T":
                    tot.append(row)
                    tot_m.append(mi)
                try:
                    reg = self.profile.meter_map(meter.id).spec(key)
                    res_rows.append(row)
                    res_scale.append(reg.scale * ratio(meter, key))
                    res_float.append(reg.dtype.startswith("float"))
                except KeyError:
                    pass
                v_n.append(vn * (SQRT3 if q == "v_ll" else 1.0))
                i_n.append(inom)
                qty.append(q)
                spec_of.append(specs[_CLASS_OF.get(q, "i")])
                row += 1
        groups: dict[tuple[str, ClassSpec], list[int]] = {}
        for r, (q, sp) in enumerate(zip(qty, spec_of, strict=True)):
            if q != "v_ang":
                groups.setdefault((q, sp), []).append(r)
        hit = _Layout(
            np.cumsum(counts)[:-1],
            np.array(at, np.int64),
            np.array(i_at, np.int64),
            np.array(p_at, np.int64),
            np.array(q_at, np.int64),
            np.array(tot, np.int64),
            np.array(tot_m, np.int64),
            np.array(res_rows, np.int64),
            np.array(res_scale, float),
            np.array(res_float, bool),
            np.array(v_n, float),
            np.array(i_n, float),
            np.array([q in ("i_ang", "v_ang") for q in qty], bool),
            tuple(
                (q, sp, np.array(rows, np.int64), np.where(np.isin(rows, tot), 3.0, 1.0))
                for (q, sp), rows in groups.items()
            ),
        )
        while len(self._layouts) >= self.MAX:  # oldest first: memory stays flat
            self._layouts.pop(next(iter(self._layouts)))
        self._layouts[memo] = hit
        return hit

    def from_slots(
        self, items: Sequence[tuple[Meter, tuple[str, ...]]], slot: FArray, rep: FArray
    ) -> list[FArray]:
        """The standard uncertainty of each listed reading of each meter: ``items`` are
        (meter, keys), ``slot`` their (meters, slots) values in ``SLOT_KEYS`` order (NaN
        where a meter has none), ``rep`` the repeatabilities of the listed keys, concatenated.
        Returns one array per meter."""
        if not items:
            return []
        lay = self._layout(items)
        full = np.empty((len(items), _NS))
        full[:, :-1] = slot
        full[:, -1] = math.nan
        flat = full.reshape(-1)
        x = flat[lay.at]
        i_dep = flat[lay.i_at]
        if len(lay.total):
            abc = full[:, 6:9]
            ok = ~np.isnan(abc)
            with np.errstate(invalid="ignore", divide="ignore"):
                i_tot = np.where(ok, abc, 0.0).sum(1) / ok.sum(1)
            i_dep[lay.total] = i_tot[lay.total_meter]
        res = np.zeros(len(x))
        if len(lay.res_rows):
            rr = lay.res_rows
            res[rr] = resolution_limit(lay.res_scale, x[rr], lay.res_float)
        a = np.zeros(len(x))
        u_deg = np.full(len(x), ANGLE_U_DEG)
        for q, spec, rows, n in lay.groups:
            xs, i_n = x[rows], lay.i_n[rows]
            if q in ("v_ln", "v_ll", "i"):
                a[rows] = magnitude_limit(spec, xs, lay.v_n[rows] if q != "i" else i_n)
            elif q == "i_ang":
                i = np.abs(i_dep[rows])
                u_i = magnitude_limit(spec, i, i_n) / SQRT3
                with np.errstate(invalid="ignore", divide="ignore"):
                    u_deg[rows] = np.maximum(
                        ANGLE_U_DEG, np.where(i > 0, np.degrees(u_i / i), 180.0)
                    )
            else:
                pd, qd = flat[lay.p_at[rows]], flat[lay.q_at[rows]]
                s_abs = np.hypot(np.where(np.isnan(pd), 0.0, pd), np.where(np.isnan(qd), 0.0, qd))
                a[rows] = power_limit(
                    spec, xs, s_abs, i_dep[rows] / i_n, n * lay.v_n[rows] * i_n, reactive=q == "q"
                )
        out = np.sqrt((PER_READING_SHARE * a / SQRT3) ** 2 + (res / SQRT3) ** 2 + rep**2)
        ang = lay.angle
        out[ang] = np.radians(np.hypot(u_deg[ang], rep[ang]))
        return np.split(out, lay.split)


@functools.lru_cache(maxsize=16)
def _angle_mask(keys: tuple[str, ...]) -> NDArray[np.bool_]:
    return np.array([split_key(k)[0] in ("i_ang", "v_ang") for k in keys], bool)


@dataclass(frozen=True)
class CaptureMeans:
    """One capture's readings per meter: the mean of each ok reading over the snapshots and
    its repeatability (the standard deviation of the mean), NaN where a reading is missing or
    not ok in some snapshot. Rows: the meters present in every snapshot; columns: ``keys``."""

    rows: dict[str, int]
    mean: FArray
    rep: FArray
    keys: tuple[str, ...]

    def values(self, meter: str) -> dict[str, float]:
        """The meter's ok means by key (empty for a meter not in every snapshot)."""
        j = self.rows.get(meter)
        if j is None:
            return {}
        return {k: v for k, v in zip(self.keys, self.mean[j].tolist(), strict=True) if v == v}


def capture_means(
    meters: Sequence[str], snaps: Sequence[Snapshot], keys: Sequence[str] = SLOT_KEYS
) -> CaptureMeans:
    """Per meter, the mean of every ok reading of ``keys`` over the capture and its
    repeatability, all meters at once (``CaptureMeans``).

    A reading counts only if it is ok in every snapshot of the capture; angles are averaged
    about the first snapshot's value (no jump at ±180°).
    """
    nan, ok_q = math.nan, Quality.OK
    keys = tuple(keys)
    ang = _angle_mask(keys)
    present = [m for m in meters if all(s.meters.get(m) is not None for s in snaps)]
    if not present or not snaps:
        return CaptureMeans({}, np.zeros((0, len(keys))), np.zeros((0, len(keys))), keys)
    rows = []
    nans = [nan] * len(keys)
    for s in snaps:
        for m in present:
            b = s.meters[m]
            vals, qual = b.values, b.quality
            row = list(map(vals.get, keys, nans))  # one C loop: this runs per reading
            if not (vals.keys() <= qual.keys() and list(qual.values()).count(ok_q) == len(qual)):
                row = [x if qual.get(k) is ok_q else nan for k, x in zip(keys, row, strict=True)]
            rows.append(row)
    # absent from a snapshot or not ok in one: NaN there, and so NaN in the mean
    arr = np.array(rows, float).reshape(len(snaps), len(present), len(keys))
    if ang.any():
        ref = arr[0][:, ang]
        arr[:, :, ang] = ref + (np.mod(arr[:, :, ang] - ref + 180.0, 360.0) - 180.0)
    n = arr.shape[0]
    mean = arr.mean(axis=0)
    rep = arr.std(axis=0, ddof=1) / math.sqrt(n) if n > 1 else np.where(np.isnan(mean), nan, 0.0)
    return CaptureMeans({m: j for j, m in enumerate(present)}, mean, rep, keys)
