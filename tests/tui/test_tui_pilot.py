"""The console driven by key presses against the real session: simulated bench (pymodbus
servers on loopback), real poller, runner, SQLite journal and dataset export.

The demo sequence is walked with its timings compressed (shorter settle windows and captures,
faster simulated transient) so the whole walk fits the test budget; the steps, switches,
register maps and meters are the demo's own.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import pandas as pd
import pytest
from support.console import fast_demo, make_app, start, tap, until
from textual.widgets import Static

from meas.session import Session
from tui.app import BenchwalkApp
from tui.keys import ARM_KEY, KEYS, SEND_KEY, key_of
from tui.screens.main import MainScreen
from tui.screens.prompt import Alert, TextPrompt
from tui.screens.remote import RemoteConfirm
from tui.screens.summary import WalkSummary
from tui.widgets.step import StepDetail


def prompt_ready(app) -> bool:
    return (
        isinstance(app.screen, TextPrompt)
        and app.focused is not None
        and app.focused.id == "prompt-input"
    )


async def answer(pilot, app, text: str, fast: bool = False):
    await until(pilot, lambda: prompt_ready(app), 5, "prompt with its input focused")
    keys = ["space" if ch == " " else ch for ch in text] + ["enter"]
    if fast:
        await tap(pilot, *keys)
    else:
        await pilot.press(*keys)


@pytest.mark.slow  # about 30 s of real settling time: 15 steps on the simulated bench
async def test_walk_the_demo_sequence_by_keys_to_the_dataset(tmp_path):
    app = make_app(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        main = await start(pilot, app)
        runner = app.bridge.runner
        step_ids = [s.id for s in runner.profile.steps]
        deadline = time.monotonic() + 45
        retaken: dict[str, int] = {}
        while not runner.finished:
            assert time.monotonic() < deadline, (
                f"walk stuck at {runner.view().state} of {runner.step}"
            )
            assert not runner.stopped, runner.message
            v = runner.view()
            seen = app.bridge.transitions
            a = v.action
            if a == "confirm_operation":
                await tap(pilot, "o")
            elif a == "capture" or (a == "retake" and v.settle_timed_out):
                await tap(pilot, "c")
            elif a == "request_remote":
                await tap(pilot, "r")
                await until(
                    pilot,
                    lambda: isinstance(app.screen, RemoteConfirm),
                    5,
                    f"remote modal ({main.frame.step.allowed}, {main.query_one('#notice').content})",
                )
                await tap(pilot, ARM_KEY, SEND_KEY)
            elif a == "accept":
                await tap(pilot, "a")
            elif a == "sign":
                await tap(pilot, "g")
                await until(pilot, lambda: prompt_ready(app), 5, "sign prompt")
                assert app.focused.value == ""  # the signer types their own name
                await answer(pilot, app, fast=True, text="JL")
            elif a == "note":
                await tap(pilot, "n")
                await answer(pilot, app, fast=True, text="ok")
            elif a in ("retake", "accept_with_reason"):
                # one retake per step, then as the demo's simulated technician does: accept
                # with a reason where the step allows it, else skip with a reason
                if retaken.get(v.step.id, 0) < 1:
                    retaken[v.step.id] = 1
                    await tap(pilot, "x")
                elif a == "accept_with_reason":
                    await tap(pilot, "a")
                    await answer(pilot, app, fast=True, text="loop")
                else:
                    await tap(pilot, "s")
                    await answer(pilot, app, fast=True, text="fails")
            else:  # wait: the poll worker moves the runner on
                pass

            def moved(s=seen, a=a):
                return app.bridge.transitions > s or runner.view().action != a or runner.done

            await until(
                pilot,
                moved,
                15,
                f"progress after {a} at {v.step.id} {v.state} ({type(app.screen).__name__}; "
                f"{[r.message for r in v.results[:2]]}; {v.message}; "
                f"notice {main.query_one('#notice').content})",
            )
        # the sequence is complete: the screen exports the dataset on its own
        await until(pilot, lambda: app.bridge.exported is not None, 20, "dataset export")
        # the end-of-walk summary: every step's outcome and the verdict
        await until(pilot, lambda: isinstance(app.screen, WalkSummary), 5, "end-of-walk summary")
        assert runner.verdict().line in str(app.screen.query_one(Static).content) or any(
            runner.verdict().line in str(w.content) for w in app.screen.query(Static)
        )
        await pilot.press("enter")
        assert "SIMULATED BENCH" in main.query_one("#headline").content.plain
        summary = main.query_one("#summary").content.plain
        assert f"VERDICT {runner.verdict().line}" in summary
        await pilot.press("ctrl+q")
    # the console's exit code is the verdict's, as headless and the dataset give it
    assert app.return_value == app.return_code == runner.verdict().exit_code
    dataset = app.bridge.exported
    assert dataset.is_relative_to(tmp_path / "out")
    package = json.loads((dataset / "datapackage.json").read_text())
    steps_res = next(r for r in package["resources"] if r["name"] == "steps")
    steps = pd.read_csv(dataset / steps_res["path"])
    assert package["benchwalk"]["verdict"]["line"] == runner.verdict().line
    assert list(steps["id"]) == step_ids
    assert set(steps["state"]) <= {"accepted", "skipped"}
    # hold and note steps are always accepted by the keys G and N
    kinds = dict(zip(steps["id"], steps["kind"], strict=True))
    assert all(
        steps.loc[steps["id"] == i, "state"].item() == "accepted"
        for i, k in kinds.items()
        if k in ("hold", "note")
    )


async def open_main(pilot, app):
    await until(
        pilot,
        lambda: (
            isinstance(app.screen, MainScreen)
            and app.screen.frame is not None
            and app.screen.frame.snapshot is not None
        ),
        15,
        "main screen with data",
    )
    return app.screen


async def test_fault_shows_failure_and_cause_in_checks_panel(tmp_path):
    # A reversed CT on phase B of M2: REFERENCES.md section 2 gives the signature (I2/I1 = 200 %,
    # per-phase P 1, -1, 1); the checks name it and the panel must show it with its cause.
    app = make_app(tmp_path, faults=["ct-reversed:M2:B"], skip_intro=True, operator="AT")
    async with app.run_test(size=(80, 24)) as pilot:
        main = await open_main(pilot, app)
        panel = main.query_one("#checks")
        # the bench starts dead (the demo's step 1): energize it by hand so M2 carries current
        for sw in ("CB1", "SW2", "SW3", "LB2"):
            app.bridge.session.bench.operate_by_hand(sw, "closed")

        def shows_fault():
            text = panel.content.plain if hasattr(panel.content, "plain") else ""
            return any(
                line.startswith("\u2718 FAIL M2") and "revers" in line.lower()
                for line in text.splitlines()
            )

        await until(pilot, shows_fault, 15, "FAIL line for M2 naming the reversed CT")
        lines = panel.content.plain.splitlines()
        assert "INCONSISTENT" in lines[0]  # overall state in words, not colour alone
        first_fail = next(i for i, line in enumerate(lines) if "FAIL" in line)
        assert all("WARN" not in line for line in lines[1:first_fail])  # failures first


@pytest.mark.slow
async def test_meter_going_offline_shows_and_screen_stays_live(tmp_path):
    from meas.sim.faults import parse_fault

    app = make_app(tmp_path, skip_intro=True, operator="AT")
    async with app.run_test(size=(80, 24)) as pilot:
        main = await open_main(pilot, app)
        await pilot.press("2")  # readings view
        grid = main.query_one("#pane-readings")
        await until(
            pilot, lambda: grid._cells.get("M5", ("", "no data"))[1].strip() == "ok", 10, "M5 ok"
        )
        app.bridge.session.bench.set_faults([parse_fault("offline:M5")])
        await until(
            pilot,
            lambda: grid._cells["M5"][1].strip() in ("! failing", "\u2298 offline"),
            10,
            "M5 failing or offline",
        )
        assert grid._cells["M5"][4].strip() == "--"  # no stale number shown as a reading
        # the screen keeps painting the other meters and answers keys while M5 times out
        shown = main.frames_shown
        await until(pilot, lambda: main.frames_shown >= shown + 5, 10, "five more frames")
        t0 = time.monotonic()
        await pilot.press("u")
        assert main.unit_mode == "network" and time.monotonic() - t0 < 2.0
        assert grid._cells["M1"][1].strip() == "ok"


RX_SEQUENCE = """
[[step]]
id = "rx-in"
title = "Close the reactor contactor RX"
kind = "remote"
instruction = "Close RX from this tool."
operate = { RX = "closed" }
capture = false
"""


def remote_profile(tmp: Path, operate_time_s: float | None = None) -> Path:
    """The demo bench with a one-step sequence: close the reactor contactor RX remotely."""
    path = fast_demo(tmp)
    (tmp / "feeder_bench.sequence.toml").write_text(RX_SEQUENCE)
    text = path.read_text()
    if operate_time_s is not None:  # a sluggish mechanism: its status will not follow in time
        text = text.replace("operate_time_s = 0.1\n", f"operate_time_s = {operate_time_s}\n")
    path.write_text(text)
    return path


def remote_app(tmp: Path, operate_time_s: float | None = None) -> BenchwalkApp:
    profile = remote_profile(tmp, operate_time_s)

    async def factory(operator, resume):
        return await Session.new(
            profile, operator, sessions_dir=tmp / "sessions", simulate=True, seed=3
        )

    return BenchwalkApp(factory, skip_intro=True, operator="AT", out_dir=tmp / "out")


async def _to_remote_step(pilot, app):
    main = await open_main(pilot, app)
    runner = app.bridge.runner
    await until(pilot, lambda: main.frame.step.action == "request_remote", 10, "remote step")
    return main, runner


def coil_writes(app) -> list:
    return [c for c in app.bridge.session.bench.plc.commands if c[3] == "coil"]


@pytest.mark.slow
async def test_remote_switching_needs_both_confirmations(tmp_path):
    app = remote_app(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        main, runner = await _to_remote_step(pilot, app)
        await pilot.press("r")
        await until(pilot, lambda: isinstance(app.screen, RemoteConfirm), 5, "remote modal")
        modal = app.screen
        assert modal.switch_id == "RX" and modal.present == "open" and modal.intended == "closed"
        # the simulated bench is named in the dialog's caution
        assert any("SIMULATED BENCH" in str(w.content) for w in modal.query(".caution"))
        # the NEXT line follows the dialog: its arm and send keys, not the main screen's
        nxt = main.query_one("#summary").content.plain
        assert f"{ARM_KEY.upper()} arm, then {SEND_KEY.upper()} send" in nxt
        await pilot.press(SEND_KEY)  # the second key alone does nothing
        assert isinstance(app.screen, RemoteConfirm) and not modal.armed
        await pilot.press(ARM_KEY, "o")  # armed, then any other key disarms
        assert not modal.armed and isinstance(app.screen, RemoteConfirm)
        modal.arm_timeout_s = 0.3  # the documented 8 s, shortened for the test
        await pilot.press(ARM_KEY)  # armed, then the timeout disarms it
        await until(pilot, lambda: modal.disarmed_by_timeout == 1, 5, "disarmed by the timeout")
        assert not modal.armed
        await pilot.press(SEND_KEY)  # too late: nothing is sent
        assert isinstance(app.screen, RemoteConfirm) and coil_writes(app) == []
        await pilot.press("escape")  # cancel: nothing is sent
        await until(pilot, lambda: isinstance(app.screen, MainScreen), 5, "back on main screen")
        assert coil_writes(app) == [] and runner.view().state == "waiting"
        assert runner.view().pending_remote is None  # the request is withdrawn
        nxt = main.query_one("#summary").content.plain
        assert "arm" not in nxt and f"press {key_of('request_remote').upper()}" in nxt
        # a main-screen habit of accept-then-yes sends nothing: neither key is arm or send
        await pilot.press("a", "y")
        assert coil_writes(app) == [] and isinstance(app.screen, MainScreen)
        await pilot.press("R")  # Caps Lock on: the same keys, the same two confirmations
        await until(pilot, lambda: isinstance(app.screen, RemoteConfirm), 5, "remote modal again")
        await pilot.press(ARM_KEY.upper(), SEND_KEY.upper())
        await until(pilot, lambda: coil_writes(app), 5, "the coil write")
        assert [(c[1], c[2]) for c in coil_writes(app)] == [("RX", "closed")]
        # status verified (no capture in this step): the runner reviews, then A accepts
        await until(pilot, lambda: runner.view().state == "reviewing", 10, "status verified")
        await until(  # a PLC poll missed under load reads unknown for a cycle: wait for one
            pilot,
            lambda: (
                main.frame.snapshot is not None
                and main.frame.snapshot.switches.get("RX") == "closed"
            ),
            5,
            "RX closed on screen",
        )


@pytest.mark.slow
async def test_remote_status_not_following_is_a_clear_failure(tmp_path):
    app = remote_app(tmp_path, operate_time_s=6.0)  # longer than the demo's verify_timeout_s = 3.0
    async with app.run_test(size=(80, 24)) as pilot:
        main, runner = await _to_remote_step(pilot, app)
        await pilot.press("r")
        await until(pilot, lambda: isinstance(app.screen, RemoteConfirm), 5, "remote modal")
        await pilot.press(ARM_KEY, SEND_KEY)
        await until(pilot, lambda: isinstance(app.screen, Alert), 10, "failure alert")
        alert = app.screen
        assert runner.stopped and "RX" in alert.title_text and "FAILED" in alert.title_text
        assert "RX" in alert.body  # the runner's sentence: what did not follow
        await pilot.press("enter")
        await until(pilot, lambda: isinstance(app.screen, MainScreen), 5, "alert acknowledged")
        assert main.frame.step.overall == "inconsistent"


async def test_a_step_command_is_confirmed_in_words_that_say_what_happens_next(tmp_path):
    app = make_app(tmp_path, skip_intro=True, operator="AT")
    async with app.run_test(size=(80, 24)) as pilot:
        main = await open_main(pilot, app)
        runner = app.bridge.runner
        await until(
            pilot, lambda: runner.view().action == "capture", 10, "first step ready to capture"
        )
        # the demo bench starts as the dead-bench step describes it: nothing to set by hand
        await until(pilot, lambda: not runner.view().mismatches, 10, "the switches opened")
        assert runner.view().to_operate == ()
        assert "also sets" not in main.query_one(StepDetail).content.plain
        await tap(pilot, "c")
        await until(
            pilot,
            lambda: "capture started" in str(main.query_one("#notice").content),
            10,
            "capture notice",
        )
        notice = str(main.query_one("#notice").content)
        assert "recorded" not in notice
        await pilot.press("a")  # nothing to accept while settling: the key says why
        await until(
            pilot,
            lambda: "A: cannot accept now" in str(main.query_one("#notice").content),
            5,
            "why the key cannot act",
        )
        assert str(main.query_one("#notice").content) != notice
        assert all(r["state"] != "accepted" for r in runner.journal.step_history())


@pytest.mark.slow
async def test_the_console_enables_exactly_the_step_keys_the_runner_allows(tmp_path):
    # The runner's view owns "what can be done now"; the frame carries it and the footer offers
    # exactly those step keys, through a capture step, two remote steps and a manual step.
    app = make_app(tmp_path, skip_intro=True, operator="AT")
    async with app.run_test(size=(80, 24)) as pilot:
        main = await open_main(pilot, app)
        runner = app.bridge.runner
        step_keys = [k for k in KEYS if k.command]
        seen: set[str] = set()

        def agrees() -> str:
            view = runner.view()
            frame = app.bridge.frame()  # built from the same view: nothing ticks in between
            assert frame.step.allowed == view.allowed
            main.show_frame(frame)
            active = main.active_bindings
            enabled = {k.command for k in step_keys if k.key in active}
            assert enabled == view.allowed & {k.command for k in step_keys}, (
                view.state,
                view.action,
            )
            seen.add(f"{view.state}/{view.action}")
            return view.action

        deadline = time.monotonic() + 40
        while runner.index < 3 or runner.view().action != "confirm_operation":
            assert time.monotonic() < deadline, f"stuck at {runner.view().state} {runner.step}"
            assert not runner.stopped, runner.message
            a = agrees()
            if a == "capture" or (a == "retake" and runner.view().settle_timed_out):
                await tap(pilot, "c")
            elif a == "request_remote":
                await tap(pilot, "r")
                await until(pilot, lambda: isinstance(app.screen, RemoteConfirm), 5, "remote modal")
                await tap(pilot, ARM_KEY, SEND_KEY)
                await until(pilot, lambda: app.screen is main, 5, "back on the main screen")
            elif a in ("accept", "accept_with_reason"):
                await tap(pilot, "a")
                if a == "accept_with_reason":
                    await answer(pilot, app, fast=True, text="loop")
            elif a == "retake":
                await tap(pilot, "s")
                await answer(pilot, app, fast=True, text="fails")
            await pilot.pause(0.05)
        agrees()
        assert {"waiting/capture", "waiting/request_remote", "waiting/confirm_operation"} <= seen
        assert any(s.startswith("settling/") for s in seen), seen
        assert any(s.startswith("reviewing/") for s in seen), seen


def test_the_remote_arm_and_send_keys_mean_nothing_on_the_main_screen():
    main_keys = {k.key for k in KEYS}
    assert ARM_KEY not in main_keys and SEND_KEY not in main_keys and ARM_KEY != SEND_KEY
