"""Time of all checks on one snapshot: the demo bench and a synthetic 32-meter bench.

The synthetic bench (``radial_bench``) is invented data built in code: a source, a chain of
line sections metered at both ends and load banks metered at each bus, on the demo's maps.

Run:  /work/venv/bin/python benchmarks/bench_checks.py [--repeat 300]

Snapshots come from the simulated bench (meas.sim, noise on) with a history of 16 earlier
snapshots, as the runner feeds them. Cases are measured interleaved, round after round, so a
busy machine slows all of them alike; the table gives the median and the 10th percentile of
the wall time per call, the minimum (closest to an idle machine), and the ratio of each
case's median to the demo bench's engine run. Target:
< 2 ms for 32 meters with a prebuilt ``CheckEngine``.
"""

from __future__ import annotations

import argparse
import dataclasses
import statistics
import time
from pathlib import Path

import numpy as np

from meas.checks import CheckEngine, run_checks
from meas.model import AccuracyClasses, Branch, Bus, Meter, Profile, TcpTransport
from meas.profile import load_profile
from meas.sim.meters import snapshot_from_sim
from meas.sim.readings import ideal_readings

DEMO = Path(__file__).resolve().parent.parent / "profiles_demo" / "feeder_bench.toml"


def radial_bench(base: Profile, n_meters: int = 32) -> Profile:
    """A chain of buses with two-end-metered lines and metered loads, about ``n_meters`` meters."""
    buses, branches, meters = [Bus("B0", base.buses[0].zone)], [Branch("SRC", "source", "B0", sim={"v_ll": 408.0, "sc_va": 2.0e6, "x_r": 8.0})], []
    maps = ["lumen-f32", "corvid-i32", "wren-i16"]
    k = 0

    def meter(bus: str, branch: str, map_id: str) -> None:
        nonlocal k
        k += 1
        extra = {"reports": "secondary", "ct_ratio": 10.0, "vt_ratio": 4.0} if map_id == "corvid-i32" else {}
        meters.append(Meter(f"X{k}", f"synthetic meter {k}", TcpTransport("127.0.0.1", 15100 + k), 1, map_id, bus, branch,
                            ct_primary_a=100.0, classes=AccuracyClasses("0.5S", "2", "0.5", "0.5"), **extra))

    i = 0
    while len(meters) < n_meters:
        i += 1
        prev, bus = f"B{i - 1}", f"B{i}"
        buses.append(Bus(bus, base.buses[0].zone))
        branches.append(Branch(f"L{i}", "line", prev, bus, sim={"r_ohm": 0.02, "x_ohm": 0.03, "b_us": 10.0}))
        meter(prev, f"L{i}", maps[i % 3])
        meter(bus, f"L{i}", maps[(i + 1) % 3])
        branches.append(Branch(f"LD{i}", "load", bus, sim={"model": "pq", "p_w": 1500.0, "q_var": 500.0}))
        if len(meters) < n_meters:
            meter(bus, f"LD{i}", maps[(i + 2) % 3])
    return dataclasses.replace(base, path="<synthetic>", meters=tuple(meters[:n_meters]), buses=tuple(buses),
                               branches=tuple(branches), switches=(), plcs=(), steps=())


def _series(profile, switches, n: int = 40, seed: int = 1):
    ideal = ideal_readings(profile, switches)
    rng = np.random.default_rng(seed)
    out, prev = [], None
    for k in range(n):
        prev = snapshot_from_sim(profile, switches, [], rng, k, ideal=ideal, t_mono=0.2 * k, previous=prev)
        out.append(prev)
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=300)
    args = ap.parse_args()
    demo = load_profile(DEMO)
    big = radial_bench(demo, 32)
    demo_snaps = _series(demo, {s.id: s.normal for s in demo.switches})
    big_snaps = _series(big, {})
    e_demo, e_big = CheckEngine(demo), CheckEngine(big)

    def step(engine, snaps, k):
        """The runner's situation: a new snapshot (its frame not built yet) after 16 known ones."""
        j = 16 + k % (len(snaps) - 16)
        engine.forget(snaps[j])
        return lambda: engine.run(snaps[j], snaps[j - 16:j])

    cases = {
        f"demo bench ({len(demo.meters)} meters), CheckEngine.run": lambda k: step(e_demo, demo_snaps, k),
        f"synthetic bench ({len(big.meters)} meters), CheckEngine.run": lambda k: step(e_big, big_snaps, k),
        f"synthetic bench ({len(big.meters)} meters), run_checks (engine built per call)":
            lambda k: (lambda: run_checks(big, big_snaps[-1], big_snaps[-17:-1])),
    }
    n_results = {name: len(make(0)()) for name, make in cases.items()}  # warm-up, and result counts
    times: dict[str, list[float]] = {name: [] for name in cases}
    for k in range(args.repeat):
        for name, make in cases.items():
            fn = make(k)
            t = time.perf_counter()
            fn()
            times[name].append(time.perf_counter() - t)
    base = statistics.median(times[next(iter(cases))])
    print(f"{'case':72s} {'results':>7s} {'median ms':>10s} {'p10 ms':>8s} {'min ms':>8s} {'ratio':>6s}")
    for name, ts in times.items():
        med = statistics.median(ts)
        p10 = sorted(ts)[len(ts) // 10]
        print(f"{name:72s} {n_results[name]:7d} {med * 1e3:10.3f} {p10 * 1e3:8.3f} {min(ts) * 1e3:8.3f} {med / base:6.2f}")
    try:
        import os

        print(f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs; repeat {args.repeat}")
    except OSError:
        pass
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
