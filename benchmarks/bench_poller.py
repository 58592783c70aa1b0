"""Full-cycle time of ``meas.poll.cycle.Poller`` against a bare pymodbus loop, side by side.

Run:  /work/venv/bin/python benchmarks/bench_poller.py [--cycles 30] [--sizes 1,8,32,128]

Meter servers (pymodbus TCP, one port per meter, ~80 registers each) run in a separate
process so the poller's own CPU cost is visible. For each fleet size the two pollers take
turns cycle by cycle against the same servers: ours (plan + decode + quality + Snapshot)
and a bare loop issuing exactly the same read requests with pymodbus clients gathered
concurrently, decoding nothing. Printed: median cycle times, ours/bare (target <= 1.2),
N-meter/1-meter (target <= 2 for 32), and requests per cycle vs plan minimum vs naive.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import logging
import multiprocessing as mp
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from common import Figure, Target, median, missing, ratio  # noqa: E402
from rich.console import Console  # noqa: E402
from rich.table import Table  # noqa: E402

from meas.modbus.codec import encode  # noqa: E402
from meas.modbus.plan import naive_request_count, plan_map  # noqa: E402
from meas.model import Bench, Meter, PollSettings, Profile, TcpTransport, Zone  # noqa: E402
from meas.poll.cycle import Poller  # noqa: E402
from meas.profile import load_profile  # noqa: E402
from meas.register_map import REGISTER_KINDS, RegisterMap, RegisterSpec  # noqa: E402

DEMO = Path(__file__).resolve().parents[1] / "profiles_demo" / "feeder_bench.toml"

LOOPBACK = "127.0.0.1"
# A full cycle is measured: the poller's cycle deadline (max(poll interval, learned time)) would
# cut slow answers on a loaded machine and report them as timeouts; the bare loop waits for all.
CYCLE_DEADLINE_S = 5.0
KEYS = [
    f"{q}.{p}"
    for q in ("v_ln", "i", "p", "q", "s", "pf", "v_ang", "i_ang")
    for p in ("A", "B", "C")
]
KEYS += ["v_ll.AB", "v_ll.BC", "v_ll.CA", "i.N", "p.T", "q.T", "s.T", "pf.T", "f.T"]  # 33 float32


def bench_map() -> RegisterMap:
    """80 registers in three reads: 33 float32 from 0, two float64 at 100, six uint16 at 200."""
    specs = [RegisterSpec(k, "input", 2 * n, "float32") for n, k in enumerate(KEYS)]
    specs += [
        RegisterSpec("e_imp.T", "input", 100, "float64"),
        RegisterSpec("e_exp.T", "input", 104, "float64"),
    ]
    specs += [RegisterSpec(f"aux.{i}", "input", 200 + i, "uint16", scale=0.01) for i in range(6)]
    return RegisterMap("bench80", tuple(specs))


def _values(regmap: RegisterMap) -> dict[tuple[int, int], list[int]]:
    out = {}
    for s in regmap.registers:
        v = 50.0 if s.key.startswith("f.") else 0.9 if s.key.startswith("pf.") else 230.0
        out[(4, s.address)] = encode(s, v)
    return out


def _serve(n: int, conn) -> None:
    """Child process: n pymodbus TCP servers on loopback ports from the OS, until told to stop."""
    from pymodbus.server import ModbusTcpServer
    from pymodbus.simulator import DataType, SimData, SimDevice

    logging.getLogger("pymodbus").setLevel(logging.CRITICAL)

    async def main():
        regmap = bench_map()
        servers = []
        for _ in range(n):
            blocks = (
                [SimData(0, count=16, values=False, datatype=DataType.BITS)],
                [SimData(0, count=16, values=False, datatype=DataType.BITS)],
                [SimData(0, count=300, values=0, datatype=DataType.REGISTERS)],
                [SimData(0, count=300, values=0, datatype=DataType.REGISTERS)],
            )
            srv = ModbusTcpServer([SimDevice(1, simdata=blocks)], address=(LOOPBACK, 0))
            await srv.serve_forever(background=True)
            for (fc, addr), words in _values(regmap).items():
                await srv.async_setValues(1, fc, addr, words)
            servers.append(srv)
        conn.send([s.transport.sockets[0].getsockname()[1] for s in servers])
        loop = asyncio.get_running_loop()
        await loop.run_in_executor(None, conn.recv)  # block until the parent says stop
        for s in servers:
            await s.shutdown()

    asyncio.run(main())


def _profile(ports: list[int], regmap: RegisterMap) -> Profile:
    meters = tuple(
        Meter(
            id=f"M{i:03d}",
            label="",
            transport=TcpTransport(LOOPBACK, p),
            unit_id=1,
            map_id=regmap.id,
            bus="B",
            branch=None,
            timeout_s=1.0,
            retries=0,
        )
        for i, p in enumerate(ports)
    )
    return Profile(
        path="<bench>",
        sha256="",
        bench=Bench("bench", 50.0, 1.0, 1.0, (Zone("z", 400, 400),)),
        maps={regmap.id: regmap},
        meters=meters,
        buses=(),
        branches=(),
        switches=(),
        poll=PollSettings(max_gap=8),
    )


class BareLoop:
    """pymodbus clients, one per meter, the same reads gathered concurrently; no decoding."""

    def __init__(self, ports: list[int], requests):
        self.ports, self.requests, self.clients = ports, requests, []

    async def start(self):
        from pymodbus.client import AsyncModbusTcpClient

        self.clients = [
            AsyncModbusTcpClient(LOOPBACK, port=p, timeout=1.0, retries=0, reconnect_delay=0)
            for p in self.ports
        ]
        await asyncio.gather(*(c.connect() for c in self.clients))

    async def _one(self, c):
        for r in self.requests:
            rr = await c.read_input_registers(r.address, count=r.count, device_id=1)
            assert not rr.isError()

    async def cycle(self):
        await asyncio.gather(*(self._one(c) for c in self.clients))

    def close(self):
        for c in self.clients:
            c.close()


async def measure(ports: list[int], cycles: int) -> dict:
    regmap = bench_map()
    plan = plan_map(regmap, 8)
    poller = Poller(_profile(ports, regmap))
    bare = BareLoop(ports, plan.requests)
    await poller.start()
    await bare.start()
    ours_t, bare_t = [], []
    try:
        for _ in range(3):  # warm up both
            await poller.poll_once(deadline_s=CYCLE_DEADLINE_S)
            await bare.cycle()
        for i in range(cycles):
            order = (0, 1) if i % 2 == 0 else (1, 0)  # alternate who goes first
            for who in order:
                t0, c0 = time.perf_counter(), time.process_time()
                if who == 0:
                    snap = await poller.poll_once(deadline_s=CYCLE_DEADLINE_S)
                    ours_t.append((time.perf_counter() - t0, time.process_time() - c0))
                    bad = [m for m, b in snap.meters.items() if b.state != "ok"]
                    if bad:
                        b = snap.meters[bad[0]]
                        raise RuntimeError(
                            f"{len(bad)} meters not ok, e.g. {bad[0]}: {b.state} {b.error}"
                        )
                else:
                    await bare.cycle()
                    bare_t.append((time.perf_counter() - t0, time.process_time() - c0))
    finally:
        await poller.close()
        bare.close()
    return {
        "ours": median(t for t, _ in ours_t),
        "bare": median(t for t, _ in bare_t),
        "ours_cpu": median(c for _, c in ours_t),
        "bare_cpu": median(c for _, c in bare_t),
        "requests": poller_requests(poller, plan) * len(ports),
        "plan_min": _dp_min(regmap) * len(ports),
        "naive": naive_request_count(regmap) * len(ports),
    }


def poller_requests(poller: Poller, plan) -> int:
    """Reads the poller issues per meter per cycle (from the plan it actually uses)."""
    return len(next(iter(poller.plans.values())).requests)


def _dp_min(regmap: RegisterMap, max_gap: int = 8) -> int:
    """Exact minimum number of reads (DP over contiguous groups), independent of the greedy plan."""
    limit = min(125, regmap.max_read)
    total = 0
    for kind in REGISTER_KINDS:
        s = sorted((x for x in regmap.registers if x.kind == kind), key=lambda x: x.address)
        best = [0] + [10**9] * len(s)
        for j in range(1, len(s) + 1):
            for i in range(1, j + 1):
                g = s[i - 1 : j]
                if (
                    all(b.address - a.end <= max_gap for a, b in zip(g, g[1:], strict=False))
                    and g[-1].end - g[0].address <= limit
                ):
                    best[j] = min(best[j], best[i - 1] + 1)
        total += best[-1]
    return total


def run(sizes: list[int], cycles: int, keep_going: bool = False) -> dict[int, dict | Exception]:
    """Measure every fleet size against one server process holding the largest fleet.

    With ``keep_going`` a size that fails gives its exception instead of ending the run.
    """
    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe()
    proc = ctx.Process(target=_serve, args=(max(sizes), child), daemon=True)
    proc.start()
    try:
        if not parent.poll(60):
            raise RuntimeError("meter server process did not report its ports within 60 s")
        ports = parent.recv()
        rows: dict[int, dict | Exception] = {}
        for n in sizes:
            try:
                rows[n] = asyncio.run(measure(ports[:n], cycles))
            except Exception as e:
                if not keep_going:
                    raise
                rows[n] = e
        return rows
    finally:
        with contextlib.suppress(
            OSError
        ):  # the server process may be gone; its failure is the error to show
            parent.send("stop")
        proc.join(10)
        if proc.is_alive():
            proc.terminate()


def plan_figures() -> list[Figure]:
    """Reads per cycle of the poll plan against one read per quantity, per map and for the demo.

    Target: the exact minimum (``_dp_min``, a dynamic programme independent of the greedy plan).
    """
    demo = load_profile(DEMO)
    gap = demo.poll.max_gap
    maps = dict(demo.maps)
    maps[bench_map().id] = bench_map()
    out = []
    for map_id, regmap in maps.items():
        ours, naive, least = (
            len(plan_map(regmap, gap).requests),
            naive_request_count(regmap),
            _dp_min(regmap, gap),
        )
        out.append(
            Figure(
                "poll plan",
                f"reads per cycle, map {map_id} ({len(regmap.registers)} quantities) vs naive",
                ours,
                "req",
                naive,
                ratio(ours, naive),
                (Target("ours", "==", least, f"= {least} (minimum)"),),
            )
        )
    ours = sum(len(plan_map(demo.maps[m.map_id], gap).requests) for m in demo.meters)
    naive = sum(naive_request_count(demo.maps[m.map_id]) for m in demo.meters)
    least = sum(_dp_min(demo.maps[m.map_id], gap) for m in demo.meters)
    out.append(
        Figure(
            "poll plan",
            f"reads per cycle, demo bench ({len(demo.meters)} meters) vs naive",
            ours,
            "req",
            naive,
            ratio(ours, naive),
            (Target("ours", "==", least, f"= {least} (minimum)"),),
        )
    )
    return out


def figures(sizes: tuple[int, ...] = (1, 8, 32, 128), cycles: int = 30) -> list[Figure]:
    """Poller cycle per fleet size against the bare pymodbus loop, and 32- vs 1-meter scaling."""
    rows = run(list(sizes), cycles, keep_going=True)
    out = []
    for n, r in rows.items():
        name = f"cycle, {n} meter{'s' if n > 1 else ''} vs bare pymodbus loop"
        if isinstance(r, Exception):
            out.append(
                missing(
                    "poller",
                    name,
                    f"failed: {type(r).__name__}: {r}",
                    "ms",
                    (Target("ratio", "<=", 1.2),),
                )
            )
            continue
        out.append(
            Figure(
                "poller",
                name,
                r["ours"] * 1e3,
                "ms",
                r["bare"] * 1e3,
                ratio(r["ours"], r["bare"]),
                (Target("ratio", "<=", 1.2),),
                note=f"CPU per cycle {r['ours_cpu'] * 1e3:.2f} vs {r['bare_cpu'] * 1e3:.2f} ms",
                extra={
                    "ours_cpu_ms": r["ours_cpu"] * 1e3,
                    "bare_cpu_ms": r["bare_cpu"] * 1e3,
                    "requests": r["requests"],
                    "cycles": cycles,
                },
            )
        )
    one, big = rows.get(1), rows.get(32)
    if isinstance(one, dict) and isinstance(big, dict):
        out.append(
            Figure(
                "poller",
                "cycle, 32 meters vs 1 meter (ours)",
                big["ours"] * 1e3,
                "ms",
                one["ours"] * 1e3,
                ratio(big["ours"], one["ours"]),
                (Target("ratio", "<=", 2.0),),
                note=f"bare loop {big['bare'] / one['bare']:.2f}x",
            )
        )
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cycles", type=int, default=30)
    ap.add_argument("--sizes", default="1,8,32,128")
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    rows = run(sizes, args.cycles)
    regmap = bench_map()
    plan = plan_map(regmap, 8)
    t = Table(
        title=f"poll cycle, {plan.registers_read} registers/meter in {len(plan.requests)} reads "
        f"(naive {naive_request_count(regmap)}), {args.cycles} cycles each, servers in another process"
    )
    for col in (
        "meters",
        "ours ms",
        "bare ms",
        "ours/bare",
        "ours cpu ms",
        "bare cpu ms",
        "cpu ratio",
        "ours N/1",
        "bare N/1",
        "requests",
        "plan min",
        "naive",
    ):
        t.add_column(col, justify="right")
    base = rows[sizes[0]]
    for n in sizes:
        r = rows[n]
        t.add_row(
            str(n),
            f"{r['ours'] * 1000:.2f}",
            f"{r['bare'] * 1000:.2f}",
            f"{r['ours'] / r['bare']:.2f}",
            f"{r['ours_cpu'] * 1000:.2f}",
            f"{r['bare_cpu'] * 1000:.2f}",
            f"{r['ours_cpu'] / r['bare_cpu']:.2f}",
            f"{r['ours'] / base['ours']:.2f}",
            f"{r['bare'] / base['bare']:.2f}",
            str(r["requests"]),
            str(r["plan_min"]),
            str(r["naive"]),
        )
    Console(width=140).print(t)
    print(
        "targets: ours/bare <= 1.2; 32-meter / 1-meter <= 2. cpu = this process's CPU time per cycle"
    )


if __name__ == "__main__":
    main()
