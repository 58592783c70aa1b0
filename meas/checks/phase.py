"""Phase consistency of one meter: sequence, unbalance, power-angle spread, wiring signature."""

from __future__ import annotations

import numpy as np

from .. import phasors as ph
from ..results import CheckResult
from .base import FAIL, PASS, WARN, judge1, na, result
from .diagnose import signatures
from .frame import I_ANG, I_PH, P4, Q4, V_ANG, V_LL, V_LN, Frame, Layout

_WIRING_TEXT = {
    "ct_reversed": "the CT of phase {x} is reversed (or its secondary leads are swapped): P and Q of that phase have the wrong sign",
    "phases_swapped": "current inputs {x} are swapped: check which CT feeds which current terminal (pair chosen by the expected flow direction)",
    "vi_mismatch": "voltage and current inputs belong to different phases ({x} deg): check the voltage terminals against the CTs",
}


def _sequence(lay: Layout, fr: Frame) -> list[CheckResult]:
    check = "phase.v_sequence"
    sign = ph.sequence_sign(np.nan_to_num(fr.x[:, V_ANG], nan=0.0)).tolist()
    has = lay.has[:, V_ANG].all(axis=1).tolist()
    good = (fr.energized & ~np.isnan(fr.x[:, V_ANG]).any(axis=1)).tolist()
    out = []
    for mi, m in enumerate(lay.meters):
        if not has[mi]:
            out.append(na(check, m.id, "the register map has no voltage angles"))
        elif not good[mi]:
            out.append(na(check, m.id, "no voltage (or no good angle readings) at the meter"))
        elif sign[mi] > 0:
            out.append(result(check, m.id, PASS, 1.0, message="voltage phase sequence A-B-C (positive)"))
        else:
            out.append(result(check, m.id, FAIL, float(sign[mi]), message=(
                "voltage phase sequence is A-C-B (negative): two voltage connections are swapped at the meter or the supply "
                "rotation is reversed; compare with the other meters"), cause="v_sequence_negative"))
    return out


def _v_unbalance(lay: Layout, fr: Frame) -> list[CheckResult]:
    check = "phase.v_unbalance"
    x = fr.x
    ang = lay.angles
    vph = ph.phasor(x[:, V_LN], x[:, V_ANG])
    u2_ph = ph.unbalance_u2(vph)
    u2_mag = ph.unbalance_iec_ll(x[:, V_LL])
    nema = ph.lvur(x[:, V_LL])
    warn = lay.limits.param(check, "warn_pct", lay.limits.s.unbalance_warn_pct)
    fail = lay.limits.param(check, "fail_pct", 2.5 * warn)
    use = (ang & ~np.isnan(u2_ph)).tolist()
    u2v = np.where(use, u2_ph, u2_mag).tolist()
    nema, live = nema.tolist(), fr.energized.tolist()
    out = []
    for mi, m in enumerate(lay.meters):
        if not live[mi]:
            out.append(na(check, m.id, "no voltage at the meter", "%"))
            continue
        use_ph = use[mi]
        u2 = u2v[mi]
        how = "from symmetrical components (IEC 61000-4-30 style)" if use_ph else "from L-L magnitudes (IEC 61000-4-30 formula)"
        if u2 != u2:
            out.append(na(check, m.id, "no good voltage readings to compute unbalance", "%"))
            continue
        code = FAIL if u2 > fail else WARN if u2 > warn else PASS
        extra = f"; NEMA MG-1 LVUR {nema[mi]:.2f} %" if nema[mi] == nema[mi] else ""
        if code == PASS:
            msg = f"voltage unbalance u2 = {u2:.2f} % {how}{extra}"
            out.append(result(check, m.id, PASS, u2, warn, "%", msg))
        else:
            msg = (f"voltage unbalance u2 = {u2:.2f} % {how}{extra}, above {warn if code == WARN else fail:g} %: "
                   "a missing or reversed voltage connection, a blown VT fuse, or a strongly unbalanced supply")
            out.append(result(check, m.id, code, u2, warn if code == WARN else fail, "%", msg, "v_unbalance"))
    return out


def _i_unbalance(lay: Layout, fr: Frame) -> list[CheckResult]:
    check = "phase.i_unbalance"
    x = fr.x
    iph = ph.phasor(x[:, I_PH], x[:, I_ANG])
    u2 = ph.unbalance_u2(iph)
    dev = ph.lvur(x[:, I_PH])
    warn = lay.limits.param(check, "warn_pct", 50.0)
    min_load = lay.limits.param(check, "min_load", 0.05)
    has = lay.has[:, I_PH].all(axis=1).tolist()
    with np.errstate(invalid="ignore"):
        loaded = (fr.i_mean >= min_load * lay.i_n).tolist()
    use = (lay.angles & ~np.isnan(u2)).tolist()
    vals = np.where(use, u2, dev).tolist()
    out = []
    for mi, m in enumerate(lay.meters):
        if not has[mi]:
            out.append(na(check, m.id, "the register map has no phase currents", "%"))
            continue
        if not loaded[mi]:
            out.append(na(check, m.id, f"current below {min_load:.0%} of the CT rating: unbalance not meaningful", "%"))
            continue
        use_ph = use[mi]
        val = vals[mi]
        how = "I2/I1" if use_ph else "max deviation from the mean current"
        code = WARN if val > warn else PASS
        msg = f"current unbalance ({how}) {val:.1f} %"
        if code == WARN:
            msg += f", above {warn:g} %: a very unbalanced load, or a CT or current-input wiring error (see phase.wiring)"
        out.append(result(check, m.id, code, val, warn, "%", msg, "i_unbalance" if code == WARN else ""))
    return out


def _s_phases(fr: Frame) -> np.ndarray:
    return fr.x[:, P4][:, :3] + 1j * fr.x[:, Q4][:, :3]


def _loaded(lay: Layout, s: np.ndarray, min_load: float) -> np.ndarray:
    mag = np.abs(s)
    rated = (lay.v_n * lay.i_n)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        return (mag >= min_load * rated).all(axis=1) & (mag.min(axis=1) >= 0.2 * mag.max(axis=1))


def _pf_spread(lay: Layout, fr: Frame, s: np.ndarray) -> list[CheckResult]:
    check = "phase.pf_spread"
    warn = lay.limits.param(check, "warn_deg", 45.0)
    ok = _loaded(lay, s, lay.limits.param(check, "min_load", 0.05))
    spread = ph.circular_spread_deg(ph.pf_angle_deg(s.real, s.imag)).tolist()
    ok = ok.tolist()
    out = []
    for mi, m in enumerate(lay.meters):
        if not ok[mi]:
            out.append(na(check, m.id, "load too small or too unbalanced to compare phase power angles", "deg"))
            continue
        code = WARN if spread[mi] > warn else PASS
        msg = f"phase power-factor angles spread over {spread[mi]:.0f} deg"
        if code == WARN:
            msg += f" (more than {warn:g}): very different loads per phase, or a wiring error (see phase.wiring)"
        out.append(result(check, m.id, code, spread[mi], warn, "deg", msg, "pf_spread" if code == WARN else ""))
    return out


def _wiring(lay: Layout, fr: Frame, s: np.ndarray) -> list[CheckResult]:
    check = "phase.wiring"
    ok = _loaded(lay, s, lay.limits.param(check, "min_load", 0.05))
    sigs = signatures(np.where(ok[:, None], s, np.nan), lay.axis, lay.is_load,
                      lay.limits.param(check, "trip_deg", 75.0), lay.limits.param(check, "coherent_deg", 40.0))
    has = (lay.has[:, P4].all(axis=1) & lay.has[:, Q4].all(axis=1)).tolist()
    trip = lay.limits.param(check, "trip_deg", 75.0)
    out = []
    for mi, m in enumerate(lay.meters):
        sg = sigs[mi]
        if m.branch is None or not has[mi]:
            out.append(na(check, m.id, "the meter lacks per-phase P and Q", "deg"))
        elif sg is None:
            out.append(na(check, m.id, "load too small or too unbalanced to read the wiring signature", "deg"))
        elif not sg.cause:
            out.append(result(check, m.id, PASS, sg.spread_deg, trip, "deg",
                              "phase powers consistent with correct CT and current-input wiring"))
        else:
            parts = []
            for c in sg.cause.split(","):
                kind, _, arg = c.partition(":")
                if c == "ct_reversed:ABC":
                    parts.append("all three CTs are reversed or the meter faces the wrong way: a load cannot deliver power")
                else:
                    parts.append(_WIRING_TEXT[kind].format(x=arg))
            extra = ""
            if (lay.angles[mi] and not np.isnan(fr.x[mi, I_ANG]).any()
                    and ph.sequence_sign(fr.x[mi, I_ANG]) < 0 < ph.sequence_sign(np.nan_to_num(fr.x[mi, V_ANG]))):
                extra = " (current angles run in negative sequence)"
            msg = "; ".join(parts) + extra + f" [phase power angles spread {sg.spread_deg:.0f} deg, {sg.corrected_deg:.0f} deg once corrected]"
            out.append(result(check, m.id, FAIL, sg.spread_deg, lay.limits.param(check, "trip_deg", 75.0), "deg", msg, sg.cause))
    return out


def phase_checks(lay: Layout, fr: Frame) -> list[CheckResult]:
    s = _s_phases(fr)
    return _sequence(lay, fr) + _v_unbalance(lay, fr) + _i_unbalance(lay, fr) + _pf_spread(lay, fr, s) + _wiring(lay, fr, s)


__all__ = ["phase_checks", "judge1"]
