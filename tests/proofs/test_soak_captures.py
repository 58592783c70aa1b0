"""Memory of a long capture step stays flat: the step keeps counts, not every capture's results.

The session's real runner, checks and SQLite journal on the fast demo bench (real Modbus on
loopback for the one real snapshot; copies of it with advancing times are fed to the runner
so the run is not bound to the wall clock), one capture step of many captures. The Python
heap (tracemalloc) is sampled after a warm-up and at the end of the step, before its review:
it must grow by less than ``BOUND_PER_CAPTURE`` bytes per capture. Keeping every capture's
results for the review, as the step did before, grows it by about 40 KiB per capture
(130-odd ``CheckResult`` per capture). The 10,000-capture figures (RSS and heap) come from
``benchmarks/bench_capture_memory.py``.
"""

from __future__ import annotations

import dataclasses
import gc
import tracemalloc
from datetime import timedelta

import pytest
from support.benches import write_bench

from meas.session import Session
from meas.walk.states import State

CAPTURES = 130  # one step; the heap is compared between capture WARM_UP and the last
WARM_UP = 70  # past the runner's history (64 snapshots), full by then
# bytes per capture: well under the ~40 KiB a kept batch of results costs, well over the
# noise of the allocator and the bounded histories (common practice for a leak check)
BOUND_PER_CAPTURE = 2048

ONE_LONG_STEP = f"""
[[step]]
id = "long"
title = "Many captures"
kind = "capture"
instruction = "Capture."
expect = {{ CB1 = "closed", SW2 = "closed", SW3 = "closed", TIE = "open", RX = "open", LB2 = "closed" }}
capture = {{ snapshots = {CAPTURES}, interval_s = 0.1, settle = {{ window_s = 0.5, rel_spread = 0.01, timeout_s = 6.0 }} }}
"""


@pytest.mark.slow  # 130 captures through every check: a minute or more
async def test_heap_does_not_grow_with_the_captures_of_a_step(tmp_path):
    profile = write_bench(tmp_path / "bench", ONE_LONG_STEP)
    s = await Session.new(
        profile, "soak", sessions_dir=tmp_path / "s", simulate=True, seed=1, live_checks=False
    )
    try:
        snap = await s.poller.poll_once()
        r = s.runner
        tracemalloc.start(5)
        marks: dict[int, int] = {}
        shots: dict[int, tracemalloc.Snapshot] = {}
        tick = 0
        while r.view().state is not State.REVIEWING:
            tick += 1
            assert tick < 20 * CAPTURES, f"stuck in {r.view().state}: {r.view().message}"
            await r.tick(
                dataclasses.replace(
                    snap,
                    seq=snap.seq + tick,
                    t_mono=snap.t_mono + 0.1 * tick,
                    time_utc=snap.time_utc + timedelta(seconds=0.1 * tick),
                )
            )
            v = r.view()
            if v.state is State.WAITING and v.action == "capture":
                r.capture()
            if v.captured in (WARM_UP, CAPTURES - 1) and v.captured not in marks:
                gc.collect()
                marks[v.captured] = tracemalloc.get_traced_memory()[0]
                shots[v.captured] = tracemalloc.take_snapshot()
        tracemalloc.stop()
        assert r.view().captured == CAPTURES
    finally:
        await s.close()
    per_capture = (marks[CAPTURES - 1] - marks[WARM_UP]) / (CAPTURES - 1 - WARM_UP)
    growth = shots[CAPTURES - 1].compare_to(shots[WARM_UP], "lineno")[:4]
    assert per_capture < BOUND_PER_CAPTURE, (
        f"{per_capture:.0f} bytes per capture; largest growth: {[str(g) for g in growth]}"
    )
