"""Network checks: Kirchhoff at every fully metered bus, losses, voltage and frequency agreement,
open switches carrying nothing, live buses having voltage, and the meter most likely at fault.

Sign convention (DEVELOPERS.md): a meter's positive P/Q flows from its bus into its branch, so
at a bus the readings of all its branches sum to zero (per phase as well: every meter there
sees the same phase voltage and KCL holds per conductor).
"""

from __future__ import annotations

import math
from typing import TypedDict

import numpy as np

from ..results import CheckResult
from .base import (
    FAIL,
    NA,
    PASS,
    WARN,
    Buckets,
    Template,
    fmt,
    judge1,
    make,
    na,
    result,
    template,
)
from .columns import I_PH, P4, Q4, F
from .diagnose import Equation, suspects
from .frame import Frame
from .layout import Layout
from .topology import Topology, TopoState


class _Cols(TypedDict):
    """Per meter, the figures the network checks read, as Python lists (cheap to index)."""

    p: list[float]  # P total
    q: list[float]  # Q total
    up: list[float]  # standard uncertainty of P total
    uq: list[float]
    v: list[float]  # mean L-N voltage
    vu: list[float]
    live: list[bool]  # energized
    f: list[float]
    uf: list[float]


# per bus, what the switch state alone decides (see NetworkChecks._balance_plan): bus, the
# fixed n/a results of P and Q (None: judged), the templates of their passing results, the
# judged meters, their ids as text, the meters as a tuple, and whether two or more meet there
_BusPlan = tuple[
    str,
    tuple[CheckResult | None, CheckResult | None],
    tuple[Template, Template],
    list[int],
    str,
    tuple[int, ...],
    bool,
]


def _median(x: list[float]) -> float:
    """statistics.median, inlined: the same middle value or the same (a + b) / 2, but cheaper."""
    n = len(x)
    if n == 1:
        return x[0]
    x = sorted(x)
    i = n // 2
    return x[i] if n % 2 else (x[i - 1] + x[i]) / 2


class NetworkChecks:
    def __init__(self, lay: Layout):
        self.lay = lay
        self.topo = Topology(lay.profile)
        p = lay.profile
        self.two_end: list[tuple[str, int, int]] = []  # branch, meter at from end, meter at to end
        for br in p.branches:
            if br.to_bus is None:
                continue
            a = [i for i, m in enumerate(p.meters) if m.branch == br.id and m.bus == br.from_bus]
            b = [i for i, m in enumerate(p.meters) if m.branch == br.id and m.bus == br.to_bus]
            if a and b:
                self.two_end.append((br.id, a[0], b[0]))
        self.sw_members = {
            sw.id: [i for i, m in enumerate(p.meters) if m.branch == sw.branch] for sw in p.switches
        }
        self.on_bus: dict[str, list[int]] = {
            b.id: [i for i, m in enumerate(p.meters) if m.bus == b.id] for b in p.buses
        }
        self.ids = [m.id for m in p.meters]
        self._plans: dict[int, tuple[TopoState, list[_BusPlan]]] = {}
        self.vn: list[float] = lay.v_n.tolist()
        self.loss_frac = lay.limits.param("network.losses", "max_fraction", 0.05)
        # per two-end branch: n/a switched out, n/a without data, passing template, meter ids
        self.loss_fixed: list[tuple[CheckResult, CheckResult, Template, str]] = []
        for br_id, ia, ib in self.two_end:
            ids = f"{self.ids[ia]} and {self.ids[ib]}"
            self.loss_fixed.append(
                (
                    na(
                        "network.losses",
                        br_id,
                        "branch is switched out (or its switch state is unknown)",
                        "W",
                    ),
                    na("network.losses", br_id, "no good P total at both ends", "W"),
                    template(
                        "network.losses", br_id, PASS, "W", f"losses of {br_id} plausible ({ids})"
                    ),
                    ids,
                )
            )
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
                    f"voltages of {', '.join(self.ids[mi] for mi in mem)} agree",
                ),
            )
            for bus, mem in self.on_bus.items()
        ]
        self.en_fixed = [
            (
                na("network.energization", bus, "no meter with a good voltage on this bus", "V"),
                na("network.energization", bus, "depends on switches of unknown state", "V"),
                template(
                    "network.energization", bus, PASS, "V", f"{bus} is live as the switches say"
                ),
                template(
                    "network.energization", bus, PASS, "V", f"{bus} is dead as the switches say"
                ),
            )
            for bus in self.on_bus
        ]
        self.va_peers = [
            [(mi, [p for p in mem if p != mi]) for mi in mem] for mem in self.on_bus.values()
        ]
        self.plain = (
            not lay.profile.checks.overrides
        )  # no limit overrides: Limits.apply returns its input
        self.f_tp = template(
            "network.f_agree", "bench", PASS, "Hz", "frequencies agree across the bench"
        )

    # ------------------------------------------------------------------ balances
    def _balance_plan(self, st: TopoState) -> list[_BusPlan]:
        """Per bus, what the switch state alone decides: fixed n/a results, or the members and
        the templates of the passing results (cached per switch state)."""
        hit = self._plans.get(id(st))
        if hit is not None and hit[0] is st:
            return hit[1]
        ids_all = self.ids
        plan: list[_BusPlan] = []
        for bus, bs in st.buses.items():
            reason = ""
            mem: list[int] = []
            if bs.live is False:
                reason = "bus is not energized"
            elif bs.unknown:
                reason = f"switch state unknown: {', '.join(bs.unknown)}"
            elif bs.unmetered:
                reason = f"branch {', '.join(bs.unmetered)} at this bus is not metered here"
            else:
                mem = [mi for mi, br in bs.metered if br in bs.in_service]
                if not mem:
                    reason = "no current flows at this bus"
            ids = ", ".join(ids_all[mi] for mi in mem)
            fixed: tuple[CheckResult | None, CheckResult | None] = (None, None)
            if reason:
                fixed = (
                    na("network.p_balance", bus, reason, "W"),
                    na("network.q_balance", bus, reason, "var"),
                )
            # the templates are read only where ``fixed`` is None (made for every bus: one type)
            tps = (
                template("network.p_balance", bus, PASS, "W", f"P balances at {bus} ({ids})"),
                template("network.q_balance", bus, PASS, "var", f"Q balances at {bus} ({ids})"),
            )
            plan.append((bus, fixed, tps, mem, ids, tuple(mem), len(mem) >= 2))
        if len(self._plans) > 256:
            self._plans.clear()
        self._plans[id(st)] = (st, plan)
        return plan

    def _balance(
        self,
        cols: _Cols,
        st: TopoState,
        bk: Buckets,
        eqs: list[tuple[str, tuple[int, ...]]],
        failed: set[str],
    ) -> None:
        lay = self.lay
        ids_all = self.ids
        k, warn = lay.limits.k, lay.limits.warn
        apply, plain = lay.limits.apply, self.plain
        plan = self._balance_plan(st)
        for which, check, name, unit in (
            (0, "network.p_balance", "P", "W"),
            (1, "network.q_balance", "Q", "var"),
        ):
            xs, us = (cols["p"], cols["up"]) if which == 0 else (cols["q"], cols["uq"])
            for bus, fixed, tps, mem, ids, mem_t, multi in plan:
                fx = fixed[which]
                if fx is not None:
                    bk[NA].append(fx)
                    continue
                vals = [xs[mi] for mi in mem]
                r = sum(vals)
                # a NaN reading always makes the sum NaN, so only a NaN sum needs the scan (inf - inf
                # is NaN too but reads no NaN, and is judged below as before)
                if r != r and any(v != v for v in vals):
                    bad = [ids_all[mi] for mi, v in zip(mem, vals, strict=True) if v != v]
                    bk[NA].append(
                        na(check, bus, f"no good {name} total from {', '.join(bad)}", unit)
                    )
                    continue
                acc: float = 0
                for mi in mem:
                    acc += us[mi] ** 2
                u = math.sqrt(acc)  # meters independent: RSS (GUM 5.1.2)
                lim = k * u if plain else float(apply(check, unit, k * u))
                ar = abs(
                    r
                )  # base.judge1, inlined (r is not NaN here; an override may make lim NaN)
                code = NA if lim != lim else FAIL if ar > lim else WARN if ar > warn * lim else PASS
                if code == PASS:
                    bk[PASS].append(make(tps[which], float(r), lim))
                else:
                    if code == FAIL:
                        failed.add(bus)
                    msg = (
                        f"{name} does not balance at {bus}: readings of {ids} sum to {fmt(r, unit)} (allowed "
                        f"{fmt(lim, unit)}): a CT/VT ratio, CT polarity or sign convention error, or an unmetered "
                        "branch; see network.bad_data"
                    )
                    bk[code].append(result(check, bus, code, r, lim, unit, msg, "imbalance"))
                if which == 0 and multi:
                    eqs.append((bus, mem_t))

    def _equations(self, fr: Frame, eqs: list[tuple[str, tuple[int, ...]]]) -> list[Equation]:
        """Per-phase equations with their standard uncertainties (built only when needed)."""
        out: list[Equation] = []
        two = {br: (a, b) for br, a, b in self.two_end}
        for name, mem in eqs:
            m = list(mem)
            sp = np.sqrt(np.sum(fr.u[m, P4][:, :3] ** 2, axis=0))
            sq = np.sqrt(np.sum(fr.u[m, Q4][:, :3] ** 2, axis=0))
            if name in two:  # a branch: losses and charging, allowed as 3 % of the flow (our rule)
                allow = 0.03 * np.abs(fr.x[m[0], P4][:3] + 1j * fr.x[m[0], Q4][:3])
                sp, sq = np.hypot(sp, allow), np.hypot(sq, allow)
            out.append(Equation(name, mem, np.fmax(sp, 1e-9), np.fmax(sq, 1e-9)))
        return out

    def _losses(
        self,
        cols: _Cols,
        st: TopoState,
        bk: Buckets,
        eqs: list[tuple[str, tuple[int, ...]]],
        failed: set[str],
    ) -> None:
        lay = self.lay
        check = "network.losses"
        max_frac = self.loss_frac
        k, warn, apply = lay.limits.k, lay.limits.warn, lay.limits.apply
        xs, us = cols["p"], cols["up"]
        for (br, a, b), (na_off, na_data, tp, ids) in zip(
            self.two_end, self.loss_fixed, strict=True
        ):
            if st.branch_on.get(br) is not True:
                bk[NA].append(na_off)
                continue
            pa, pb = xs[a], xs[b]
            if pa != pa or pb != pb:
                bk[NA].append(na_data)
                continue
            loss = pa + pb
            through = max(abs(pa), abs(pb))
            u = math.hypot(us[a], us[b])
            lim = float(apply(check, "W", k * u))
            hi = max_frac * through + lim
            if loss < -lim:
                code = judge1(loss, lim, warn)
                msg = (
                    f"losses of {br} are negative ({fmt(loss, 'W')}, allowed -{fmt(lim, 'W')}) from {ids}: "
                    "one end reads too high or has the wrong sign; see network.bad_data"
                )
                failed.add(br)
                bk[code].append(result(check, br, code, loss, lim, "W", msg, "negative_losses"))
            elif loss > hi:
                msg = (
                    f"losses of {br} are {fmt(loss, 'W')}, more than {max_frac:.0%} of the {fmt(through, 'W')} it carries, "
                    f"from {ids}: a CT/VT ratio or polarity error at one end; see network.bad_data"
                )
                failed.add(br)
                bk[FAIL].append(result(check, br, FAIL, loss, hi, "W", msg, "excess_losses"))
            elif loss > -warn * lim:
                bk[PASS].append(make(tp, loss, lim))
            else:
                bk[WARN].append(
                    result(check, br, WARN, loss, lim, "W", f"losses of {br} plausible ({ids})")
                )
            eqs.append((br, (a, b)))

    # ------------------------------------------------------------------ voltages
    def _v_agree(self, cols: _Cols, st: TopoState, bk: Buckets) -> dict[int, float]:
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
            ids = ", ".join(lay.meters[mi].id for mi in mem)
            if code == PASS:
                bk[PASS].append(result(check, bus, PASS, wd, wl, "V", f"voltages of {ids} agree"))
                continue
            k = v[worst] / _median([v[p] for p in mem if p != worst])
            mid = lay.meters[worst].id
            cause = f"vt_ratio:{k:.3f}" if code == FAIL else ""
            if code == FAIL:
                ratios[worst] = k
            msg = (
                f"{mid} reads {fmt(v[worst], 'V')} L-N, {k:.3f} times the other meters on {bus} "
                f"(off by {fmt(wd, 'V')}, allowed {fmt(wl, 'V')}): check the VT ratio and voltage wiring of {mid}"
            )
            if len(mem) == 2:
                msg += " (only two meters here: the one farther from nominal is named)"
            bk[code].append(result(check, bus, code, wd, wl, "V", msg, cause))
        return ratios

    def _f_agree(self, cols: _Cols, bk: Buckets) -> None:
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

    # ------------------------------------------------------------------ switching
    def _switches(self, fr: Frame, switches: dict[str, str], st: TopoState, bk: Buckets) -> None:
        lay = self.lay
        check = "network.open_switch"
        frac = lay.limits.param(check, "max_fraction", 0.01)
        for sw in lay.profile.switches:
            mem = self.sw_members[sw.id]
            state = switches.get(sw.id, "unknown")
            if state != "open":
                bk[NA].append(na(check, sw.id, f"switch is {state}", "A"))
                continue
            if not mem:
                bk[NA].append(na(check, sw.id, f"no meter on branch {sw.branch}", "A"))
                continue
            i = fr.x[mem][:, I_PH]
            if np.isnan(i).all():
                bk[NA].append(na(check, sw.id, "no good current reading on the branch", "A"))
                continue
            lim_each = lay.limits.k * fr.u[mem][:, I_PH] + frac * lay.i_n[mem][:, None]
            z = np.where(np.isnan(i), -1.0, i / lim_each)
            r, c = np.unravel_index(int(np.argmax(z)), z.shape)
            val, lim = float(i[r, c]), float(lay.limits.apply(check, "A", lim_each[r, c]))
            code = judge1(val, lim, lay.limits.warn)
            mid = lay.meters[mem[r]].id
            if code == PASS:
                bk[PASS].append(
                    result(check, sw.id, PASS, val, lim, "A", f"no current through open {sw.id}")
                )
            else:
                msg = (
                    f"{sw.id} reports open but {mid} measures {fmt(val, 'A')} on phase {'ABC'[c]}: the status contact "
                    f"is wrong, the switch did not open, or {mid} is on another branch"
                )
                bk[code].append(
                    result(check, sw.id, code, val, lim, "A", msg, f"switch_status:{sw.id}")
                )

    def _energization(self, cols: _Cols, st: TopoState, bk: Buckets) -> None:
        lay = self.lay
        check = "network.energization"
        v, vn = cols["v"], self.vn
        for bus, mem0, (na_none, na_unknown, tp_live, tp_dead) in zip(
            self.on_bus, self.on_bus.values(), self.en_fixed, strict=True
        ):
            mem = [mi for mi in mem0 if v[mi] == v[mi]]
            bs = st.buses[bus]
            if not mem:
                bk[NA].append(na_none)
                continue
            if bs.live is None:
                bk[NA].append(na_unknown)
                continue
            frac = [v[mi] / vn[mi] for mi in mem]
            if bs.live:
                j = min(range(len(frac)), key=frac.__getitem__)  # the first smallest, as np.argmin
                ok = frac[j] >= 0.5
                want = "live through closed switches"
            else:
                j = max(range(len(frac)), key=frac.__getitem__)  # the first largest, as np.argmax
                ok = frac[j] < 0.1
                want = "dead (no closed path to a source)"
            val = v[mem[j]]
            if ok:
                bk[PASS].append(make(tp_live if bs.live else tp_dead, val, math.nan))
            else:
                mid = lay.meters[mem[j]].id
                msg = (
                    f"{bus} should be {want} but {mid} reads {fmt(val, 'V')} L-N: a switch status that does not match the "
                    "switch, a blown VT fuse, or a backfeed"
                )
                bk[FAIL].append(
                    result(
                        check, bus, FAIL, val, unit="V", message=msg, cause=f"energization:{bus}"
                    )
                )

    # ------------------------------------------------------------------ bad data
    def _bad_data(
        self,
        fr: Frame,
        eqs: list[tuple[str, tuple[int, ...]]],
        failed: set[str],
        vt: dict[int, float],
        bk: Buckets,
    ) -> None:
        lay = self.lay
        check = "network.bad_data"
        named: set[int] = set()
        if failed:
            named = self._power_suspect(fr, self._equations(fr, eqs), failed, vt, bk[FAIL])
        for mi, k in sorted(vt.items()):
            if mi not in named:
                mid = lay.meters[mi].id
                msg = f"{mid} is the most likely wrong meter: its voltage reads {k:.3f} times its peers; check its VT ratio and wiring"
                bk[FAIL].append(
                    result(check, mid, FAIL, k, math.nan, "1", msg, f"vt_ratio:{k:.3f}")
                )

    def _power_suspect(
        self,
        fr: Frame,
        eqs: list[Equation],
        failed: set[str],
        vt: dict[int, float],
        out: list[CheckResult],
    ) -> set[int]:
        lay = self.lay
        check = "network.bad_data"
        eq_f = [e for e in eqs if e.name in failed]
        names = {e.name for e in eq_f}
        # every equation sharing a meter with a failed one helps to tell meters apart
        mem = {m for e in eq_f for m in e.members}
        use = [e for e in eqs if e.name in names or mem & set(e.members)]
        s_ph = fr.x[:, P4][:, :3] + 1j * fr.x[:, Q4][:, :3]
        sus = suspects(use, s_ph)
        if sus is None:
            return set()
        mid = lay.meters[sus.meter].id
        where = ", ".join(sorted(names))
        alt = ""
        if sus.others:
            alt = f" (as likely: {', '.join(lay.meters[o].id for o in sus.others)}; more redundancy needed to tell)"
        if sus.cause == "scale":
            if sus.meter in vt and abs(vt[sus.meter] / sus.k - 1.0) < 0.03:
                k = vt[sus.meter]
                alt = ""  # the voltage comparison settles which meter it is
                cause, what = (
                    f"vt_ratio:{k:.3f}",
                    f"its VT ratio looks off by a factor {k:.3f} (voltage and power both)",
                )
            else:
                k = sus.k
                cause, what = (
                    f"ct_ratio:{k:.3f}",
                    f"its CT ratio looks off by a factor {k:.3f} (power reads {k:.3f} times the balance)",
                )
        else:
            cause = sus.cause
            kind, _, arg = cause.partition(":")
            what = (
                f"the CT of phase {arg} looks reversed"
                if kind == "ct_reversed"
                else f"current inputs {arg} look swapped"
            )
        msg = f"{mid} is the most likely wrong meter at {where}: {what}{alt}; normalized residual {sus.lnr:.1f}"
        out.append(result(check, mid, FAIL, sus.lnr, lay.limits.k, "1", msg, cause))
        return {sus.meter}

    def run(self, fr: Frame, switches: dict[str, str], bk: Buckets) -> None:
        st = self.topo.state(switches)
        x, u = fr.x, fr.u
        cols: _Cols = {
            "p": x[:, P4.stop - 1].tolist(),
            "q": x[:, Q4.stop - 1].tolist(),
            "up": u[:, P4.stop - 1].tolist(),
            "uq": u[:, Q4.stop - 1].tolist(),
            "v": fr.v_mean.tolist(),
            "vu": fr.v_mean_u.tolist(),
            "live": fr.energized.tolist(),
            "f": x[:, F].tolist(),
            "uf": u[:, F].tolist(),
        }
        eqs: list[tuple[str, tuple[int, ...]]] = []
        failed: set[str] = set()
        self._balance(cols, st, bk, eqs, failed)
        self._losses(cols, st, bk, eqs, failed)
        vt = self._v_agree(cols, st, bk)
        self._f_agree(cols, bk)
        self._switches(fr, switches, st, bk)
        self._energization(cols, st, bk)
        self._bad_data(fr, eqs, failed, vt, bk)


__all__ = ["NetworkChecks"]
