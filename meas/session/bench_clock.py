"""The simulated bench's clock in a session: advanced by the poll cycles (``meas.sim.clock``)."""

from __future__ import annotations

import asyncio
import time
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from ..sim.bench import SimulatedBench
    from ..sim.clock import CycleClock


class BenchDriver:
    """Advances the simulated bench with the poll cycles (``meas.sim.clock.CycleClock``).

    ``before_cycle`` runs before each poll: the bench moves on and writes its registers for the
    new instant, which becomes the snapshot's ``t_mono``. In ``lockstep`` (``Session.views``)
    every cycle is one poll interval of simulated time, whatever the wall clock did, which
    makes a headless walk reproducible; otherwise (the console) the bench moves on by the
    poll slots that passed on the wall clock, so it keeps real time on a slow machine.
    ``wait`` is the switch control's pause between two status reads when nobody polls: one
    poll interval, exactly, so a command is verified against its timeout in simulated time.
    """

    def __init__(self, bench: SimulatedBench, clock: CycleClock, interval_s: float) -> None:
        self.bench, self.clock, self.interval_s = bench, clock, interval_s
        self.lockstep = False
        self._lock = asyncio.Lock()  # one update at a time: the poller's and the control's
        self._wall: float | None = None

    async def before_cycle(self, *, one_slot: bool = False) -> float:
        async with self._lock:
            now = time.monotonic()
            slots = 1
            if not (self.lockstep or one_slot) and self._wall is not None:
                slots = max(1, round((now - self._wall) / self.interval_s))
            self._wall = now
            t = self.clock.advance(slots)
            await self.bench.update(t)
            return t

    async def wait(self) -> None:
        await asyncio.sleep(self.interval_s)
        await self.before_cycle(one_slot=True)


def bench_driver(bench: SimulatedBench | None, interval_s: float) -> BenchDriver | None:
    """The driver of a simulated bench on a cycle clock; None for a real bench."""
    if bench is None:
        return None
    from ..sim.clock import CycleClock

    clock = bench.clock
    return BenchDriver(bench, clock, interval_s) if isinstance(clock, CycleClock) else None
