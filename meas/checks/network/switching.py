"""network.open_switch and network.energization: what the switch states say against what
the meters see (no current through an open switch, voltage exactly on the live buses)."""

from __future__ import annotations

import math

import numpy as np

from ..base import FAIL, NA, PASS, Buckets, fmt, judge1, make, na, result, template
from ..columns import I_PH
from ..frame import Frame
from ..layout import Layout
from ..topology import TopoState
from .grid import Cols, Grid


class Switching:
    """Open switches carry no current; buses are live or dead as the switches say."""

    def __init__(self, lay: Layout, grid: Grid):
        self.lay = lay
        self.on_bus = grid.on_bus
        self.vn = grid.vn
        p = lay.profile
        self.sw_members = {
            sw.id: [i for i, m in enumerate(p.meters) if m.branch == sw.branch] for sw in p.switches
        }
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

    def open_switches(
        self, fr: Frame, switches: dict[str, str], st: TopoState, bk: Buckets
    ) -> None:
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

    def energization(self, cols: Cols, st: TopoState, bk: Buckets) -> None:
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
