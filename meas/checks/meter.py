"""Meter-internal consistency: totals against phases, S against P and Q, PF, V x I, frequency.

These catch register-map mistakes (scale, address, word order, the S definition, the PF sign
convention) inside one meter. A meter computes its totals from the same samples as its
phases, so the class limits of both sides, taken as independent (RSS), are a generous band:
a map error is off by a factor, far outside it.
"""

from __future__ import annotations

import numpy as np

from ..results import CheckResult
from ..tolerance import judge_many
from .base import FAIL, NA, PASS, WARN, fmt, judge1, na, result
from .frame import COL, I_PH, P4, PF4, Q4, S4, V_LN, F, Frame, Layout


def _worst(vals: np.ndarray, lims: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per row, the column with the largest |value|/limit (NaN ignored): (index, value, limit)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.abs(vals) / lims
    z = np.where(np.isnan(z), -1.0, z)
    j = np.argmax(z, axis=1)
    rows = np.arange(len(vals))
    return j, vals[rows, j], lims[rows, j]


def _sum_check(lay: Layout, fr: Frame, check: str, sl: slice, name: str, unit: str) -> list[CheckResult]:
    x, u = fr.x[:, sl], fr.u[:, sl]
    r = x[:, 3] - x[:, :3].sum(axis=1)
    lim = lay.limits.apply(check, unit, lay.limits.k * np.sqrt((u * u).sum(axis=1)))
    codes = judge_many(r, lim, lay.limits.warn).tolist()
    need = lay.has[:, sl].all(axis=1).tolist()
    r, lim = r.tolist(), lim.tolist()
    out = []
    for mi, m in enumerate(lay.meters):
        if not need[mi]:
            out.append(na(check, m.id, f"the register map has no {name}.A-C and {name}.T", unit))
        elif codes[mi] == NA:
            out.append(na(check, m.id, f"no good reading of every {name}.* in this snapshot", unit))
        elif codes[mi] == PASS:
            out.append(result(check, m.id, PASS, r[mi], lim[mi], unit, f"{name}.T matches the sum of phases"))
        else:
            msg = (f"{name}.T = {fmt(x[mi, 3], unit)} but the phases sum to {fmt(x[mi, :3].sum(), unit)} "
                   f"(off by {fmt(r[mi], unit)}, allowed {fmt(lim[mi], unit)}): check scale, address and "
                   f"word order of {name}.* in map {m.map_id}")
            out.append(result(check, m.id, codes[mi], r[mi], lim[mi], unit, msg, f"register_map:{name}"))
    return out


def _s_total(lay: Layout, fr: Frame) -> list[CheckResult]:
    check = "meter.s_total"
    x, u = fr.x, fr.u
    p, q, s = x[:, P4], x[:, Q4], x[:, S4]
    up, uq, us = u[:, P4], u[:, Q4], u[:, S4]
    vec = np.hypot(p[:, 3], q[:, 3])
    arith = s[:, :3].sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        cp = np.where(vec > 0, p[:, 3] / vec, 0.0)
        cq = np.where(vec > 0, q[:, 3] / vec, 0.0)
    u_vec = np.sqrt((cp * up[:, 3]) ** 2 + (cq * uq[:, 3]) ** 2 + us[:, 3] ** 2)
    u_ar = np.sqrt((us * us).sum(axis=1))
    expect = np.where(lay.vector_s, vec, arith)
    other = np.where(lay.vector_s, arith, vec)
    r = s[:, 3] - expect
    lim = lay.limits.apply(check, "VA", lay.limits.k * np.where(lay.vector_s, u_vec, u_ar))
    dist = lay.limits.param(check, "distortion_pct", 3.0) / 100.0
    # one-sided: harmonics make S exceed the fundamental-based value (REFERENCES.md 4)
    r_eff = np.where(r > 0, np.fmax(r - dist * np.abs(expect), 0.0), r)
    codes = judge_many(r_eff, lim, lay.limits.warn).tolist()
    need_keys = np.where(lay.vector_s, lay.has[:, [COL["p.T"], COL["q.T"], COL["s.T"]]].all(axis=1),
                         lay.has[:, S4].all(axis=1)).tolist()
    r, lim = r.tolist(), lim.tolist()
    out = []
    for mi, m in enumerate(lay.meters):
        definition = "vector (IEEE 1459: |sum of complex phase S|)" if lay.vector_s[mi] else "arithmetic (IEEE 1459: sum of phase S)"
        if not need_keys[mi]:
            out.append(na(check, m.id, "the register map lacks the readings for S total", "VA"))
        elif codes[mi] == NA:
            out.append(na(check, m.id, "no good reading of S total or its parts in this snapshot", "VA"))
        elif codes[mi] == PASS:
            out.append(result(check, m.id, PASS, r[mi], lim[mi], "VA", f"s.T agrees with the {definition} definition"))
        else:
            if abs(float(s[mi, 3] - other[mi])) <= lim[mi]:
                msg = (f"s.T = {fmt(s[mi, 3], 'VA')} fits the other IEEE 1459 definition, not the {definition} one "
                       f"the profile states: set apparent_power in map {m.map_id}")
                cause = "s_definition"
            else:
                msg = (f"s.T = {fmt(s[mi, 3], 'VA')} but the {definition} value is {fmt(expect[mi], 'VA')} "
                       f"(allowed {fmt(lim[mi], 'VA')}): check scale and address of s.* in map {m.map_id}")
                cause = "register_map:s"
            out.append(result(check, m.id, codes[mi], r[mi], lim[mi], "VA", msg, cause))
    return out


def _pf(lay: Layout, fr: Frame) -> list[CheckResult]:
    check = "meter.pf"
    x, u = fr.x, fr.u
    p, s, pf = x[:, P4], x[:, S4], x[:, PF4]
    q = x[:, Q4]
    s = np.where(np.isnan(s), np.hypot(p, q), s)
    rated = lay.v_n * lay.i_n
    small = ~(s >= 0.01 * np.c_[rated, rated, rated, 3 * rated])
    with np.errstate(invalid="ignore", divide="ignore"):
        calc = p / s
        u_calc = np.sqrt((u[:, P4] / s) ** 2 + (p * u[:, S4] / s**2) ** 2)
    r = pf - calc
    lim = lay.limits.apply(check, "1", lay.limits.k * np.sqrt(u_calc**2 + u[:, PF4] ** 2))
    r = np.where(small, np.nan, r)
    j, rv, lv = _worst(r, lim)
    j, rv, lv = j.tolist(), rv.tolist(), lv.tolist()
    names = ("pf.A", "pf.B", "pf.C", "pf.T")
    has = lay.has[:, PF4].any(axis=1).tolist()
    out = []
    for mi, m in enumerate(lay.meters):
        code = judge1(rv[mi], lv[mi], lay.limits.warn)
        if not has[mi]:
            out.append(na(check, m.id, "the register map has no power factor", "1"))
        elif code == NA:
            out.append(na(check, m.id, "too little load (or no good reading) to judge the power factor", "1"))
        elif code == PASS:
            out.append(result(check, m.id, PASS, rv[mi], lv[mi], "1", "power factor matches P/S with the sign of P (IEC)"))
        else:
            k = j[mi]
            if abs(pf[mi, k] + calc[mi, k]) <= lv[mi]:
                msg = (f"{names[k]} = {pf[mi, k]:.3f} is -(P/S) = {-calc[mi, k]:.3f}: the meter uses a lead/lag sign "
                       "convention, not the IEC sign of P; set the meter or the map accordingly")
                cause = "pf_sign_convention"
            else:
                msg = (f"{names[k]} = {pf[mi, k]:.3f} but P/S = {calc[mi, k]:.3f} (allowed +-{lv[mi]:.3f}): check scale "
                       f"and address of pf.* in map {m.map_id}")
                cause = "register_map:pf"
            out.append(result(check, m.id, code, rv[mi], lv[mi], "1", msg, cause))
    return out


def _s_phase(lay: Layout, fr: Frame) -> list[CheckResult]:
    check = "meter.s_phase"
    x, u = fr.x, fr.u
    v, i, s = x[:, V_LN], x[:, I_PH], x[:, S4][:, :3]
    r = s - v * i
    uu = np.sqrt(u[:, S4][:, :3] ** 2 + (i * u[:, V_LN]) ** 2 + (v * u[:, I_PH]) ** 2)
    lim = lay.limits.apply(check, "VA", lay.limits.k * uu)
    j, rv, lv = _worst(r, lim)
    j, rv, lv = j.tolist(), rv.tolist(), lv.tolist()
    need = (lay.has[:, V_LN].all(axis=1) & lay.has[:, I_PH].all(axis=1) & lay.has[:, S4][:, :3].all(axis=1)).tolist()
    out = []
    for mi, m in enumerate(lay.meters):
        code = judge1(rv[mi], lv[mi], lay.limits.warn)
        ph = "ABC"[j[mi]]
        if not need[mi]:
            out.append(na(check, m.id, "the register map lacks v_ln, i or s per phase", "VA"))
        elif code == NA:
            out.append(na(check, m.id, "no good V, I and S of every phase in this snapshot", "VA"))
        elif code == PASS:
            out.append(result(check, m.id, PASS, rv[mi], lv[mi], "VA", "S of every phase matches V x I"))
        else:
            msg = (f"s.{ph} = {fmt(s[mi, j[mi]], 'VA')} but v_ln.{ph} x i.{ph} = {fmt(v[mi, j[mi]] * i[mi, j[mi]], 'VA')}: "
                   f"check the scale of s, v_ln and i in map {m.map_id} and the CT/VT ratios of {m.id}")
            out.append(result(check, m.id, code, rv[mi], lv[mi], "VA", msg, "register_map:s_phase"))
    return out


def _frequency(lay: Layout, fr: Frame) -> list[CheckResult]:
    check = "meter.frequency"
    f = fr.x[:, F].tolist()
    has, live = lay.has[:, F].tolist(), fr.energized.tolist()
    band = float(lay.limits.apply(check, "Hz", lay.limits.s.frequency_band_hz))
    out = []
    for mi, m in enumerate(lay.meters):
        if not has[mi]:
            out.append(na(check, m.id, "the register map has no frequency", "Hz"))
        elif not live[mi]:
            out.append(na(check, m.id, "no voltage at the meter", "Hz"))
        elif f[mi] != f[mi]:
            out.append(na(check, m.id, "no good frequency reading in this snapshot", "Hz"))
        else:
            d = f[mi] - lay.f_nom
            code = judge1(d, band, lay.limits.warn)
            if code == PASS:
                out.append(result(check, m.id, PASS, d, band, "Hz", "frequency within the nominal band"))
            else:
                msg = (f"f = {f[mi]:.3f} Hz is {d:+.3f} Hz from the nominal {lay.f_nom:g} Hz (band +-{band:g} Hz): "
                       "check the supply, or the scale of f.T in map " + m.map_id)
                out.append(result(check, m.id, code, d, band, "Hz", msg, "frequency"))
    return out


def meter_checks(lay: Layout, fr: Frame) -> list[CheckResult]:
    out = _sum_check(lay, fr, "meter.p_sum", P4, "p", "W")
    out += _sum_check(lay, fr, "meter.q_sum", Q4, "q", "var")
    out += _s_total(lay, fr)
    out += _pf(lay, fr)
    out += _s_phase(lay, fr)
    out += _frequency(lay, fr)
    return out


__all__ = ["meter_checks", "FAIL", "WARN"]
