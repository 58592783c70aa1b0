"""Console cost with 32 meters at 5 updates per second, headless.

Measures, in one run: the CPU share of this (console) process over the window, and the delay
from a snapshot being posted by the poll worker to the screen having been refreshed with it.
Snapshots are made by the simulated bench's meter model (``meas.sim.meters``, with noise) for
a 32-meter copy of the demo bench, precomputed so the window measures the console, not the
load flow. Targets: CPU < 30 % of one core, delay < 200 ms.

    /work/venv/bin/python benchmarks/bench_console.py [--seconds 10] [--hz 5] [--size 120x40] [--live]

``--live`` runs the real demo session instead (8 meters at the profile's 5 Hz, with the
simulated bench, poller, checks and journal in the same process), for the whole-process cost.
"""

from __future__ import annotations

import argparse
import asyncio
import dataclasses
import statistics
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import psutil
from textual import events

from meas.profile import load_profile
from meas.sim.meters import snapshot_from_sim
from meas.sim.readings import ideal_readings
from meas.snapshot import Snapshot
from tui.app import BenchwalkApp
from tui.frame import Frame, StepInfo
from tui.screens.main import MainScreen

DEMO = Path(__file__).resolve().parents[1] / "profiles_demo" / "feeder_bench.toml"


def profile_with(n_meters: int):
    base = load_profile(DEMO)
    meters = []
    for k in range(n_meters):
        m = base.meters[k % len(base.meters)]
        meters.append(
            dataclasses.replace(m, id=f"M{k + 1}", label=f"{m.label} #{k // len(base.meters) + 1}")
        )
    return dataclasses.replace(base, meters=tuple(meters))


class ReplayFeed:
    """Console-shaped feed: precomputed snapshots at a fixed rate, renumbered as they go."""

    def __init__(self, profile, hz: float, n_distinct: int = 25) -> None:
        self.profile = profile
        self.operator = "bench"
        self.interval = 1.0 / hz
        sw = {s.id: s.normal for s in profile.switches}
        ideal = ideal_readings(profile, sw)
        rng = np.random.default_rng(5)
        now = datetime.now(UTC)
        self.snaps = [
            snapshot_from_sim(
                profile, sw, (), rng, i, noise=True, t_mono=0.0, ideal=ideal, time_utc=now
            )
            for i in range(n_distinct)
        ]
        self.k = 0
        self.t0 = None
        self.step = StepInfo(
            1,
            1,
            "bench",
            "Benchmark",
            "Hold still.",
            "capture",
            "waiting",
            overall="consistent",
            next_action="none",
            allowed=frozenset({"skip", "note", "stop"}),
        )

    async def cycle(self) -> Frame:
        if self.t0 is None:
            self.t0 = time.monotonic()
        self.k += 1
        await asyncio.sleep(max(0.0, self.t0 + self.k * self.interval - time.monotonic()))
        src = self.snaps[self.k % len(self.snaps)]
        snap = Snapshot(self.k, datetime.now(UTC), time.monotonic(), src.meters, src.switches)
        return Frame(snap, (), self.step)

    def frame(self) -> Frame:
        return Frame(None, (), self.step)

    def log(self, text: str) -> None:
        pass

    async def close(self) -> None:
        pass


async def measure(
    seconds: float, hz: float, size: tuple[int, int], meters: int, live: bool = False
) -> dict:
    if live:  # the real demo session in this process: simulated bench, poller, checks, journal
        import tempfile

        from meas.session import Session

        tmp = Path(tempfile.mkdtemp(prefix="bench-console-"))

        async def factory(op, resume):
            return await Session.new(DEMO, op, sessions_dir=tmp, simulate=True, seed=1)

        meters, hz = len(load_profile(DEMO).meters), 1.0 / load_profile(DEMO).poll.interval_s
    else:
        feed = ReplayFeed(profile_with(meters), hz)

        def factory(op, resume):
            return feed

    app = BenchwalkApp(factory, skip_intro=True, operator="bench")
    proc = psutil.Process()
    async with app.run_test(size=size) as pilot:
        while not isinstance(app.screen, MainScreen) or app.screen.frames_shown < 3:
            await pilot.pause(0.05)
        main = app.screen
        main.action_view("readings")
        main.latencies.clear()
        shown0, rows0 = main.frames_shown, main.query_one("#pane-readings").rebuilt_rows
        c0, w0 = proc.cpu_times(), time.monotonic()
        await asyncio.sleep(seconds)
        c1, w1 = proc.cpu_times(), time.monotonic()
        shown = main.frames_shown - shown0
        rows = main.query_one("#pane-readings").rebuilt_rows - rows0
        lat = sorted(main.latencies)
        keys = await key_latencies(app, main, 20)
    cpu = ((c1.user - c0.user) + (c1.system - c0.system)) / (w1 - w0)
    return {
        "meters": meters,
        "hz": hz,
        "size": f"{size[0]}x{size[1]}",
        "seconds": round(w1 - w0, 2),
        "frames_per_s": shown / (w1 - w0),
        "rows_rebuilt_per_s": rows / (w1 - w0),
        "cpu_pct_one_core": 100 * cpu,
        "delay_median_ms": 1000 * statistics.median(lat),
        "delay_p95_ms": 1000 * lat[int(0.95 * (len(lat) - 1))],
        "delay_max_ms": 1000 * lat[-1],
        "key_median_ms": 1000 * statistics.median(keys),
        "key_max_ms": 1000 * max(keys),
    }


async def key_latencies(app, main, n: int) -> list[float]:
    """Time from a key event entering the driver to its action having run (U cycles units)."""
    out = []
    for _ in range(n):
        before = main.unit_mode
        event = events.Key("u", "u")
        event.set_sender(app)
        t0 = time.monotonic()
        app._driver.send_message(event)
        while main.unit_mode == before and time.monotonic() - t0 < 5:
            await asyncio.sleep(0.001)
        out.append(time.monotonic() - t0)
        await asyncio.sleep(0.1)  # spread the presses over the poll cycle
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=10.0)
    ap.add_argument("--hz", type=float, default=5.0)
    ap.add_argument("--meters", type=int, default=32)
    ap.add_argument("--size", default="120x40")
    ap.add_argument(
        "--live",
        action="store_true",
        help="the real demo session (8 meters, simulated bench in this process) instead of a replay",
    )
    args = ap.parse_args()
    w, h = (int(x) for x in args.size.split("x"))
    r = asyncio.run(measure(args.seconds, args.hz, (w, h), args.meters, args.live))
    for k, v in r.items():
        print(f"{k:>20}: {v:.1f}" if isinstance(v, float) else f"{k:>20}: {v}")
    print(
        f"{'targets':>20}: cpu < 30 %: {'met' if r['cpu_pct_one_core'] < 30 else 'MISSED'}; "
        f"delay p95 < 200 ms: {'met' if r['delay_p95_ms'] < 200 else 'MISSED'}"
    )


if __name__ == "__main__":
    main()
