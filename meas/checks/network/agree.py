"""network.v_agree and network.f_agree: meters on one bus read one voltage, meters on one
supply read one frequency."""

from __future__ import annotations

import math

from ...results import CheckResult
from ..base import FAIL, NA, PASS, Buckets, fmt, judge1, make, na, result, template
from ..layout import Layout
from ..topology import TopoState
from .grid import Cols, Grid


def _median(x: list[float]) -> float:
    """statistics.median, inlined: the same middle value or the same (a + b) / 2, but cheaper."""
    n = len(x)
    if n == 1:
        return x[0]
    x = sorted(x)
    i = n // 2
    return x[i] if n % 2 else (x[i - 1] + x[i]) / 2


class Agreement:
    """Per bus, the meter farthest from its peers' voltage; across the bench, from the median
    frequency."""

    def __init__(self, lay: Layout, grid: Grid):
        self.lay = lay
        self.on_bus = grid.on_bus
        self.vn = grid.vn
        self.plain = grid.plain
        self.va_fixed = [
            (
                na(
                    "network.v_agree",
                    bus,
                    "fewer than two meters with a good voltage on this bus",
                    "V",
                ),
                na("network.v_agree", bus, "bus is not energized", "V"),
                template(
                    "network.v_agree",
                    bus,
                    PASS,
                    "V",
                    f"voltages of {', '.join(grid.ids[mi] for mi in mem)} agree",
                ),
            )
            for bus, mem in self.on_bus.items()
        ]
        self.va_peers = [
            [(mi, [p for p in mem if p != mi]) for mi in mem] for mem in self.on_bus.values()
        ]
        self.f_tp = template(
            "network.f_agree", "bench", PASS, "Hz", "frequencies agree across the bench"
        )

    def voltages(self, cols: Cols, st: TopoState, bk: Buckets) -> dict[int, float]:
        """Per-bus agreement; returns meter -> voltage ratio to its peers for an outlier."""
        lay = self.lay
        check = "network.v_agree"
        v, u = cols["v"], cols["vu"]
        live, vn = cols["live"], self.vn
        k_cov = lay.limits.k
        apply = None if self.plain else lay.limits.apply
        ratios: dict[int, float] = {}
        for bus, mem0, (na_few, na_dead, tp), peers0 in zip(
            self.on_bus, self.on_bus.values(), self.va_fixed, self.va_peers, strict=True
        ):
            mem = [mi for mi in mem0 if v[mi] == v[mi]]
            if len(mem) < 2:
                bk[NA].append(na_few)
                continue
            if st.buses[bus].live is False or not any(live[mi] for mi in mem):
                bk[NA].append(na_dead)
                continue
            whole = len(mem) == len(mem0)
            plist = peers0 if whole else [(mi, [p for p in mem if p != mi]) for mi in mem]
            worst, wz, wd, wl = -1, -1.0, 0.0, 0.0
            two = len(mem) == 2
            for mi, peers in plist:
                np_ = len(peers)
                if np_ == 2:  # the usual bus of three meters: _median and the sum below, unrolled
                    p0, p1 = peers
                    ref = (
                        v[p0] + v[p1]
                    ) / 2  # = _median (IEEE addition commutes: the sort cannot matter)
                    acc = u[p0] ** 2 + u[p1] ** 2  # = 0 + a + b, left to right
                else:
                    ref = _median([v[p] for p in peers])
                    acc = 0
                    for p in peers:
                        acc += u[p] ** 2
                d = v[mi] - ref
                lim = k_cov * math.sqrt(u[mi] ** 2 + acc / np_)
                if apply is not None:
                    lim = apply(check, "V", lim)
                z = abs(d) / lim
                if two:  # two meters: the one farther from the zone nominal is the suspect
                    z += abs(v[mi] / vn[mi] - 1.0) * 1e-3
                if z > wz:
                    worst, wz, wd, wl = mi, z, d, lim
            wl = float(wl)
            code = judge1(wd, wl, lay.limits.warn)
            if code == PASS and whole:
                bk[PASS].append(make(tp, float(wd), wl))
                continue
            bk[code].append(self._outlier(bus, mem, code, worst, wd, wl, v, ratios))
        return ratios

    def _outlier(
        self,
        bus: str,
        mem: list[int],
        code: int,
        worst: int,
        wd: float,
        wl: float,
        v: list[float],
        ratios: dict[int, float],
    ) -> CheckResult:
        """The result of a bus whose meters are not all judged (PASS) or disagree: names the
        meter farthest from its peers and, on a failure, records its voltage ratio."""
        check = "network.v_agree"
        meters = self.lay.meters
        if code == PASS:
            ids = ", ".join(meters[mi].id for mi in mem)
            return result(check, bus, PASS, wd, wl, "V", f"voltages of {ids} agree")
        k = v[worst] / _median([v[p] for p in mem if p != worst])
        mid = meters[worst].id
        cause = f"vt_ratio:{k:.3f}" if code == FAIL else ""
        if code == FAIL:
            ratios[worst] = k
        msg = (
            f"{mid} reads {fmt(v[worst], 'V')} L-N, {k:.3f} times the other meters on {bus} "
            f"(off by {fmt(wd, 'V')}, allowed {fmt(wl, 'V')}): check the VT ratio and voltage wiring of {mid}"
        )
        if len(mem) == 2:
            msg += " (only two meters here: the one farther from nominal is named)"
        return result(check, bus, code, wd, wl, "V", msg, cause)

    def frequency(self, cols: Cols, bk: Buckets) -> None:
        lay = self.lay
        check = "network.f_agree"
        live, fa = cols["live"], cols["f"]
        sel = [mi for mi in range(len(fa)) if live[mi] and fa[mi] == fa[mi]]
        if len(sel) < 2:
            bk[NA].append(
                na(check, "bench", "fewer than two energized meters report frequency", "Hz")
            )
            return
        f = [fa[mi] for mi in sel]
        med = _median(f)  # = np.median: the middle value, or the mean of the two middle ones
        d = [fi - med for fi in f]
        j = max(range(len(d)), key=lambda t: abs(d[t]))  # the first largest, as np.argmax
        lim = float(
            lay.limits.apply(check, "Hz", lay.limits.k * math.sqrt(2.0) * cols["uf"][sel[j]])
        )
        code = judge1(d[j], lim, lay.limits.warn)
        mid = lay.meters[sel[j]].id
        if code == PASS:
            bk[PASS].append(make(self.f_tp, d[j], lim))
        else:
            msg = (
                f"{mid} reads {f[j]:.3f} Hz, {d[j]:+.3f} Hz from the other meters (allowed {lim:.3f} Hz): "
                f"check the scale of f.T in map {lay.meters[sel[j]].map_id} or whether {mid} is on another supply"
            )
            bk[code].append(result(check, "bench", code, d[j], lim, "Hz", msg, f"frequency:{mid}"))
