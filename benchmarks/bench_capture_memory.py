"""Memory over a long day: a 10,000-capture session must not grow with the captures.

Run:  /work/venv/bin/python benchmarks/bench_capture_memory.py [--captures 10000] [--per-step 50]

The fast demo bench on the simulated bench (real Modbus on loopback) gives one real snapshot;
the session's real runner, checks and journal then take ``--captures`` captures, ``--per-step``
per step over a sequence of capture steps (walked again and again, as a long day of retakes
and repeated configurations would), fed copies of that snapshot with advancing times so the
run is not bound to the wall clock. Printed: RSS (psutil) and Python heap (tracemalloc) after
each tenth of the captures, growth per 1,000 captures over the second half (target: < 1 MiB
per 1,000 captures, i.e. flat; samples while the walk goes on), the figures once the sequence
has finished, and the largest growing allocation sites.

Measured 2026-12-02 on the shared 2-core machine (load average ~9), 10,000 captures, 100 per
step, in 1,800 s: RSS 66.7 MiB after 1,000 captures, 68.5 MiB after 9,000 (0.3 MiB per 1,000
over the second half); Python heap 0.62 -> 1.03 MiB (about 0.05 MiB per 1,000 captures: the
outcome of each finished step); 5.5 MiB once the sequence finished (its summary, built once).
"""

from __future__ import annotations

import argparse
import asyncio
import dataclasses
import gc
import sys
import tempfile
import time
import tracemalloc
from datetime import timedelta
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import psutil  # noqa: E402
from common import Figure, Target, rich_table  # noqa: E402
from support.benches import FAST_CAPTURE, write_bench  # noqa: E402

from meas.session import Session  # noqa: E402
from meas.walk.states import State  # noqa: E402

STEP = """
[[step]]
id = "radial-{n}"
title = "Radial {n}"
kind = "capture"
instruction = "Capture."
expect = {{ CB1 = "closed", SW2 = "closed", SW3 = "closed", TIE = "open", RX = "open", LB2 = "closed" }}
capture = {{ snapshots = {per}, interval_s = 0.1, settle = {{ window_s = 0.5, rel_spread = 0.01, timeout_s = 6.0 }} }}
gate = "allow"
"""


async def run(captures: int, per_step: int, folder: Path) -> dict[str, object]:
    steps = max(1, captures // per_step)
    sequence = "\n".join(STEP.format(n=i, per=per_step) for i in range(steps))
    assert FAST_CAPTURE  # the same bench the tests use
    profile = write_bench(folder / "bench", sequence)
    s = await Session.new(
        profile, "soak", sessions_dir=folder / "sessions", simulate=True, seed=1, live_checks=False
    )
    me = psutil.Process()
    samples: list[tuple[int, float, float]] = []
    try:
        snap = await s.poller.poll_once()
        r = s.runner
        t0, seq, done = snap.t_mono, snap.seq, 0
        tracemalloc.start(10)
        base = None
        tick = 0
        while not r.done:
            tick += 1
            fed = dataclasses.replace(
                snap,
                seq=seq + tick,
                t_mono=t0 + 0.1 * tick,
                time_utc=snap.time_utc + timedelta(seconds=0.1 * tick),
            )
            await r.tick(fed)
            v = r.view()
            if v.state is State.WAITING and v.action == "capture":
                r.capture()
            elif v.state is State.REVIEWING:
                done += v.captured
                if v.action == "accept":
                    r.accept()
                else:
                    r.accept("soak: accepted for the memory figure")
                if done % max(1, captures // 10) < per_step and not r.done:
                    # while the walk goes on: the end of the sequence builds its summary once
                    gc.collect()
                    heap = tracemalloc.get_traced_memory()[0]
                    samples.append((done, me.memory_info().rss / 2**20, heap / 2**20))
                    if base is None and done >= captures // 2:
                        base = tracemalloc.take_snapshot()
        gc.collect()
        end = (done, me.memory_info().rss / 2**20, tracemalloc.get_traced_memory()[0] / 2**20)
        top = []
        if base is not None:
            diff = tracemalloc.take_snapshot().compare_to(base, "lineno")
            top = [str(d) for d in diff[:5]]
        tracemalloc.stop()
    finally:
        await s.close()
    return {"samples": samples, "top": top, "captures": done, "end": end}


def measure(captures: int, per_step: int) -> list[Figure]:
    with tempfile.TemporaryDirectory() as tmp:
        t = time.perf_counter()
        out = asyncio.run(run(captures, per_step, Path(tmp)))
        took = time.perf_counter() - t
    samples = out["samples"]
    assert isinstance(samples, list)
    for n, rss, heap in samples:
        print(f"  after {n:>6} captures: RSS {rss:7.1f} MiB, Python heap {heap:7.2f} MiB")
    n, rss, heap = out["end"]  # type: ignore[misc]
    print(f"  at the end ({n} captures, sequence finished): RSS {rss:.1f} MiB, heap {heap:.2f} MiB")
    for line in out["top"]:  # type: ignore[union-attr]
        print("  growth:", line)
    half = [x for x in samples if x[0] >= captures // 2]
    per_k_rss = per_k_heap = None
    if len(half) >= 2 and half[-1][0] > half[0][0]:
        k = (half[-1][0] - half[0][0]) / 1000
        per_k_rss = (half[-1][1] - half[0][1]) / k
        per_k_heap = (half[-1][2] - half[0][2]) / k
    note = f"{out['captures']} captures in {took:.0f} s, {per_step} per step"
    return [
        Figure(
            "memory",
            "Python heap growth per 1,000 captures (second half)",
            per_k_heap,
            "MiB",
            targets=(Target("ours", "<", 1.0),),
            note=note,
        ),
        Figure(
            "memory",
            "RSS growth per 1,000 captures (second half)",
            per_k_rss,
            "MiB",
            targets=(Target("ours", "<", 2.0),),
        ),
    ]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--captures", type=int, default=10000)
    ap.add_argument("--per-step", type=int, default=50)
    args = ap.parse_args(argv)
    from rich.console import Console

    Console(width=160).print(rich_table(measure(args.captures, args.per_step), "memory"))
    return 0


if __name__ == "__main__":
    sys.exit(main())
