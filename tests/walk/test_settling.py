"""No alarms before the readings settle, and no culprit blamed for a meter that is in doubt.

Real sessions on the fast demo bench (simulated bench over loopback Modbus, real SQLite),
with the live checks on, as the console runs them.
"""

from __future__ import annotations

import contextlib
import io
import time

import pytest
from support.benches import DEMO, fast_sequence_text, write_bench

from meas.journal.read import JournalView
from meas.results import Status
from meas.session import Session
from meas.walk.states import State


async def _session(tmp_path, faults=(), name="b") -> Session:
    seq = fast_sequence_text((DEMO.parent / "feeder_bench.sequence.toml").read_text())
    profile = write_bench(tmp_path / name, seq)
    return await Session.new(
        profile,
        "T. Tester",
        sessions_dir=tmp_path / "sessions",
        session_id=f"settle-{name}",
        simulate=True,
        faults=list(faults),
        seed=11,
    )


# wall deadlines: simulated seconds times this (the simulated bench advances by poll cycles in
# ``Session.views``, and a loaded machine runs fewer cycles per second than the poll rate)
WALL_PER_SIM_S = 8.0


@pytest.mark.slow
async def test_frozen_m1_is_named_on_m1_at_step_1_and_no_switch_is_blamed(tmp_path):
    s = await _session(tmp_path, ["frozen:M1"])
    try:
        r = s.runner
        deadline = time.monotonic() + 30 * WALL_PER_SIM_S
        review = None
        async with contextlib.aclosing(s.views()) as views:
            async for v in views:
                assert time.monotonic() < deadline, f"stuck in {v.state}"
                if v.state is State.WAITING and v.polled and v.action == "capture":
                    s.set_by_hand(v, "capture")
                    r.capture()
                if v.state is State.REVIEWING:
                    review = v
                    break
        assert review is not None and review.index == 0
        failing = [(x.check, x.subject) for x in review.results if x.status is Status.FAIL]
        assert ("quality.frozen", "M1") in failing
        switch_ids = {sw.id for sw in s.profile.switches}
        assert not [f for f in failing if f[1] in switch_ids], failing
        assert all(f[1] == "M1" for f in failing), failing
        stood = [x for x in review.results if x.cause == "stood_down"]
        assert stood and all("M1 frozen" in x.message for x in stood)
        jv = JournalView(s.journal.path)
        doubt = [e for e in jv.events() if e.kind == "readings_in_doubt"]
        jv.close()
        assert doubt and doubt[0].message.startswith("M1 frozen")
    finally:
        await s.close()


@pytest.mark.slow
async def test_no_fail_is_shown_while_settling_over_the_whole_demo_sequence(tmp_path):
    from tui.commands.technicians import SimTechnician

    s = await _session(tmp_path)
    tech = SimTechnician(s, out=io.StringIO())
    seen_settling = 0
    steps_settled: set[int] = set()
    try:
        deadline = time.monotonic() + 240 * WALL_PER_SIM_S
        async with contextlib.aclosing(s.views()) as views:
            async for v in views:
                assert time.monotonic() < deadline, f"stuck at step {v.index} {v.state}"
                if v.overall == "settling":
                    seen_settling += 1
                    steps_settled.add(v.index)
                    shown = [(x.check, x.subject, x.message) for x in v.results]
                    assert all(x.status not in (Status.FAIL, Status.WARN) for x in v.results), (
                        v.index,
                        shown[:3],
                    )
                if s.runner.done:
                    break
                if v.polled:
                    await tech.act(s.runner, v)
        assert s.runner.finished
        assert seen_settling > 20 and len(steps_settled) >= 8  # every switching step settled
        assert s.runner.verdict().word.startswith("PASS"), s.runner.verdict().line
    finally:
        await s.close()


@pytest.mark.slow
async def test_the_demo_bench_starts_as_its_first_step_says(tmp_path):
    # the demo's step 1: every switch open; M1 (source side of CB1) live, M2..M8 near zero
    s = await _session(tmp_path, name="first")
    try:
        step = s.runner.step
        assert step is not None and step.id == "dead-bench"
        assert "M1 stays live" in step.instruction and "source side of CB1" in step.instruction
        deadline = time.monotonic() + 20
        async with contextlib.aclosing(s.views()) as views:
            async for v in views:
                assert time.monotonic() < deadline, (v.mismatches, v.overall)
                if v.polled and not v.mismatches and v.overall == "consistent":
                    break
        assert v.action == "capture" and v.to_operate == ()  # nothing to set by hand first
        assert not [x for x in v.results if x.status is Status.FAIL]
        snap = s.runner.last
        assert snap is not None
        m1 = snap.meters["M1"].values
        assert m1["v_ln.A"] > 100.0 and abs(m1["i.A"]) < 0.5  # live, no load (bench volts)
        for mid in ("M2", "M3", "M4", "M5", "M6", "M7", "M8"):
            vals = snap.meters[mid].values
            assert abs(vals.get("v_ln.A", 0.0)) < 5.0 and abs(vals.get("i.A", 0.0)) < 0.5, mid
    finally:
        await s.close()
