"""Screen items of a record a technician can sign: the session list shows each session's state,
the readings view keeps its rows in sight and marks failing meters, keys that cannot act say
why, the end of the walk is summarized. Real sessions on the fast demo bench (loopback Modbus).
"""

from __future__ import annotations

import contextlib
import re
import time

import pytest
from support.benches import FAST_CAPTURE, write_bench

from meas.session import Session
from meas.walk.states import State
from tui.app import BenchwalkApp
from tui.launch import list_sessions
from tui.screens.main import MainScreen
from tui.units import eng
from tui.widgets.readings import ReadingsGrid

ONE = f"""
[[step]]
id = "radial"
title = "Radial base case"
kind = "capture"
instruction = "Capture."
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


async def _until(s: Session, pred, timeout_s: float = 20.0):
    deadline = time.monotonic() + timeout_s
    async with contextlib.aclosing(s.views()) as views:
        async for v in views:
            if pred(v):
                return v
            assert time.monotonic() < deadline
    raise AssertionError("ended")


@pytest.mark.slow
async def test_the_session_list_shows_each_sessions_state(tmp_path):
    profile = write_bench(tmp_path / "b", ONE)
    sdir = tmp_path / "s"
    done = await Session.new(profile, "T", sessions_dir=sdir, session_id="done", simulate=True)
    try:
        await _until(done, lambda v: v.state is State.WAITING and v.polled)
        done.runner.skip("not today")
        done.runner.skip("not today either")
    finally:
        await done.close()
    half = await Session.new(profile, "T", sessions_dir=sdir, session_id="half", simulate=True)
    try:
        await _until(half, lambda v: v.state is State.WAITING and v.polled)
        half.runner.capture()
        await _until(half, lambda v: v.state is State.REVIEWING)
        half.runner.accept()
        half.runner.stop("end of shift")
    finally:
        await half.close()
    listed = dict(list_sessions(sdir))
    assert listed["done"].startswith("finished, INCOMPLETE")
    assert listed["half"].startswith("unfinished at step tie (1 of 2 steps done)")


def test_no_signed_or_prefixed_zero():
    assert eng(-1e-6, "W").strip() == "0 W"
    assert eng(-0.0, "W").strip() == "0 W"
    assert eng(-0.0001, "").strip() == "0.000"
    assert eng(-2.5e-3, "W").strip() == "-2.50 mW"  # a real small value keeps its sign


@pytest.mark.slow
async def test_readings_keep_every_row_in_sight_and_mark_failing_meters(tmp_path):
    profile = write_bench(tmp_path / "b", ONE)

    async def factory(operator: str, resume: str | None):
        return await Session.new(profile, operator, sessions_dir=tmp_path / "s", simulate=True)

    app = BenchwalkApp(factory, skip_intro=True, operator="AT", out_dir=tmp_path / "out")
    async with app.run_test(size=(80, 24)) as pilot:
        deadline = time.monotonic() + 15
        while not (isinstance(app.screen, MainScreen) and app.screen.frame is not None):
            assert time.monotonic() < deadline
            await pilot.pause(0.05)
        main = app.screen
        await pilot.press("2")
        grid = main.query_one(ReadingsGrid)
        for _ in range(5):
            await pilot.press("m")
        await pilot.pause(0.1)
        assert grid.selected_meter == "M6"
        await pilot.press("M")  # Shift+M: a terminal sends the capital letter
        await pilot.pause(0.1)
        assert grid.selected_meter == "M5"
        await pilot.press("m")
        await pilot.pause(0.1)
        assert grid.selected_meter == "M6"
        assert grid.top == 0  # all eight rows fit: none scrolled out of sight
        lines = [grid.render_line(y).text for y in range(1, 9)]
        assert [re.search(r"M\d", ln).group(0) for ln in lines] == [f"M{i}" for i in range(1, 9)]
        assert any("M6 per phase" in grid.render_line(y).text for y in range(9, 14))
        # a failing check on M3 marks its row
        grid.set_failing(frozenset({"M3"}))
        assert "\u2718M3" in grid.render_line(3).text.replace(" ", "")
        # a step key that cannot act says why (R on a capture step)
        await pilot.press("r")
        await pilot.pause(0.1)
        assert "R: step radial has no remote operation" in str(main.query_one("#notice").content)
        # with Caps Lock on the same key gives the same answer, not silence
        main.notice("")
        await pilot.press("R")
        await pilot.pause(0.1)
        assert "R: step radial has no remote operation" in str(main.query_one("#notice").content)


@pytest.mark.slow
async def test_sigterm_ends_the_console_resumably_with_the_stop_journalled(tmp_path):
    import os
    import signal

    from meas.journal.read import JournalView

    profile = write_bench(tmp_path / "b", ONE)

    async def factory(operator: str, resume: str | None):
        return await Session.new(
            profile, operator, sessions_dir=tmp_path / "s", session_id="sig", simulate=True
        )

    app = BenchwalkApp(factory, skip_intro=True, operator="AT", out_dir=tmp_path / "out")
    async with app.run_test(size=(80, 24)) as pilot:
        deadline = time.monotonic() + 15
        while not (isinstance(app.screen, MainScreen) and app.screen.frame is not None):
            assert time.monotonic() < deadline
            await pilot.pause(0.05)
        os.kill(os.getpid(), signal.SIGTERM)  # a real signal, caught by the console's loop
        deadline = time.monotonic() + 10
        while app.return_code is None:
            assert time.monotonic() < deadline, "the console did not end on SIGTERM"
            await pilot.pause(0.05)
    assert app.stop_signal == "SIGTERM", app.stop_signal
    assert app.return_value == 3 and app.return_code == 3
    jv = JournalView(tmp_path / "s" / "sig.sqlite")
    stops = [e for e in jv.events() if e.kind == "stopped"]
    jv.close()
    assert stops and stops[-1].message == "interrupted by SIGTERM"


HOLD = (
    ONE.split("[[step]]")[0]
    + "[[step]]"
    + ONE.split("[[step]]")[1]
    + """
[[step]]
id = "review"
title = "Hold: radial reviewed"
kind = "hold"
instruction = "The lead signs off the radial case."
"""
)


@pytest.mark.slow
async def test_the_console_hold_point_lists_what_it_covers_and_journals_the_acknowledgement(
    tmp_path,
):
    from textual.widgets import Input, Static

    from meas.journal.read import JournalView
    from tui.screens.prompt import TextPrompt

    profile = write_bench(tmp_path / "b", HOLD)

    async def factory(operator: str, resume: str | None):
        return await Session.new(
            profile, operator, sessions_dir=tmp_path / "s", session_id="hold", simulate=True
        )

    app = BenchwalkApp(factory, skip_intro=True, operator="AT", out_dir=tmp_path / "out")
    async with app.run_test(size=(80, 24)) as pilot:
        deadline = time.monotonic() + 15
        while not (isinstance(app.screen, MainScreen) and app.screen.frame is not None):
            assert time.monotonic() < deadline
            await pilot.pause(0.05)
        runner = app.bridge.runner
        runner.skip("radial not available today")
        await pilot.pause(0.3)
        await pilot.press("g")
        deadline = time.monotonic() + 5
        while not isinstance(app.screen, TextPrompt):
            assert time.monotonic() < deadline, "no sign prompt"
            await pilot.pause(0.05)
        prompt = app.screen
        question = " ".join(str(w.content) for w in prompt.query(Static))
        assert "covers: radial" in question and "radial skipped" in question
        assert prompt.query_one(Input).value == ""  # the signer types their own name
        await pilot.press(*"JL", "enter")
        deadline = time.monotonic() + 5
        while not runner.finished:
            assert time.monotonic() < deadline, runner.view().message
            await pilot.pause(0.05)
    jv = JournalView(tmp_path / "s" / "hold.sqlite")
    ack = [e for e in jv.events() if e.kind == "hold_acknowledged"]
    jv.close()
    assert len(ack) == 1 and ack[0].operator == "JL" and "radial skipped" in ack[0].message
