"""A record a technician can sign: the verdict first, honest outcomes, notes at their step.

A real session on the fast demo bench (Modbus over loopback, real SQLite, real files): one
step captured and accepted, one skipped, a note; then the dataset and the report.
"""

from __future__ import annotations

import contextlib
import io
import json
import time

import pandas as pd
from support.benches import FAST_CAPTURE, write_bench

from meas.session import Session
from meas.walk.states import State

SEQUENCE = f"""
[[step]]
id = "radial"
title = "Radial base case"
kind = "capture"
instruction = "Check the bench is radial, then capture."
expect = {{ CB1 = "closed", SW2 = "closed", SW3 = "closed", TIE = "open", RX = "open", LB2 = "closed" }}
{FAST_CAPTURE}

[[step]]
id = "tie"
title = "Tie closed"
kind = "manual"
instruction = "Close the tie by hand."
expect = {{ TIE = "closed" }}
{FAST_CAPTURE}
"""


async def _until(session: Session, pred, timeout_s: float = 20.0):
    deadline = time.monotonic() + timeout_s
    async with contextlib.aclosing(session.views()) as views:
        async for view in views:
            if pred(view):
                return view
            assert time.monotonic() < deadline, "condition not reached"
    raise AssertionError("session ended")


async def test_a_skipped_step_makes_the_report_say_incomplete_first_and_never_pass(tmp_path):
    from tui.commands.headless import summarize

    profile = write_bench(tmp_path / "bench", SEQUENCE)
    s = await Session.new(
        profile, "T. Tester", sessions_dir=tmp_path / "s", session_id="rec-1", simulate=True, seed=3
    )
    try:
        r = s.runner
        await _until(s, lambda v: v.state is State.WAITING and v.polled)
        r.note("cabinet door latch loose")
        r.capture()
        await _until(s, lambda v: v.state is State.REVIEWING)
        r.accept()
        r.skip("tie switch locked out by the site")
        assert r.finished
        out = io.StringIO()
        code = summarize(s, out)
        dataset, html_path = s.export(tmp_path / "out")
    finally:
        await s.close()
    line = "INCOMPLETE: 1 of 2 steps skipped (tie)"
    assert code == 1 and out.getvalue().rstrip().endswith(f"Session rec-1: {line}")

    md = html_path.with_suffix(".md").read_text()
    assert md.splitlines()[0].startswith(f"**Verdict: {line}**")
    assert "SIMULATED BENCH" in md.splitlines()[0]
    html = html_path.read_text()
    body = html.split("<body>", 1)[1]
    assert body.lstrip().startswith('<p class="verdict bad">Verdict: ' + line)
    # the skipped step's row says skipped, never pass
    tie_row = next(ln for ln in md.splitlines() if ln.startswith("| 2 | tie |"))
    assert "skipped" in tie_row and "pass" not in tie_row.lower().replace("passed", "")
    assert "note (T. Tester): cabinet door latch loose" in md
    assert "cabinet door latch loose" in html

    steps = pd.read_csv(dataset / "data" / "steps.csv")
    assert dict(zip(steps["id"], steps["outcome"], strict=True)) == {
        "radial": "passed",
        "tie": "skipped",
    }
    pkg = json.loads((dataset / "datapackage.json").read_text())
    assert pkg["benchwalk"]["verdict"]["line"] == line
    assert pkg["benchwalk"]["verdict"]["exit_code"] == code
    assert pkg["benchwalk"]["simulated"] is True
