"""network.bad_data: the meter most likely at fault, by the largest normalized residual over
the failed balances and their neighbours (meas.checks.diagnose), or by its voltage ratio."""

from __future__ import annotations

import math

import numpy as np

from ...results import CheckResult
from ..base import FAIL, Buckets, result
from ..columns import P4, Q4
from ..diagnose import Equation, suspects
from ..frame import Frame
from ..layout import Layout
from .grid import Grid


class BadData:
    """Names the most likely wrong meter once a balance or a loss check failed."""

    def __init__(self, lay: Layout, grid: Grid):
        self.lay = lay
        self.two_end = grid.two_end

    def run(
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
