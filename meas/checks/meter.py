"""Meter-internal consistency: totals against phases, S against P and Q, PF, V x I, frequency.

These catch register-map mistakes (scale, address, word order, the S definition, the PF sign
convention) inside one meter. A meter computes its totals from the same samples as its
phases, so the class limits of both sides, taken as independent (RSS), are a generous band:
a map error is off by a factor, far outside it.

Speed: the six checks share one pass of whole-array numpy over the P, Q, S, PF block and one
status judgement of all of them; what depends only on the profile (which maps lack a reading,
the texts of passing results) is prepared once in ``MeterPlan``.
"""

from __future__ import annotations

from operator import itemgetter
from typing import Any

import numpy as np

from ..results import CheckResult
from ..tolerance import judge_many
from .base import NA, PASS, Buckets, Template, fmt, na, result, template
from .columns import COL, I_PH, P4, PF4, Q4, S4, V_LN, F, FloatArray, IndexArray, rows_all, rows_any
from .frame import Frame
from .layout import Layout

_BLOCK = slice(P4.start, PF4.stop)  # p.A..p.T, q.A..q.T, s.A..s.T, pf.A..pf.T: contiguous columns
assert (
    P4.stop == Q4.start
    and Q4.stop == S4.start
    and S4.stop == PF4.start
    and PF4.stop - P4.start == 16
)
_PF_NAMES = ("pf.A", "pf.B", "pf.C", "pf.T")
_CHECKS = (
    "meter.p_sum",
    "meter.q_sum",
    "meter.s_total",
    "meter.pf",
    "meter.s_phase",
    "meter.frequency",
)


def _worst(vals: FloatArray, lims: FloatArray) -> tuple[IndexArray, FloatArray, FloatArray]:
    """Per row, the column with the largest |value|/limit (NaN ignored): (index, value, limit)."""
    z = np.abs(vals) / lims
    z = np.where(np.isnan(z), -1.0, z)
    j = z.argmax(axis=1)
    rows = np.arange(len(vals))
    return j, vals[rows, j], lims[rows, j]


class MeterPlan:
    """Per-profile parts of the meter checks: fixed n/a results and templates of passing ones."""

    def __init__(self, lay: Layout):
        self.lay = lay
        has = lay.has
        ids = [m.id for m in lay.meters]
        rated = lay.v_n * lay.i_n
        self.small_at = 0.01 * np.c_[rated, rated, rated, 3 * rated]
        self.rows = np.arange(len(ids))
        # check -> per meter a fixed n/a result (profile-only reason) or None
        self.fixed: dict[str, list[CheckResult | None]] = {}
        # check -> per meter the n/a result for missing data
        self.data_na: dict[str, list[CheckResult]] = {}
        # check -> per meter the template of the passing result
        self.tp: dict[str, list[Template]] = {}

        def plan(
            check: str, need: list[bool], reason: str, data_reason: str, unit: str, msg: str
        ) -> None:
            self.fixed[check] = [
                None if ok else na(check, mid, reason, unit)
                for mid, ok in zip(ids, need, strict=True)
            ]
            self.data_na[check] = [na(check, mid, data_reason, unit) for mid in ids]
            self.tp[check] = [template(check, mid, PASS, unit, msg) for mid in ids]

        for check, sl, name, unit in (
            ("meter.p_sum", P4, "p", "W"),
            ("meter.q_sum", Q4, "q", "var"),
        ):
            plan(
                check,
                rows_all(has[:, sl]).tolist(),
                f"the register map has no {name}.A-C and {name}.T",
                f"no good reading of every {name}.* in this snapshot",
                unit,
                f"{name}.T matches the sum of phases",
            )
        need_s = np.where(
            lay.vector_s,
            rows_all(has[:, [COL["p.T"], COL["q.T"], COL["s.T"]]]),
            rows_all(has[:, S4]),
        ).tolist()
        plan(
            "meter.s_total",
            need_s,
            "the register map lacks the readings for S total",
            "no good reading of S total or its parts in this snapshot",
            "VA",
            "",
        )
        self.definition = [
            "vector (IEEE 1459: |sum of complex phase S|)"
            if v
            else "arithmetic (IEEE 1459: sum of phase S)"
            for v in lay.vector_s.tolist()
        ]
        self.tp["meter.s_total"] = [
            template("meter.s_total", mid, PASS, "VA", f"s.T agrees with the {d} definition")
            for mid, d in zip(ids, self.definition, strict=True)
        ]
        plan(
            "meter.pf",
            rows_any(has[:, PF4]).tolist(),
            "the register map has no power factor",
            "too little load (or no good reading) to judge the power factor",
            "1",
            "power factor matches P/S with the sign of P (IEC)",
        )
        need_sp = (
            rows_all(has[:, V_LN]) & rows_all(has[:, I_PH]) & rows_all(has[:, S4][:, :3])
        ).tolist()
        plan(
            "meter.s_phase",
            need_sp,
            "the register map lacks v_ln, i or s per phase",
            "no good V, I and S of every phase in this snapshot",
            "VA",
            "S of every phase matches V x I",
        )
        plan(
            "meter.frequency",
            has[:, F].tolist(),
            "the register map has no frequency",
            "no good frequency reading in this snapshot",
            "Hz",
            "frequency within the nominal band",
        )
        self.dead_f = [na("meter.frequency", mid, "no voltage at the meter", "Hz") for mid in ids]
        self.var = {
            c: [mi for mi, f in enumerate(fx) if f is None] for c, fx in self.fixed.items()
        }  # judged each run
        self.fixed_only = {c: [f for f in fx if f is not None] for c, fx in self.fixed.items()}
        assert tuple(self.fixed) == _CHECKS  # rows of the judgement below
        # per check: the passing templates of the judged meters, and one C call picking their figures
        self.var_tp = {c: [self.tp[c][mi] for mi in v] for c, v in self.var.items()}
        self.var_pick = {c: itemgetter(*v) if len(v) > 1 else None for c, v in self.var.items()}
        self.fixed_mask = np.array(
            [[f is not None for f in fx] for fx in self.fixed.values()], bool
        )  # (6, n)

    def run(self, fr: Frame, bk: Buckets) -> None:
        lay = self.lay
        lim_ = lay.limits
        k, warn, apply = lim_.k, lim_.warn, lim_.apply
        n = len(lay.meters)
        x, u = fr.x, fr.u
        xb = x[:, _BLOCK].reshape(n, 4, 4)  # (meter, p/q/s/pf, A/B/C/T)
        ub = u[:, _BLOCK].reshape(n, 4, 4)
        tot3 = xb[:, :, :3].sum(axis=2)  # the phase sums of P, Q, S (and PF, unused)
        uu = (ub * ub).sum(axis=2)  # sums of squared uncertainties of each 4-column group
        p, q, s, pf = xb[:, 0], xb[:, 1], xb[:, 2], xb[:, 3]
        up, uq, us, upf = ub[:, 0], ub[:, 1], ub[:, 2], ub[:, 3]

        # meter.p_sum, meter.q_sum
        r_pq = xb[:, :2, 3] - tot3[:, :2]
        lim_pq = k * np.sqrt(uu[:, :2])
        lim_p = apply("meter.p_sum", "W", lim_pq[:, 0])
        lim_q = apply("meter.q_sum", "var", lim_pq[:, 1])

        # meter.s_total (the IEEE 1459 definition the map states)
        check = "meter.s_total"
        vec = np.hypot(p[:, 3], q[:, 3])
        arith = tot3[:, 2]
        cp = np.where(vec > 0, p[:, 3] / vec, 0.0)
        cq = np.where(vec > 0, q[:, 3] / vec, 0.0)
        u_vec = np.sqrt((cp * up[:, 3]) ** 2 + (cq * uq[:, 3]) ** 2 + us[:, 3] ** 2)
        u_ar = np.sqrt(uu[:, 2])
        expect = np.where(lay.vector_s, vec, arith)
        r_s = s[:, 3] - expect
        lim_s = apply(check, "VA", k * np.where(lay.vector_s, u_vec, u_ar))
        dist = lim_.param(check, "distortion_pct", 3.0) / 100.0
        # one-sided: harmonics make S exceed the fundamental-based value (REFERENCES.md 4)
        r_eff = np.where(r_s > 0, np.fmax(r_s - dist * np.abs(expect), 0.0), r_s)

        # meter.pf
        check = "meter.pf"
        s_pf = np.where(np.isnan(s), np.hypot(p, q), s)
        small = ~(s_pf >= self.small_at)
        calc = p / s_pf
        u_calc = np.sqrt((up / s_pf) ** 2 + (p * us / s_pf**2) ** 2)
        r_pf = pf - calc
        lim_pf = apply(check, "1", k * np.sqrt(u_calc**2 + upf**2))
        r_pf = np.where(small, np.nan, r_pf)
        j_pf, rv_pf, lv_pf = _worst(r_pf, lim_pf)

        # meter.s_phase
        check = "meter.s_phase"
        v, i, s3 = x[:, V_LN], x[:, I_PH], s[:, :3]
        r_sp = s3 - v * i
        lim_sp = apply(
            check, "VA", k * np.sqrt(us[:, :3] ** 2 + (i * u[:, V_LN]) ** 2 + (v * u[:, I_PH]) ** 2)
        )
        j_sp, rv_sp, lv_sp = _worst(r_sp, lim_sp)

        # meter.frequency
        f = x[:, F]
        band = float(apply("meter.frequency", "Hz", lim_.s.frequency_band_hz))
        d_f = f - lay.f_nom

        # one judgement of every check (tolerance.judge semantics: NaN -> n/a)
        vals = np.array([r_pq[:, 0], r_pq[:, 1], r_eff, rv_pf, rv_sp, d_f])
        lims = np.array([lim_p, lim_q, lim_s, lv_pf, lv_sp, np.full(n, band)])
        codes_a = judge_many(vals, lims, warn)
        codes = codes_a.tolist()
        good = codes_a == PASS
        good[5] &= fr.energized  # meter.frequency is n/a without voltage
        all_good = (
            (good | self.fixed_mask).all(axis=1).tolist()
        )  # per check: every judged meter passes
        shown = [
            r_pq[:, 0].tolist(),
            r_pq[:, 1].tolist(),
            r_s.tolist(),
            rv_pf.tolist(),
            rv_sp.tolist(),
            d_f.tolist(),
        ]
        lims_l = lims.tolist()
        live = fr.energized.tolist()
        na_, pass_ = bk[NA].append, bk[PASS].append
        new = object.__new__

        for row, check in enumerate(_CHECKS):
            cd, vl, ll = codes[row], shown[row], lims_l[row]
            fixed, data_na, tp = self.fixed[check], self.data_na[check], self.tp[check]
            is_f = row == 5
            var = self.var[check]
            if all_good[row]:
                # the common case: every meter that can be judged passes; the rest are fixed n/a
                bk[NA].extend(self.fixed_only[check])
                pick = self.var_pick[check]
                if pick is not None:
                    for t, a, b in zip(self.var_tp[check], pick(vl), pick(ll), strict=True):
                        r = new(
                            CheckResult
                        )  # base.make, inlined: the meter checks make a third of all results
                        d = r.__dict__
                        d.update(t)
                        d["value"] = a
                        d["limit"] = b
                        pass_(r)
                    continue
                for mi in var:
                    r = new(
                        CheckResult
                    )  # base.make, inlined: the meter checks make a third of all results
                    d = r.__dict__
                    d.update(tp[mi])
                    d["value"] = vl[mi]
                    d["limit"] = ll[mi]
                    pass_(r)
                continue
            for mi in range(n):
                fx = fixed[mi]
                c = cd[mi]
                if fx is not None:
                    na_(fx)
                elif is_f and not live[mi]:
                    na_(self.dead_f[mi])
                elif c == PASS:
                    r = new(
                        CheckResult
                    )  # base.make, inlined: the meter checks make a third of all results
                    d = r.__dict__
                    d.update(tp[mi])
                    d["value"] = vl[mi]
                    d["limit"] = ll[mi]
                    pass_(r)
                elif c == NA:
                    na_(data_na[mi])
                else:
                    bk[c].append(self._fault(row, mi, c, vl[mi], ll[mi], locals()))

    def _fault(
        self, row: int, mi: int, code: int, val: float, lim: float, a: dict[str, Any]
    ) -> CheckResult:
        """A warning or failure with its diagnosis (rare: built with plain, unhurried code)."""
        lay = self.lay
        m = lay.meters[mi]
        if row < 2:
            check, name, unit = (("meter.p_sum", "p", "W"), ("meter.q_sum", "q", "var"))[row]
            xs = a["xb"][mi, row]
            msg = (
                f"{name}.T = {fmt(xs[3], unit)} but the phases sum to {fmt(xs[:3].sum(), unit)} "
                f"(off by {fmt(val, unit)}, allowed {fmt(lim, unit)}): check scale, address and "
                f"word order of {name}.* in map {m.map_id}"
            )
            return result(check, m.id, code, val, lim, unit, msg, f"register_map:{name}")
        if row == 2:
            definition = self.definition[mi]
            s_t = a["s"][mi, 3]
            other = a["arith"][mi] if lay.vector_s[mi] else a["vec"][mi]
            if abs(float(s_t - other)) <= lim:
                msg = (
                    f"s.T = {fmt(s_t, 'VA')} fits the other IEEE 1459 definition, not the {definition} one "
                    f"the profile states: set apparent_power in map {m.map_id}"
                )
                cause = "s_definition"
            else:
                msg = (
                    f"s.T = {fmt(s_t, 'VA')} but the {definition} value is {fmt(a['expect'][mi], 'VA')} "
                    f"(allowed {fmt(lim, 'VA')}): check scale and address of s.* in map {m.map_id}"
                )
                cause = "register_map:s"
            return result("meter.s_total", m.id, code, val, lim, "VA", msg, cause)
        if row == 3:
            kk = int(a["j_pf"][mi])
            pf, calc = a["pf"], a["calc"]
            if abs(pf[mi, kk] + calc[mi, kk]) <= lim:
                msg = (
                    f"{_PF_NAMES[kk]} = {pf[mi, kk]:.3f} is -(P/S) = {-calc[mi, kk]:.3f}: the meter uses a lead/lag sign "
                    "convention, not the IEC sign of P; set the meter or the map accordingly"
                )
                cause = "pf_sign_convention"
            else:
                msg = (
                    f"{_PF_NAMES[kk]} = {pf[mi, kk]:.3f} but P/S = {calc[mi, kk]:.3f} (allowed +-{lim:.3f}): check scale "
                    f"and address of pf.* in map {m.map_id}"
                )
                cause = "register_map:pf"
            return result("meter.pf", m.id, code, val, lim, "1", msg, cause)
        if row == 4:
            jj = int(a["j_sp"][mi])
            ph = "ABC"[jj]
            v, i, s3 = a["v"], a["i"], a["s3"]
            msg = (
                f"s.{ph} = {fmt(s3[mi, jj], 'VA')} but v_ln.{ph} x i.{ph} = {fmt(v[mi, jj] * i[mi, jj], 'VA')}: "
                f"check the scale of s, v_ln and i in map {m.map_id} and the CT/VT ratios of {m.id}"
            )
            return result("meter.s_phase", m.id, code, val, lim, "VA", msg, "register_map:s_phase")
        f = a["f"][mi]
        msg = (
            f"f = {f:.3f} Hz is {val:+.3f} Hz from the nominal {lay.f_nom:g} Hz (band +-{lim:g} Hz): "
            "check the supply, or the scale of f.T in map " + m.map_id
        )
        return result("meter.frequency", m.id, code, val, lim, "Hz", msg, "frequency")


__all__ = ["MeterPlan"]
