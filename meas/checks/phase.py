"""Phase symmetry of one meter: voltage sequence, voltage and current unbalance.

Speed: ``PhasePlan`` prepares what the profile alone decides (maps without angles or currents,
fixed n/a results, texts of passing results) once; a run computes the negative-sequence and
NEMA-style unbalance of voltages and currents in one call each. The phase-power angle checks
(pf_spread, wiring) are ``wiring``.
"""

from __future__ import annotations

import numpy as np

from .. import phasors as ph
from ..results import CheckResult
from .base import FAIL, NA, PASS, WARN, Buckets, na, result, template
from .columns import (
    I_ANG,
    I_PH,
    V_ANG,
    V_LL,
    V_LN,
    FloatArray,
    rows_all,
    rows_any,
)
from .frame import Frame
from .layout import Layout

_FMAX = np.finfo(float).max
_SEQ_FAIL = (
    "voltage phase sequence is A-C-B (negative): two voltage connections are swapped at the meter or the supply "
    "rotation is reversed; compare with the other meters"
)


class PhasePlan:
    """Per-profile parts of the phase checks."""

    def __init__(self, lay: Layout):
        self.lay = lay
        L = lay.limits
        ids = [m.id for m in lay.meters]
        self.ids = ids
        has = lay.has
        # phase.v_sequence
        self.seq_has = rows_all(has[:, V_ANG]).tolist()
        self.seq_na_map = [
            na("phase.v_sequence", mid, "the register map has no voltage angles") for mid in ids
        ]
        self.seq_na_dead = [
            na("phase.v_sequence", mid, "no voltage (or no good angle readings) at the meter")
            for mid in ids
        ]
        self.seq_pass = [
            result(
                "phase.v_sequence",
                mid,
                PASS,
                1.0,
                message="voltage phase sequence A-B-C (positive)",
            )
            for mid in ids
        ]
        # phase.v_unbalance
        self.vu_warn = L.param("phase.v_unbalance", "warn_pct", L.s.unbalance_warn_pct)
        self.vu_fail = L.param("phase.v_unbalance", "fail_pct", 2.5 * self.vu_warn)
        self.vu_dead = [na("phase.v_unbalance", mid, "no voltage at the meter", "%") for mid in ids]
        self.vu_nodata = [
            na("phase.v_unbalance", mid, "no good voltage readings to compute unbalance", "%")
            for mid in ids
        ]
        self.vu_tp = [template("phase.v_unbalance", mid, PASS, "%") for mid in ids]
        # phase.i_unbalance
        self.iu_warn = L.param("phase.i_unbalance", "warn_pct", 50.0)
        self.iu_min = L.param("phase.i_unbalance", "min_load", 0.05)
        self.iu_min_i = self.iu_min * lay.i_n
        self.iu_has = rows_all(has[:, I_PH]).tolist()
        self.iu_na_map = [
            na("phase.i_unbalance", mid, "the register map has no phase currents", "%")
            for mid in ids
        ]
        self.iu_light = [
            na(
                "phase.i_unbalance",
                mid,
                f"current below {self.iu_min:.0%} of the CT rating: unbalance not meaningful",
                "%",
            )
            for mid in ids
        ]
        self.iu_tp = [template("phase.i_unbalance", mid, PASS, "%") for mid in ids]

    def run(self, fr: Frame, bk: Buckets) -> None:
        """Every phase check on one frame, in check id order."""
        x = fr.x
        ang_v = x[:, V_ANG]
        self._sequence(fr, ang_v, bk)
        # negative-sequence unbalance of voltages and currents in one call: (2, n, 3) stacks, every
        # row the same operations as on its own (checked bit for bit by the golden test)
        u2_vi = ph.unbalance_u2(
            ph.phasor(np.array([x[:, V_LN], x[:, I_PH]]), np.array([ang_v, x[:, I_ANG]]))
        )
        v_ll = x[:, V_LL]
        u2_mag = ph.unbalance_iec_ll(v_ll)
        # NEMA-style deviation of V_LL and of the phase currents in one call (row-wise, so each
        # row's figure is the same as from its own call)
        lv = ph.lvur(np.array([v_ll, x[:, I_PH]]))
        self._v_unbalance(fr, u2_vi[0], u2_mag, lv[0], bk)
        self._i_unbalance(fr, u2_vi[1], lv[1], bk)

    def _sequence(self, fr: Frame, ang_v: FloatArray, bk: Buckets) -> None:
        """phase.v_sequence: the voltage angles run A-B-C."""
        n = len(self.ids)
        na_, pass_ = bk[NA].append, bk[PASS].append
        sign = ph.sequence_sign(
            np.minimum(np.maximum(np.where(np.isnan(ang_v), 0.0, ang_v), -_FMAX), _FMAX)
        ).tolist()  # = nan_to_num
        good = (fr.energized & ~rows_any(np.isnan(ang_v))).tolist()
        for mi in range(n):
            if not self.seq_has[mi]:
                na_(self.seq_na_map[mi])
            elif not good[mi]:
                na_(self.seq_na_dead[mi])
            elif sign[mi] > 0:
                pass_(self.seq_pass[mi])
            else:
                bk[FAIL].append(
                    result(
                        "phase.v_sequence",
                        self.ids[mi],
                        FAIL,
                        float(sign[mi]),
                        message=_SEQ_FAIL,
                        cause="v_sequence_negative",
                    )
                )

    def _v_unbalance(
        self, fr: Frame, u2_ph: FloatArray, u2_mag: FloatArray, lv_v: FloatArray, bk: Buckets
    ) -> None:
        """phase.v_unbalance: from symmetrical components where the map has angles, else from
        the L-L magnitudes."""
        lay = self.lay
        n = len(self.ids)
        live = fr.energized.tolist()
        na_, pass_ = bk[NA].append, bk[PASS].append
        new = object.__new__
        nema = lv_v.tolist()
        use = lay.angles & ~np.isnan(u2_ph)
        u2v = np.where(use, u2_ph, u2_mag).tolist()
        use = use.tolist()
        warn, fail = self.vu_warn, self.vu_fail
        vu_tp = self.vu_tp
        for mi in range(n):
            if not live[mi]:
                na_(self.vu_dead[mi])
                continue
            u2 = u2v[mi]
            if u2 != u2:
                na_(self.vu_nodata[mi])
                continue
            how = (
                "from symmetrical components (IEC 61000-4-30 style)"
                if use[mi]
                else "from L-L magnitudes (IEC 61000-4-30 formula)"
            )
            nm = nema[mi]
            extra = f"; NEMA MG-1 LVUR {nm:.2f} %" if nm == nm else ""
            code = FAIL if u2 > fail else WARN if u2 > warn else PASS
            if code == PASS:
                r = new(CheckResult)  # base.make plus the message, inlined (one per meter per run)
                d = r.__dict__
                d.update(vu_tp[mi])
                d["value"], d["limit"], d["message"] = (
                    u2,
                    warn,
                    f"voltage unbalance u2 = {u2:.2f} % {how}{extra}",
                )
                pass_(r)
            else:
                msg = (
                    f"voltage unbalance u2 = {u2:.2f} % {how}{extra}, above {warn if code == WARN else fail:g} %: "
                    "a missing or reversed voltage connection, a blown VT fuse, or a strongly unbalanced supply"
                )
                bk[code].append(
                    result(
                        "phase.v_unbalance",
                        self.ids[mi],
                        code,
                        u2,
                        warn if code == WARN else fail,
                        "%",
                        msg,
                        "v_unbalance",
                    )
                )

    def _i_unbalance(self, fr: Frame, u2: FloatArray, dev: FloatArray, bk: Buckets) -> None:
        """phase.i_unbalance: I2/I1 where the map has angles, else the deviation from the mean."""
        lay = self.lay
        n = len(self.ids)
        na_, pass_ = bk[NA].append, bk[PASS].append
        new = object.__new__
        loaded = (fr.i_mean >= self.iu_min_i).tolist()
        use_i = lay.angles & ~np.isnan(u2)
        vals = np.where(use_i, u2, dev).tolist()
        use_i = use_i.tolist()
        warn = self.iu_warn
        for mi in range(n):
            if not self.iu_has[mi]:
                na_(self.iu_na_map[mi])
                continue
            if not loaded[mi]:
                na_(self.iu_light[mi])
                continue
            val = vals[mi]
            how = "I2/I1" if use_i[mi] else "max deviation from the mean current"
            msg = f"current unbalance ({how}) {val:.1f} %"
            if val > warn:
                msg += f", above {warn:g} %: a very unbalanced load, or a CT or current-input wiring error (see phase.wiring)"
                bk[WARN].append(
                    result(
                        "phase.i_unbalance", self.ids[mi], WARN, val, warn, "%", msg, "i_unbalance"
                    )
                )
            else:
                r = new(CheckResult)  # base.make plus the message, inlined
                d = r.__dict__
                d.update(self.iu_tp[mi])
                d["value"], d["limit"], d["message"] = val, warn, msg
                pass_(r)


__all__ = ["PhasePlan"]
