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

import numpy as np

from ..model import Meter, Profile
from ..quantities import split_key
from ..scaling import ratio
from ..snapshot import Snapshot
from ..tolerance import SQRT3, class_spec, magnitude_limit, power_limit, resolution_limit

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


def mean_readings(
    meter: str, snaps: Sequence[Snapshot]
) -> tuple[dict[str, float], dict[str, float]]:
    """Mean of every ok reading over the capture and its repeatability (std of the mean).

    A reading counts only if it is ok in every snapshot of the capture.
    """
    blocks = [s.meters.get(meter) for s in snaps]
    if not blocks or any(b is None for b in blocks):
        return {}, {}
    keys = sorted(blocks[0].values) if blocks[0] is not None else []
    arr = np.array([[b.get(k) for k in keys] for b in blocks if b is not None], float)
    ok = ~np.isnan(arr).any(axis=0)
    ang = np.array([split_key(k)[0] in ("i_ang", "v_ang") for k in keys], bool)
    if ang.any():
        ref = arr[0, ang]
        arr[:, ang] = ref + (np.mod(arr[:, ang] - ref + 180.0, 360.0) - 180.0)
    n = arr.shape[0]
    mean = arr.mean(axis=0)
    rep = arr.std(axis=0, ddof=1) / math.sqrt(n) if n > 1 else np.zeros(len(keys))
    means = {k: float(mean[j]) for j, k in enumerate(keys) if ok[j]}
    reps = {k: float(rep[j]) for j, k in enumerate(keys) if ok[j]}
    return means, reps


def reading_std(
    profile: Profile, meter: Meter, key: str, vals: Mapping[str, float], rep: float
) -> float:
    """Standard uncertainty of one reading beyond the meter's gains (see the module docstring)."""
    q, ph = split_key(key)
    v_n, i_n = rated(profile, meter)
    try:
        spec_reg = profile.meter_map(meter.id).spec(key)
        res = float(
            resolution_limit(
                spec_reg.scale * ratio(meter, key), vals[key], spec_reg.dtype.startswith("float")
            )
        )
    except KeyError:
        res = 0.0
    if q in ("i_ang", "v_ang"):
        u_deg = ANGLE_U_DEG
        if q == "i_ang":
            i = abs(vals.get(f"i.{ph}", math.nan))
            u_i = float(magnitude_limit(class_spec("i", meter.classes.i), i, i_n)) / SQRT3
            u_deg = max(u_deg, math.degrees(u_i / i) if i > 0 else 180.0)
        return math.radians(math.hypot(u_deg, rep))
    kind = _CLASS_OF[q]
    spec = class_spec(kind, getattr(meter.classes, kind))
    x = vals[key]
    if kind == "v":
        a = float(magnitude_limit(spec, x, v_n * (SQRT3 if q == "v_ll" else 1.0)))
    elif kind == "i":
        a = float(magnitude_limit(spec, x, i_n))
    else:
        n = 3.0 if ph == "T" else 1.0
        if ph == "T":
            s_abs = math.hypot(vals.get("p.T", 0.0), vals.get("q.T", 0.0))
            i = float(np.nanmean([vals.get(f"i.{p}", math.nan) for p in "ABC"]))
        else:
            s_abs = math.hypot(vals.get(f"p.{ph}", 0.0), vals.get(f"q.{ph}", 0.0))
            i = vals.get(f"i.{ph}", math.nan)
        a = float(power_limit(spec, x, s_abs, i / i_n, n * v_n * i_n, reactive=kind == "q"))
    return math.sqrt((PER_READING_SHARE * a / SQRT3) ** 2 + (res / SQRT3) ** 2 + rep**2)
