"""Network checks: Kirchhoff at every fully metered bus, losses, voltage and frequency agreement,
open switches carrying nothing, live buses having voltage, and the meter most likely at fault.

One module per check family; ``NetworkChecks`` builds them once per profile and runs them on
a frame in a fixed order (the balances and losses collect the equations and failures that
bad-data identification then reads).
"""

from __future__ import annotations

from ..base import Buckets
from ..columns import P4, Q4, F
from ..frame import Frame
from ..layout import Layout
from ..topology import Topology
from .agree import Agreement
from .bad_data import BadData
from .balance import BusBalance
from .grid import Cols, Grid
from .losses import BranchLosses
from .switching import Switching


class NetworkChecks:
    """Every network check for one profile (bound methods: no lookup per snapshot)."""

    def __init__(self, lay: Layout):
        self.lay = lay
        self.topo = Topology(lay.profile)
        grid = Grid.build(lay)
        agree, switching = Agreement(lay, grid), Switching(lay, grid)
        self._balance = BusBalance(lay, grid).run
        self._losses = BranchLosses(lay, grid).run
        self._v_agree = agree.voltages
        self._f_agree = agree.frequency
        self._switches = switching.open_switches
        self._energization = switching.energization
        self._bad_data = BadData(lay, grid).run

    def run(self, fr: Frame, switches: dict[str, str], bk: Buckets) -> None:
        st = self.topo.state(switches)
        x, u = fr.x, fr.u
        cols: Cols = {
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
