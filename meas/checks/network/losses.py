"""network.losses: a branch metered at both ends loses a little power, never gains any."""

from __future__ import annotations

import math

from ...results import CheckResult
from ..base import FAIL, NA, PASS, WARN, Buckets, Template, fmt, judge1, make, na, result, template
from ..layout import Layout
from ..topology import TopoState
from .grid import Cols, Grid


class BranchLosses:
    """Per two-end branch, the sum of both ends' P against a fraction of what it carries."""

    def __init__(self, lay: Layout, grid: Grid):
        self.lay = lay
        self.two_end = grid.two_end
        self.loss_frac = lay.limits.param("network.losses", "max_fraction", 0.05)
        # per two-end branch: n/a switched out, n/a without data, passing template, meter ids
        self.loss_fixed: list[tuple[CheckResult, CheckResult, Template, str]] = []
        for br_id, ia, ib in self.two_end:
            ids = f"{grid.ids[ia]} and {grid.ids[ib]}"
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

    def run(
        self,
        cols: Cols,
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
