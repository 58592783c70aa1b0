"""Data quality: communication state, frozen values, out-of-range values, excess noise.

Frozen and noise use the recent history (oldest first); both look only at quantities that
must move on a live, loaded circuit: a real meter's V and I change in the last digits from
one poll to the next, and a healthy meter repeats far better than its class limit
(common practice; from memory).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..results import CheckResult
from ..snapshot import CommState, Quality, Snapshot
from .base import FAIL, PASS, WARN, fmt, na, result
from .frame import I_PH, P4, V_LL, V_LN, Frame, Layout


def comm_checks(lay: Layout, snap: Snapshot) -> list[CheckResult]:
    check = "quality.comm"
    out = []
    ok_state, ok_set = CommState.OK, {Quality.OK}
    for m in lay.meters:
        b = snap.meters.get(m.id)
        if b is not None and b.state is ok_state and set(b.quality.values()) <= ok_set:
            out.append(result(check, m.id, PASS, message="all values ok"))
            continue
        if b is None:
            out.append(result(check, m.id, FAIL, message=f"{m.id} is missing from this snapshot: it is not being polled",
                              cause="missing"))
            continue
        bad = sorted(k for k, q in b.quality.items() if q is not Quality.OK)
        if b.state in (CommState.FAILING, CommState.OFFLINE) or (bad and len(bad) == len(b.quality)):
            why = b.error or f"communication {b.state}"
            msg = (f"no good data from {m.id}: {why}; check its wiring, address (unit {m.unit_id}) and "
                   f"{m.transport.endpoint}; captured data is kept")
            out.append(result(check, m.id, FAIL, float(b.error_count), message=msg, cause=f"comm:{b.state}"))
        elif bad:
            stale = [k for k in bad if b.quality[k] is Quality.STALE]
            kinds = sorted({str(b.quality[k]) for k in bad})
            msg = (f"{len(bad)} value(s) not ok ({', '.join(kinds)}): {', '.join(bad[:6])}{' ...' if len(bad) > 6 else ''}; "
                   + ("values repeated from an earlier cycle" if stale else "check those registers in the map"))
            out.append(result(check, m.id, WARN, float(len(bad)), message=msg, cause="stale" if stale else "partial"))
        elif b.state is CommState.DEGRADED:
            out.append(result(check, m.id, WARN, message=f"{m.id} answered after a retry: {b.error or 'degraded'}", cause="degraded"))
        else:
            out.append(result(check, m.id, PASS, message="all values ok"))
    return out


def range_checks(lay: Layout, fr: Frame) -> list[CheckResult]:
    out = []
    band = lay.limits.param("quality.v_range", "band", lay.limits.s.voltage_band)
    i_fail = lay.limits.param("quality.i_range", "fail_fraction", 1.2)  # CT extended rating 120 % (common practice)
    v = fr.x[:, V_LN]
    v = np.where(np.isnan(v).all(axis=1)[:, None], fr.x[:, V_LL] / np.sqrt(3.0), v)
    no_v = np.isnan(v).all(axis=1).tolist()
    with np.errstate(invalid="ignore"):
        dev = 100.0 * (v / lay.v_n[:, None] - 1.0)
        j_v = np.argmax(np.where(np.isnan(dev), -1.0, np.abs(dev)), axis=1)
        d_v = dev[np.arange(len(dev)), j_v].tolist()
        i = fr.x[:, I_PH]
        no_i = np.isnan(i).all(axis=1).tolist()
        load = (100.0 * np.max(np.where(np.isnan(i), -np.inf, i), axis=1) / lay.i_n).tolist()
    j_v = j_v.tolist()
    live, has_i = fr.energized.tolist(), lay.has[:, I_PH].any(axis=1).tolist()
    b100, warn = 100 * band, lay.limits.warn
    for mi, m in enumerate(lay.meters):
        if no_v[mi]:
            out.append(na("quality.v_range", m.id, "no good voltage reading", "%"))
        elif not live[mi]:
            out.append(na("quality.v_range", m.id, "no voltage at the meter (see network.energization)", "%"))
        else:
            d = d_v[mi]
            code = FAIL if abs(d) > b100 else WARN if abs(d) > b100 * warn else PASS
            if code == PASS:
                out.append(result("quality.v_range", m.id, PASS, d, b100, "%", "voltages within the zone band"))
            else:
                msg = (f"v_ln.{'ABC'[j_v[mi]]} = {fmt(float(v[mi, j_v[mi]]), 'V')} is {d:+.1f} % from the zone nominal "
                       f"{fmt(float(lay.v_n[mi]), 'V')} (band +-{b100:g} %): check the VT ratio and the supply")
                out.append(result("quality.v_range", m.id, code, d, b100, "%", msg, "v_range"))
        if not has_i[mi]:
            out.append(na("quality.i_range", m.id, "the register map has no phase currents", "%"))
        elif no_i[mi]:
            out.append(na("quality.i_range", m.id, "no good current reading", "%"))
        else:
            ld = load[mi]
            code = FAIL if ld > 100 * i_fail else WARN if ld > 100 else PASS
            if code == PASS:
                out.append(result("quality.i_range", m.id, PASS, ld, 100.0, "%", "currents within the CT rating"))
            else:
                msg = (f"current {ld:.0f} % of the CT rating {lay.i_n[mi]:g} A: overload, or a wrong CT ratio "
                       f"(ct_primary_a / ct_ratio of {m.id})")
                out.append(result("quality.i_range", m.id, code, ld, 100 * i_fail, "%", msg, "i_range"))
    return out


def _series(lay: Layout, frames: Sequence[Frame]) -> np.ndarray:
    """(t, n, K) stack of the frames' values."""
    return np.stack([f.x for f in frames])


def frozen_checks(lay: Layout, frames: Sequence[Frame]) -> list[CheckResult]:
    """Frozen: every V, I and P of a live meter identical over the last frozen_cycles snapshots."""
    check = "quality.frozen"
    need = max(2, lay.limits.s.frozen_cycles)
    cur = frames[-1]
    out = []
    if len(frames) < need:
        return [na(check, m.id, f"needs {need} snapshots of history, has {len(frames)}") for m in lay.meters]
    x = _series(lay, frames[-need:])
    cols = np.r_[np.arange(V_LN.start, V_LN.stop), np.arange(I_PH.start, I_PH.stop), np.arange(P4.start, P4.stop)]
    sub = x[:, :, cols]
    same = (np.all((sub == sub[-1]) | np.isnan(sub), axis=(0, 2)) & ~np.isnan(sub[-1]).all(axis=1)).tolist()
    live = cur.energized.tolist()
    for mi, m in enumerate(lay.meters):
        if not live[mi]:
            out.append(na(check, m.id, "no voltage at the meter: nothing has to move"))
        elif same[mi]:
            msg = (f"V, I and P of {m.id} have not changed over {need} snapshots: the meter or its gateway is "
                   "repeating a cached value; check its communication module and the map's register kind")
            out.append(result(check, m.id, FAIL, float(need), float(need), "snapshots", msg, "frozen"))
        else:
            out.append(result(check, m.id, PASS, message="values are updating"))
    return out


def noise_checks(lay: Layout, frames: Sequence[Frame]) -> list[CheckResult]:
    """Excess noise: the poll-to-poll scatter of V and I against the class limit.

    The scatter is estimated from first differences (sigma = rms(diff) / sqrt 2), which a
    slow settling trend hardly affects; V and I of the three phases are pooled.
    """
    check = "quality.noise"
    need = int(lay.limits.param(check, "min_snapshots", 8))
    ratio_max = lay.limits.param(check, "max_sigma_of_limit", 0.35)
    if len(frames) < need:
        return [na(check, m.id, f"needs {need} snapshots of history, has {len(frames)}", "1") for m in lay.meters]
    x = _series(lay, frames[-need:])
    v, i = x[:, :, V_LN], x[:, :, I_PH]
    with np.errstate(invalid="ignore", divide="ignore"):
        dv = np.diff(v, axis=0) / np.abs(v[1:])
        di = np.diff(i, axis=0) / np.abs(i[1:])
    lim_v = lay.spec_v.main_pct / 100.0  # (n, 1)
    lim_i = lay.spec_i.main_pct / 100.0
    with np.errstate(invalid="ignore"):
        loaded_i = np.all(i >= 0.05 * lay.i_n[None, :, None], axis=(0, 2)) & lay.has[:, I_PH].all(axis=1)
        live = np.all(v >= 0.5 * lay.v_n[None, :, None], axis=(0, 2))
    zv = np.where(live[None, :, None], dv / lim_v[None], np.nan)
    zi = np.where(loaded_i[None, :, None], di / lim_i[None], np.nan)
    z = np.concatenate([zv, zi], axis=2)  # (t-1, n, 6)
    ok = ~np.isnan(z)
    cnt = ok.sum(axis=(0, 2))
    with np.errstate(invalid="ignore", divide="ignore"):
        sig = np.sqrt(np.where(ok, z * z, 0.0).sum(axis=(0, 2)) / np.maximum(cnt, 1) / 2.0)
    sig_l, cnt_l, any_l = sig.tolist(), cnt.tolist(), (live | loaded_i).tolist()
    warn = lay.limits.warn * ratio_max
    out = []
    for mi, m in enumerate(lay.meters):
        if not any_l[mi]:
            out.append(na(check, m.id, "no steady voltage or current to judge noise", "1"))
            continue
        if cnt_l[mi] < 4:
            out.append(na(check, m.id, "too few good readings to judge noise", "1"))
            continue
        sg = sig_l[mi]
        code = FAIL if sg > ratio_max else WARN if sg > warn else PASS
        if code == PASS:
            out.append(result(check, m.id, PASS, sg, ratio_max, "1", "poll-to-poll scatter well inside the class"))
        else:
            msg = (f"readings of {m.id} scatter by {sg:.2f} of their class limit from poll to poll (allowed {ratio_max:g}): "
                   "a loose connection, interference on the VT/CT wiring, or a faulty meter")
            out.append(result(check, m.id, code, sg, ratio_max, "1", msg, "noisy"))
    return out


__all__ = ["comm_checks", "range_checks", "frozen_checks", "noise_checks", "V_LL"]
