"""Soak: the poller at 10 Hz against eight meters served by another process, with outages.

The server is ``tests/support/hostile_server.py`` run as its own process (so the polling process's
memory and file descriptors are the poller's alone); the test toggles random units between
ok and an outage (silent, socket closed, late, gateway exception 0x0B, garbage) over the
server's stdin. Measured in the polling process: RSS (psutil), open file descriptors,
asyncio tasks. The second half of the run is compared with the first: growth must stay
bounded, and the number of cycles must match the elapsed time at 10 Hz.

Default 30 s. Ten minutes::

    BENCHWALK_SOAK=1 /work/venv/bin/pytest -q -s tests/proofs/test_soak.py
"""

from __future__ import annotations

import asyncio
import os
import random
import statistics
import sys
import time
from pathlib import Path

import psutil
import pytest
from support.modbus_helpers import encoded, float_map, make_profile, tcp_meter

from meas.model import PollSettings
from meas.poll.cycle import Poller
from meas.snapshot import CommState

DURATION_S = 600.0 if os.environ.get("BENCHWALK_SOAK") == "1" else 30.0
INTERVAL_S = 0.1
UNITS = tuple(range(1, 9))
OUTAGES = (("silent", ""), ("close", ""), ("late", "0.5"), ("exception", "11"), ("garbage", ""))
RSS_GROWTH_BOUND = (
    4 * 2**20
)  # bytes, second-half median over first-half median (from memory: allocator noise ~1 MB)
FMAP = float_map()


async def _command(proc: asyncio.subprocess.Process, line: str) -> None:
    assert proc.stdin is not None and proc.stdout is not None
    proc.stdin.write((line + "\n").encode())
    await proc.stdin.drain()
    reply = await asyncio.wait_for(proc.stdout.readline(), 5.0)
    assert reply.strip() == b"ack", reply


@pytest.mark.slow
async def test_soak_memory_sockets_and_cycle_count_stay_flat():
    server = Path(__file__).resolve().parents[1] / "support" / "hostile_server.py"
    proc = await asyncio.create_subprocess_exec(
        sys.executable,
        str(server),
        "--units",
        f"{UNITS[0]}-{UNITS[-1]}",
        stdin=asyncio.subprocess.PIPE,
        stdout=asyncio.subprocess.PIPE,
    )
    poller = None
    try:
        assert proc.stdout is not None
        first = await asyncio.wait_for(proc.stdout.readline(), 10.0)
        port = int(first.split()[1])
        for u in UNITS:
            values = {
                "v_ln.A": 230.0 + u,
                "i.A": 5.25,
                "p.T": 1000.0 + u,
                "q.T": -256.0,
                "pf.T": 0.5,
                "f.T": 50.0,
            }
            for _kind, address, words in encoded(FMAP, values):
                await _command(proc, f"words {u} {address} {','.join(map(str, words))}")
        meters = [tcp_meter(f"M{u}", port, u, timeout_s=0.2, retries=1) for u in UNITS]
        poller = Poller(
            make_profile(
                [FMAP],
                meters,
                poll=PollSettings(interval_s=INTERVAL_S, backoff_initial_s=0.2, backoff_max_s=2.0),
            )
        )
        me = psutil.Process()
        rng = random.Random(20261201)
        down: dict[int, float] = {}  # unit -> monotonic time it comes back
        samples: list[tuple[float, int, int, int]] = []  # (t, rss, fds, tasks)
        cycles = ok_blocks = blocks = outages = 0
        next_sample = next_toggle = 0.0
        t0 = time.monotonic()
        async for snap in poller.run(INTERVAL_S):
            cycles += 1
            assert set(snap.meters) == {f"M{u}" for u in UNITS}
            for mid, b in snap.meters.items():
                blocks += 1
                ok_blocks += b.state is CommState.OK
                if b.state is CommState.OK:
                    assert b.values["v_ln.A"] == 230.0 + int(mid[1:])  # never another unit's value
            now = time.monotonic() - t0
            if now >= DURATION_S:
                break
            if now >= next_sample:
                samples.append((now, me.memory_info().rss, me.num_fds(), len(asyncio.all_tasks())))
                next_sample += 1.0
            if now >= next_toggle:  # server-side outages: at most two units down at once
                next_toggle += rng.uniform(0.5, 1.5)
                for u, until in list(down.items()):
                    if now >= until:
                        await _command(proc, f"mode {u} ok")
                        del down[u]
                if len(down) < 2:
                    u = rng.choice([u for u in UNITS if u not in down])
                    mode, arg = rng.choice(OUTAGES)
                    await _command(proc, f"mode {u} {mode} {arg}".strip())
                    down[u] = now + rng.uniform(0.5, 3.0)
                    outages += 1
        elapsed = time.monotonic() - t0
    finally:
        if poller is not None:
            await poller.close()
        if proc.returncode is None:
            proc.kill()
            await proc.wait()

    skip = max(1, len(samples) // 10)  # the first seconds fill caches and pools
    warm = samples[skip:]
    half = len(warm) // 2
    a, b = warm[:half], warm[half:]
    rss_growth = statistics.median(s[1] for s in b) - statistics.median(s[1] for s in a)
    fds_a, fds_b = max(s[2] for s in a), max(s[2] for s in b)
    tasks_a, tasks_b = max(s[3] for s in a), max(s[3] for s in b)
    expected = elapsed / INTERVAL_S
    print(
        f"\nsoak {elapsed:.1f} s: {cycles} cycles (expected {expected:.0f} at {1 / INTERVAL_S:g} Hz), "
        f"{outages} outages, {ok_blocks}/{blocks} meter blocks ok, late answers dropped {poller.late_answers}; "
        f"RSS {statistics.median(s[1] for s in a) / 2**20:.1f} -> {statistics.median(s[1] for s in b) / 2**20:.1f} MiB "
        f"(growth {rss_growth / 2**10:.0f} KiB), fds max {fds_a} -> {fds_b}, tasks max {tasks_a} -> {tasks_b}"
    )
    assert outages >= DURATION_S / 3
    assert 0.9 * expected <= cycles <= expected + 1
    assert rss_growth <= RSS_GROWTH_BOUND
    assert fds_b <= fds_a + 2  # a redial in progress may hold one more socket
    assert tasks_b <= tasks_a
    assert ok_blocks >= 0.5 * blocks  # six of eight meters up at any time
