"""Resume at a remote step whose command went out before the stop: no second command, the
step verifies and captures instead of being refused or skipped.

Real session on the fast demo bench: the stop comes right after the command was sent; the
resumed simulated bench is then put in the state a real bench would be in (RX closed), as the
command had left it.
"""

from __future__ import annotations

import contextlib
import time

import pytest
from support.benches import TEST_SEQUENCE, write_bench

from meas.journal.read import JournalView
from meas.session import Session
from meas.walk.states import State


async def _until(s: Session, pred, timeout_s: float = 20.0):
    deadline = time.monotonic() + timeout_s
    async with contextlib.aclosing(s.views()) as views:
        async for v in views:
            if pred(v):
                return v
            assert time.monotonic() < deadline, f"stuck: {v.state} {v.message}"
    raise AssertionError("ended")


@pytest.mark.slow
async def test_resume_after_the_remote_command_went_out_does_not_send_it_again(tmp_path):
    profile = write_bench(tmp_path / "b", TEST_SEQUENCE)
    kw = {"sessions_dir": tmp_path / "s"}
    s = await Session.new(profile, "T. Tester", session_id="rr", simulate=True, seed=2, **kw)
    try:
        r = s.runner
        await _until(s, lambda v: v.state is State.WAITING and v.polled)
        r.capture()
        await _until(s, lambda v: v.state is State.REVIEWING)
        r.accept()
        await _until(s, lambda v: v.action == "request_remote" and v.polled)
        r.request_remote("RX", "closed")
        await r.confirm_remote("RX", "closed", "T. Tester")
        r.stop("power cut at the bench")
    finally:
        await s.close()

    s2 = await Session.resume("rr", **kw)
    try:
        assert s2.runner.step is not None and s2.runner.step.id == "rx-in"
        assert s2.bench is not None
        s2.bench.operate_by_hand("RX", "closed")  # where the command had left a real bench
        v = await _until(s2, lambda v: v.state in (State.REVIEWING, State.STOPPED))
        assert v.state is State.REVIEWING and v.step.id == "rx-in"
        sent = [c for c in s2.bench.plc.commands if c[3] != "hand"]
        assert sent == []  # the resumed session sent nothing
        jv = JournalView(s2.journal.path)
        kinds = [e.kind for e in jv.events()]
        jv.close()
        assert "remote_already_done" in kinds
    finally:
        await s2.close()
