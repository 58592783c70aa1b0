"""network.p_balance and network.q_balance: Kirchhoff at every fully metered bus.

Which buses are judged, and with which meters, depends only on the switch state: that plan
and the texts of its passing results are cached per switch state.
"""

from __future__ import annotations

import math

from ...results import CheckResult
from ..base import FAIL, NA, PASS, WARN, Buckets, Template, fmt, make, na, result, template
from ..layout import Layout
from ..topology import TopoState
from .grid import Cols, Grid

# per bus, what the switch state alone decides (see BusBalance._plan): bus, the
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


class BusBalance:
    """P and Q sums at each bus, judged against the meters' combined uncertainty."""

    def __init__(self, lay: Layout, grid: Grid):
        self.lay = lay
        self.ids = grid.ids
        self.plain = grid.plain
        self._plans: dict[int, tuple[TopoState, list[_BusPlan]]] = {}

    def _plan(self, st: TopoState) -> list[_BusPlan]:
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

    def run(
        self,
        cols: Cols,
        st: TopoState,
        bk: Buckets,
        eqs: list[tuple[str, tuple[int, ...]]],
        failed: set[str],
    ) -> None:
        lay = self.lay
        ids_all = self.ids
        k, warn = lay.limits.k, lay.limits.warn
        apply, plain = lay.limits.apply, self.plain
        plan = self._plan(st)
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
