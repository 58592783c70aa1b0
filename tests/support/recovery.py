"""Meters that go away and come back, while the poller runs at its cycle: shared by the poller's
recovery test and ``benchmarks/bench_recovery.py``.

Real pymodbus servers on loopback: a gateway with three units (M1 and M3 healthy, M2 falls
silent and answers again: a dead meter behind a gateway) and a meter on its own port (M4: the
server is stopped and started again on the same port). ``Poller.run`` polls at the profile's
interval (the default 0.2 s) with the default backoff (0.5 s doubling to 10 s), in the same
event loop; each return is timed from the moment the meter answers again to the first
snapshot that holds its values.
"""

from __future__ import annotations

import asyncio
import contextlib
import statistics
import time
from dataclasses import dataclass, field

from meas.model import PollSettings
from meas.poll.cycle import Poller
from meas.snapshot import CommState, Snapshot
from support.modbus_helpers import (
    MeterServer,
    float_map,
    free_port,
    make_profile,
    tcp_meter,
)

VALUES = {"v_ln.A": 230.0, "i.A": 5.25, "p.T": 1207.5, "q.T": -256.0, "pf.T": 0.984375, "f.T": 50.0}
HEALTHY = ("M1", "M3")


@dataclass
class RecoveryRun:
    returns: dict[str, list[float]] = field(default_factory=dict)  # meter -> seconds, per return
    snapshots: list[Snapshot] = field(default_factory=list)

    @property
    def all_returns(self) -> list[float]:
        return [x for xs in self.returns.values() for x in xs]

    def summary(self) -> str:
        xs = self.all_returns
        return (
            f"meter return: {len(xs)} returns, median {statistics.median(xs):.2f} s, "
            f"worst {max(xs):.2f} s ("
            + ", ".join(f"{m}: " + " ".join(f"{x:.2f}" for x in v) for m, v in self.returns.items())
            + ")"
        )

    def healthy_ok_fraction(self) -> float:
        """Share of cycles in which M1 and M3 were read, leaving out the two cycles in which
        M2's first silence was found: that costs its timeout x (retries + 1) on the shared
        link once, which no deadline can hide (the test is about backoff and return)."""
        cycles = [s for s in self.snapshots if s.meters["M2"].error_count not in (1, 2)]
        ok = sum(
            all(s.meters[m].state in (CommState.OK, CommState.DEGRADED) for m in HEALTHY)
            for s in cycles
        )
        return ok / max(1, len(cycles))

    def largest_gap_s(self) -> float:
        t = [s.t_mono for s in self.snapshots]
        return max((b - a for a, b in zip(t, t[1:], strict=False)), default=0.0)


async def run_recovery(downtimes_s: tuple[float, ...], interval_s: float = 0.2) -> RecoveryRun:
    """For each downtime: M2 silent and M4's server down that long, then both back."""
    fmap = float_map()
    gw = MeterServer(units=(1, 2, 3))
    m4_port = free_port()
    m4 = MeterServer(port=m4_port)
    await gw.start()
    await m4.start()
    for u in (1, 2, 3):
        await gw.load(u, fmap, VALUES)
    await m4.load(1, fmap, VALUES)
    prof = make_profile(
        [fmap],
        [
            tcp_meter("M1", gw.port, 1, timeout_s=0.5, retries=1),
            tcp_meter("M2", gw.port, 2, timeout_s=0.5, retries=1),
            tcp_meter("M3", gw.port, 3, timeout_s=0.5, retries=1),
            tcp_meter("M4", m4_port, 1, timeout_s=0.5, retries=1),
        ],
        poll=PollSettings(interval_s=interval_s),  # the defaults: backoff 0.5 s .. 10 s
    )
    run = RecoveryRun({"M2": [], "M4": []})
    poller = Poller(prof)
    seen: dict[str, asyncio.Event] = {}
    back_at: dict[str, float] = {}

    async def consume() -> None:
        async for snap in poller.run(interval_s):
            run.snapshots.append(snap)
            now = time.monotonic()
            for m, ev in list(seen.items()):
                b = snap.meters[m]
                if m in back_at and b.state is CommState.OK and dict(b.values) == VALUES:
                    run.returns[m].append(now - back_at.pop(m))
                    ev.set()

    task = asyncio.create_task(consume())
    try:
        await asyncio.sleep(1.0)  # learned healthy times
        for down in downtimes_s:
            gw.silent.add(2)
            await m4.stop()
            await asyncio.sleep(down)
            seen = {"M2": asyncio.Event(), "M4": asyncio.Event()}
            await m4.start()
            back_at["M4"] = time.monotonic()
            gw.silent.discard(2)
            back_at["M2"] = time.monotonic()
            async with asyncio.timeout(30):
                await asyncio.gather(*(e.wait() for e in seen.values()))
            seen = {}
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
        await poller.close()
        await gw.stop()
        await m4.stop()
    return run
