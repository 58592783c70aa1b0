"""Data quality of the readings: out-of-range values, frozen values, excess noise (the
communication state is ``comm``).

``QualityPlan`` prepares the per-profile results and texts once (constant passing results are
shared objects, like the n/a ones). Frozen and noise use the recent history (oldest first); both look only at quantities that
must move on a live, loaded circuit: a real meter's V and I change in the last digits from
one poll to the next, and a healthy meter repeats far better than its class limit
(common practice; from memory).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import cast

import numpy as np

from ..results import CheckResult
from .base import FAIL, NA, PASS, WARN, Buckets, fmt, make, na, result, template
from .columns import I_PH, P4, V_LL, V_LN, BoolArray, FloatArray, rows_all, rows_any
from .frame import Frame
from .layout import Layout

_FROZEN_COLS = np.r_[
    np.arange(V_LN.start, V_LN.stop), np.arange(I_PH.start, I_PH.stop), np.arange(P4.start, P4.stop)
]
_VI = np.r_[np.arange(V_LN.start, V_LN.stop), np.arange(I_PH.start, I_PH.stop)]
NOISE_WINDOW = 16  # snapshots the noise estimate pools when the history has them (more samples, steadier estimate)
_HIST = slice(0, P4.stop)  # the columns frozen and noise look at (V_LN .. P4) out of each frame


class QualityPlan:
    """Per-profile parts of the data-quality checks."""

    def __init__(self, lay: Layout):
        self.lay = lay
        L = lay.limits
        ids = [m.id for m in lay.meters]
        self.ids = ids
        self.v_band = L.param("quality.v_range", "band", L.s.voltage_band)
        self.i_fail = L.param(
            "quality.i_range", "fail_fraction", 1.2
        )  # CT extended rating 120 % (common practice)
        self.rows = np.arange(len(ids))
        self.has_i: list[bool] = rows_any(lay.has[:, I_PH]).tolist()
        self.v_nodata = [na("quality.v_range", mid, "no good voltage reading", "%") for mid in ids]
        self.v_dead = [
            na("quality.v_range", mid, "no voltage at the meter (see network.energization)", "%")
            for mid in ids
        ]
        self.v_tp = [
            template("quality.v_range", mid, PASS, "%", "voltages within the zone band")
            for mid in ids
        ]
        self.i_nomap = [
            na("quality.i_range", mid, "the register map has no phase currents", "%") for mid in ids
        ]
        self.i_nodata = [na("quality.i_range", mid, "no good current reading", "%") for mid in ids]
        self.i_tp = [
            template("quality.i_range", mid, PASS, "%", "currents within the CT rating")
            for mid in ids
        ]
        self.frozen_need = max(2, L.s.frozen_cycles)
        self.frozen_dead = [
            na("quality.frozen", mid, "no voltage at the meter: nothing has to move") for mid in ids
        ]
        self.frozen_pass = [
            result("quality.frozen", mid, PASS, message="values are updating") for mid in ids
        ]
        self.noise_need = int(L.param("quality.noise", "min_snapshots", 8))
        self.noise_max = L.param("quality.noise", "max_sigma_of_limit", 0.35)
        self.noise_idle = [
            na("quality.noise", mid, "no steady voltage or current to judge noise", "1")
            for mid in ids
        ]
        self.noise_few = [
            na("quality.noise", mid, "too few good readings to judge noise", "1") for mid in ids
        ]
        self.noise_tp = [
            template("quality.noise", mid, PASS, "1", "poll-to-poll scatter well inside the class")
            for mid in ids
        ]
        self.lim_v = lay.spec_v.main_pct / 100.0  # (n, 1)
        self.lim_i = lay.spec_i.main_pct / 100.0
        self.i_low = 0.05 * lay.i_n[None, :, None]
        self.v_low = 0.5 * lay.v_n[None, :, None]
        self.has_i3 = rows_all(lay.has[:, I_PH])
        self.lim_vi = np.concatenate(
            [np.repeat(self.lim_v, 3, axis=1), np.repeat(self.lim_i, 3, axis=1)], axis=1
        )

    # ---------------------------------------------------------------- ranges
    def ranges(self, fr: Frame, bk: Buckets) -> None:
        lay = self.lay
        band, i_fail = self.v_band, self.i_fail
        v = fr.x[:, V_LN]
        no_ln = rows_all(np.isnan(v))
        if no_ln.any():  # L-L readings stand in where a meter has no L-N ones
            v = np.where(no_ln[:, None], fr.x[:, V_LL] / np.sqrt(3.0), v)
            no_v = rows_all(np.isnan(v)).tolist()
        else:
            no_v = no_ln.tolist()
        dev = 100.0 * (v / lay.v_n[:, None] - 1.0)
        j_v = np.where(np.isnan(dev), -1.0, np.abs(dev)).argmax(axis=1)
        d_v = dev[self.rows, j_v].tolist()
        i = fr.x[:, I_PH]
        no_i = rows_all(np.isnan(i)).tolist()
        load = (100.0 * np.where(np.isnan(i), -np.inf, i).max(axis=1) / lay.i_n).tolist()
        live, has_i = fr.energized.tolist(), self.has_i
        b100, warn = 100 * band, lay.limits.warn
        bw, i100, ifl = b100 * warn, 100.0, 100 * i_fail
        na_, pass_ = bk[NA].append, bk[PASS].append
        v_tp, i_tp, b100f = self.v_tp, self.i_tp, float(b100)
        new = object.__new__
        for mi in range(len(has_i)):
            if no_v[mi]:
                na_(self.v_nodata[mi])
            elif not live[mi]:
                na_(self.v_dead[mi])
            else:
                d = d_v[mi]
                ad = abs(d)
                if ad > b100 or ad > bw:
                    code = FAIL if ad > b100 else WARN
                    m = lay.meters[mi]
                    jj = int(j_v[mi])
                    msg = (
                        f"v_ln.{'ABC'[jj]} = {fmt(float(v[mi, jj]), 'V')} is {d:+.1f} % from the zone nominal "
                        f"{fmt(float(lay.v_n[mi]), 'V')} (band +-{b100:g} %): check the VT ratio and the supply"
                    )
                    bk[code].append(
                        result("quality.v_range", m.id, code, d, b100, "%", msg, "v_range")
                    )
                else:
                    r = new(CheckResult)  # base.make, inlined (two per meter per run)
                    dd = r.__dict__
                    dd.update(v_tp[mi])
                    dd["value"], dd["limit"] = d, b100f
                    pass_(r)
            if not has_i[mi]:
                na_(self.i_nomap[mi])
            elif no_i[mi]:
                na_(self.i_nodata[mi])
            else:
                ld = load[mi]
                if ld > ifl or ld > i100:
                    code = FAIL if ld > ifl else WARN
                    m = lay.meters[mi]
                    msg = (
                        f"current {ld:.0f} % of the CT rating {lay.i_n[mi]:g} A: overload, or a wrong CT ratio "
                        f"(ct_primary_a / ct_ratio of {m.id})"
                    )
                    bk[code].append(
                        result("quality.i_range", m.id, code, ld, ifl, "%", msg, "i_range")
                    )
                else:
                    r = new(CheckResult)  # base.make, inlined
                    dd = r.__dict__
                    dd.update(i_tp[mi])
                    dd["value"], dd["limit"] = ld, 100.0
                    pass_(r)

    # ---------------------------------------------------------------- history
    def frozen(self, hist: FloatArray, n_frames: int, fr: Frame, bk: Buckets) -> None:
        """Frozen: every V, I and P of a live meter identical over the last frozen_cycles snapshots.

        ``hist`` = (t, n, c) columns V_LN..P4 of the most recent frames, oldest first."""
        need = self.frozen_need
        if n_frames < need:
            for mid in self.ids:
                bk[NA].append(
                    na("quality.frozen", mid, f"needs {need} snapshots of history, has {n_frames}")
                )
            return
        sub = hist[-need:][:, :, _FROZEN_COLS]
        cur, prev = sub[-1], sub[-2]
        # a meter whose readings moved since the previous snapshot is not frozen: look further
        # back only for those that did not (the same verdict as comparing the whole window)
        cand = ((prev == cur) | np.isnan(prev)).all(axis=1) & ~np.isnan(cur).all(axis=1)
        same = [False] * len(self.ids)
        if cand.any():
            rows = cand.nonzero()[0]  # = np.flatnonzero (1-D)
            s2 = sub[:, rows]
            same_rows = ((s2 == s2[-1]) | np.isnan(s2)).all(axis=(0, 2)).tolist()
            for k, mi in enumerate(rows.tolist()):
                same[mi] = same_rows[k]
        live = fr.energized.tolist()
        for mi, mid in enumerate(self.ids):
            if not live[mi]:
                bk[NA].append(self.frozen_dead[mi])
            elif same[mi]:
                msg = (
                    f"V, I and P of {mid} have not changed over {need} snapshots: the meter or its gateway is "
                    "repeating a cached value; check its communication module and the map's register kind"
                )
                bk[FAIL].append(
                    result(
                        "quality.frozen",
                        mid,
                        FAIL,
                        float(need),
                        float(need),
                        "snapshots",
                        msg,
                        "frozen",
                    )
                )
            else:
                bk[PASS].append(self.frozen_pass[mi])

    def noise(self, hist: FloatArray, n_frames: int, bk: Buckets) -> None:
        """Excess noise: the poll-to-poll scatter of V and I against the class limit.

        The scatter is estimated from second differences, x[k+1] - 2 x[k] + x[k-1], whose
        variance is 6 sigma^2 for white noise (so sigma = rms / sqrt 6) while a linear drift
        (a load bank warming up, the tail of a settling transient) cancels out; V and I of
        the three phases are pooled.
        """
        need = self.noise_need
        ratio_max = self.noise_max
        if n_frames < need:
            for mid in self.ids:
                bk[NA].append(
                    na(
                        "quality.noise",
                        mid,
                        f"needs {need} snapshots of history, has {n_frames}",
                        "1",
                    )
                )
            return
        x = hist[-max(need, NOISE_WINDOW) :][
            :, :, _VI
        ]  # (t, n, 6): V_LN then I_PH, up to NOISE_WINDOW
        v, i = x[:, :, :3], x[:, :, 3:]
        d = (x[2:] - 2.0 * x[1:-1] + x[:-2]) / np.abs(x[1:-1])  # second differences, relative
        # (t, n, 3) reduced over time and phase: one flag per meter
        loaded_i = cast(BoolArray, (i >= self.i_low).all(axis=(0, 2))) & self.has_i3
        live = cast(BoolArray, (v >= self.v_low).all(axis=(0, 2)))
        use = np.empty((len(live), 6), np.bool_)
        use[:, :3] = live[:, None]
        use[:, 3:] = loaded_i[:, None]
        z = np.where(
            use[None], d / self.lim_vi[None], np.nan
        )  # (t-1, n, 6), as concatenating V and I parts
        ok = ~np.isnan(z)
        cnt = ok.sum(axis=(0, 2))
        sig = np.sqrt(np.where(ok, z * z, 0.0).sum(axis=(0, 2)) / np.maximum(cnt, 1) / 6.0)
        sig_l, cnt_l, any_l = sig.tolist(), cnt.tolist(), (live | loaded_i).tolist()
        warn = self.lay.limits.warn * ratio_max
        for mi, mid in enumerate(self.ids):
            if not any_l[mi]:
                bk[NA].append(self.noise_idle[mi])
                continue
            if cnt_l[mi] < 4:
                bk[NA].append(self.noise_few[mi])
                continue
            sg = sig_l[mi]
            if sg > ratio_max or sg > warn:
                code = FAIL if sg > ratio_max else WARN
                msg = (
                    f"readings of {mid} scatter by {sg:.2f} of their class limit from poll to poll (allowed {ratio_max:g}): "
                    "a loose connection, interference on the VT/CT wiring, or a faulty meter"
                )
                bk[code].append(
                    result("quality.noise", mid, code, sg, ratio_max, "1", msg, "noisy")
                )
            else:
                bk[PASS].append(make(self.noise_tp[mi], sg, ratio_max))


def history(frames: Sequence[Frame]) -> FloatArray:
    """(t, n, c) stack of the columns V_LN..P4 of the frames, oldest first."""
    return np.array([f.x[:, _HIST] for f in frames])


__all__ = ["QualityPlan", "history"]
