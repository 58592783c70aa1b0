"""Update rate of the simulated bench while the Poller polls every demo meter at 10 Hz.

Two setups side by side in one run: the bench in a separate process (as with
``benchwalk sim``) and the bench in the poller's own event loop (as in tests and the headless
demo). Prints the median and 95th-percentile update period of the simulator (target <= 100 ms,
i.e. >= 10 Hz; the demo asks for 20 Hz = 50 ms), the median poll cycle time, and the
cost of one update on its own.

    /work/venv/bin/python benchmarks/bench_sim_rate.py [--seconds 10]
"""

from __future__ import annotations

import argparse
import asyncio
import multiprocessing as mp
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import Figure, Target, median, percentile  # noqa: E402

from meas.poll.cycle import Poller
from meas.profile import load_profile
from meas.sim.bench import SimulatedBench

DEMO = Path(__file__).resolve().parents[1] / "profiles_demo" / "feeder_bench.toml"


def _periods(times: list[float]) -> list[float]:
    return [b - a for a, b in zip(times, times[1:], strict=False)]


def _pct(xs: list[float], q: float) -> float:
    xs = sorted(xs)
    return xs[min(len(xs) - 1, int(q * len(xs)))]


async def _poll(profile, seconds: float) -> list[float]:
    poller = Poller(profile)
    cycles = []
    try:
        await poller.start()
        t_end = time.monotonic() + seconds
        async for snap in poller.run(0.1):
            cycles.append(snap.cycle_s)
            bad = [m for m, b in snap.meters.items() if b.state.value != "ok"]
            assert not bad, (
                f"meters not answering: {[(m, snap.meters[m].state.value, snap.meters[m].error) for m in bad]}"
            )
            if time.monotonic() > t_end:
                break
    finally:
        await poller.close()
    return cycles


def _serve(conn, seconds: float) -> None:
    async def main():
        bench = SimulatedBench(load_profile(DEMO), port_map="free")
        conn.send(await bench.start())
        await asyncio.to_thread(conn.recv)  # until the poller is done; the loop keeps serving
        await bench.stop()
        conn.send(list(bench.update_times))

    asyncio.run(main())


async def same_process(seconds: float):
    bench = SimulatedBench(load_profile(DEMO), port_map="free")
    bound = await bench.start()
    try:
        cycles = await _poll(bound, seconds)
    finally:
        await bench.stop()
    return _periods(bench.update_times[2:]), cycles


def other_process(seconds: float):
    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe()
    proc = ctx.Process(target=_serve, args=(child, seconds))
    proc.start()
    bound = parent.recv()
    cycles = asyncio.run(_poll(bound, seconds))
    parent.send("done")
    times = parent.recv()
    proc.join(10)
    return _periods(times[2:]), cycles


async def update_cost(n: int = 200) -> float:
    """Median wall time of one update (8 meters: faults, noise, encode, register writes)."""
    bench = SimulatedBench(load_profile(DEMO), port_map="free")
    await bench.start()
    bench._task.cancel()  # time updates one by one, without the loop
    costs = []
    try:
        for _ in range(n):
            t0 = time.perf_counter()
            await bench.update()
            costs.append(time.perf_counter() - t0)
    finally:
        await bench.stop()
    return statistics.median(costs)


def figures(seconds: float = 10.0, update_samples: int = 200) -> list[Figure]:
    """Simulator update rate under 10 Hz polling, bench in another process and in the same loop."""
    asked = load_profile(DEMO).sim.get("update_hz", 10)
    out = []
    for name, run in (
        ("bench in other process", lambda: other_process(seconds)),
        ("bench in poller's loop", lambda: asyncio.run(same_process(seconds))),
    ):
        periods, cycles = run()
        med = median(periods)
        out.append(
            Figure(
                "simulator",
                f"update rate under 10 Hz polling, {name}",
                1 / med if med else None,
                "Hz",
                targets=(Target("ours", ">=", 10.0),),
                note=f"asks {asked:g} Hz; p95 period {percentile(periods, 0.95) * 1e3:.0f} ms; "
                f"poll cycle {median(cycles) * 1e3:.1f} ms",
                extra={"updates": len(periods), "asked_hz": asked},
            )
        )
    cost = asyncio.run(update_cost(update_samples))
    out.append(
        Figure(
            "simulator",
            "one update alone (8 meters + PLC)",
            cost * 1e3,
            "ms",
            note=f"{cost * asked * 100:.1f} % of a core at {asked:g} Hz",
        )
    )
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--seconds", type=float, default=10.0)
    seconds = ap.parse_args().seconds
    target_hz = load_profile(DEMO).sim.get("update_hz", 10)
    print(
        f"demo bench, 8 meters + PLC, poller at 10 Hz for {seconds:g} s; sim update_hz = {target_hz}"
    )
    print(
        f"{'setup':<22}{'updates':>8}{'median period ms':>18}{'p95 ms':>9}{'rate Hz':>9}{'poll cycle ms':>15}"
    )
    for name, run in (
        ("bench in other process", lambda: other_process(seconds)),
        ("bench in same loop", lambda: asyncio.run(same_process(seconds))),
    ):
        periods, cycles = run()
        med = statistics.median(periods)
        print(
            f"{name:<22}{len(periods):>8}{med * 1e3:>18.1f}{_pct(periods, 0.95) * 1e3:>9.1f}"
            f"{1 / med:>9.1f}{statistics.median(cycles) * 1e3:>15.1f}"
        )
    cost = asyncio.run(update_cost())
    print(
        f"one update alone: median {cost * 1e3:.2f} ms = {cost * target_hz * 100:.1f} % of one core at {target_hz} Hz"
    )


if __name__ == "__main__":
    main()
