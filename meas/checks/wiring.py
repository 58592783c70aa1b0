"""Phase-power angles of one meter: their spread (phase.pf_spread) and the wiring signature
they show (phase.wiring: a reversed CT, swapped current inputs, voltage and current of
different phases).

Speed: the angles are computed once per run and shared by both checks, on the loaded meters
only; the signature rules are ``diagnose.signature_rows``.
"""

from __future__ import annotations

import numpy as np

from .. import phasors as ph
from ..results import CheckResult
from .base import FAIL, NA, PASS, WARN, Buckets, na, result, template
from .columns import I_ANG, P4, Q4, V_ANG, BoolArray, FloatArray, rows_all
from .diagnose import Signature, signature_rows
from .frame import Frame
from .layout import Layout

_WIRING_TEXT = {
    "ct_reversed": "the CT of phase {x} is reversed (or its secondary leads are swapped): P and Q of that phase have the wrong sign",
    "phases_swapped": "current inputs {x} are swapped: check which CT feeds which current terminal (pair chosen by the expected flow direction)",
    "vi_mismatch": "voltage and current inputs belong to different phases ({x} deg): check the voltage terminals against the CTs",
}


class WiringPlan:
    """Per-profile parts of the phase-power angle checks."""

    def __init__(self, lay: Layout):
        self.lay = lay
        L = lay.limits
        ids = [m.id for m in lay.meters]
        self.ids = ids
        has = lay.has
        rated = lay.v_n * lay.i_n
        self.rated = rated[:, None]
        self._load_at: dict[float, FloatArray] = {}  # min_load -> min_load * rated (see _loaded)
        self.pf_warn = L.param("phase.pf_spread", "warn_deg", 45.0)
        self.pf_min = L.param("phase.pf_spread", "min_load", 0.05)
        self.pf_light = [
            na(
                "phase.pf_spread",
                mid,
                "load too small or too unbalanced to compare phase power angles",
                "deg",
            )
            for mid in ids
        ]
        self.pf_tp = [template("phase.pf_spread", mid, PASS, "deg") for mid in ids]
        self.w_min = L.param("phase.wiring", "min_load", 0.05)
        self.trip = L.param("phase.wiring", "trip_deg", 75.0)
        self.coherent = L.param("phase.wiring", "coherent_deg", 40.0)
        w_has = (rows_all(has[:, P4]) & rows_all(has[:, Q4])).tolist()
        self.w_fixed = [
            None
            if (m.branch is not None and ok)
            else na("phase.wiring", m.id, "the meter lacks per-phase P and Q", "deg")
            for m, ok in zip(lay.meters, w_has, strict=True)
        ]
        self.w_light = [
            na(
                "phase.wiring",
                mid,
                "load too small or too unbalanced to read the wiring signature",
                "deg",
            )
            for mid in ids
        ]
        self.w_tp = [
            template(
                "phase.wiring",
                mid,
                PASS,
                "deg",
                "phase powers consistent with correct CT and current-input wiring",
            )
            for mid in ids
        ]

    def _loaded(self, mag: FloatArray, min_load: float) -> BoolArray:
        at = self._load_at.get(min_load)
        if at is None:  # min_load x rating: profile-only, made once per threshold
            at = self._load_at[min_load] = min_load * self.rated
        return rows_all(mag >= at) & (mag.min(axis=1) >= 0.2 * mag.max(axis=1))

    def run(self, fr: Frame, bk: Buckets) -> None:
        """phase.pf_spread and phase.wiring: one set of phase-power angles, loaded meters only."""
        lay = self.lay
        n = len(self.ids)
        x = fr.x
        na_, pass_ = bk[NA].append, bk[PASS].append
        new = object.__new__
        s = x[:, P4][:, :3] + 1j * x[:, Q4][:, :3]
        mag = np.abs(s)
        ok_pf = self._loaded(mag, self.pf_min)
        ok_w = ok_pf if self.w_min == self.pf_min else self._loaded(mag, self.w_min)
        both = ok_pf | ok_w
        rows_l = both.nonzero()[0]  # = np.flatnonzero (1-D)
        # = rad2deg(angle(S)); on the same strided views as ever (numpy's SIMD transcendental loops
        # may round differently on contiguous data), then narrowed to the loaded meters
        ang = ph.pf_angle_deg(s.real, s.imag)[rows_l]
        ok_w_rows = ok_w[rows_l]
        sigs, spread0 = signature_rows(
            ang, lay.axis[rows_l], lay.is_load[rows_l], self.trip, self.coherent, ok_w_rows
        )
        pos = dict(zip(rows_l.tolist(), range(len(rows_l)), strict=True))
        ok_pf_l = ok_pf.tolist()
        warn = self.pf_warn
        for mi in range(n):
            if not ok_pf_l[mi]:
                na_(self.pf_light[mi])
                continue
            sp = spread0[pos[mi]]
            msg = f"phase power-factor angles spread over {sp:.0f} deg"
            if sp > warn:
                msg += f" (more than {warn:g}): very different loads per phase, or a wiring error (see phase.wiring)"
                bk[WARN].append(
                    result("phase.pf_spread", self.ids[mi], WARN, sp, warn, "deg", msg, "pf_spread")
                )
            else:
                r = new(CheckResult)  # base.make plus the message, inlined
                d = r.__dict__
                d.update(self.pf_tp[mi])
                d["value"], d["limit"], d["message"] = sp, warn, msg
                pass_(r)
        trip = self.trip
        for mi in range(n):
            fx = self.w_fixed[mi]
            if fx is not None:
                na_(fx)
                continue
            k = pos.get(mi)
            if k is None:
                na_(self.w_light[mi])
                continue
            sg = sigs[k]
            if sg is None:
                na_(self.w_light[mi])
            elif not sg.cause:  # HEALTHY, or no fault once the hypotheses were tried
                r = new(CheckResult)  # base.make, inlined
                d = r.__dict__
                d.update(self.w_tp[mi])
                d["value"], d["limit"] = spread0[k], trip
                pass_(r)
            else:
                bk[FAIL].append(self._wiring_fault(fr, mi, sg))

    def _wiring_fault(self, fr: Frame, mi: int, sg: Signature) -> CheckResult:
        lay = self.lay
        parts = []
        for c in sg.cause.split(","):
            kind, _, arg = c.partition(":")
            if c == "ct_reversed:ABC":
                parts.append(
                    "all three CTs are reversed or the meter faces the wrong way: a load cannot deliver power"
                )
            else:
                parts.append(_WIRING_TEXT[kind].format(x=arg))
        extra = ""
        if (
            lay.angles[mi]
            and not np.isnan(fr.x[mi, I_ANG]).any()
            and ph.sequence_sign(fr.x[mi, I_ANG])
            < 0
            < ph.sequence_sign(np.nan_to_num(fr.x[mi, V_ANG]))
        ):
            extra = " (current angles run in negative sequence)"
        msg = (
            "; ".join(parts)
            + extra
            + f" [phase power angles spread {sg.spread_deg:.0f} deg, {sg.corrected_deg:.0f} deg once corrected]"
        )
        return result(
            "phase.wiring", self.ids[mi], FAIL, sg.spread_deg, self.trip, "deg", msg, sg.cause
        )


__all__ = ["WiringPlan"]
