"""The console's test fixtures, shared by the tests in tests/tui: the demo copied with
compressed timings and the console driven on it (real session, simulated bench on loopback),
key taps and condition waits with deadlines, and one fixed console-shaped frame for snapshot
and theme tests."""

from __future__ import annotations

import re
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
from textual import events

from meas.profile import load_profile
from meas.results import CheckResult, Status
from meas.session import Session
from meas.sim.faults import parse_fault
from meas.sim.meters import snapshot_from_sim
from tui.app import BenchwalkApp
from tui.frame import Frame, StepInfo
from tui.screens.main import MainScreen
from tui.screens.safety import SafetyScreen
from tui.screens.start import StartScreen

DEMO_DIR = Path(__file__).resolve().parents[2] / "profiles_demo"
FAST_CAPTURE = "{ snapshots = 1, interval_s = 0.2, settle = { window_s = 0.6, rel_spread = 0.005, timeout_s = 6.0 } }"


def fast_demo(tmp: Path) -> Path:
    """The demo profile and sequence, copied with compressed timings."""
    prof = (DEMO_DIR / "feeder_bench.toml").read_text()
    prof = re.sub(r"settle_s = [0-9.]+", "settle_s = 0.1", prof)
    # the noise check judges the last N polls; N = 3 keeps that history inside the 0.6 s window
    prof = prof.replace(
        "frozen_cycles = 10\n",
        'frozen_cycles = 10\n\n[checks.overrides]\n"quality.noise.min_snapshots" = 3\n',
        1,
    )
    seq = (DEMO_DIR / "feeder_bench.sequence.toml").read_text()
    seq = re.sub(r"^capture = \{.*\}$", f"capture = {FAST_CAPTURE}", seq, flags=re.M)
    (tmp / "feeder_bench.sequence.toml").write_text(seq)
    out = tmp / "feeder_bench.toml"
    out.write_text(prof)
    return out


_CHARS = {"enter": "\r", "escape": "\x1b", "space": " "}


async def tap(pilot, *keys: str) -> None:
    """Send key events through the driver in order, as ``pilot.press`` does, but without its
    wait-for-idle after each key (up to 1 s while the in-process bench keeps the CPU busy);
    the caller then waits on a condition with a deadline."""
    for key in keys:
        event = events.Key(key, _CHARS.get(key, key if len(key) == 1 else None))
        event.set_sender(pilot.app)
        pilot.app._driver.send_message(event)
    await pilot.pause(0)


async def until(pilot, cond, timeout: float, what: str):
    """Wait for a condition with a deadline (never a fixed sleep as synchronization)."""
    deadline = time.monotonic() + timeout
    while not cond():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout} s waiting for {what}")
        await pilot.pause(0.02)


def make_app(tmp: Path, faults=(), noise: bool = True, **kw) -> BenchwalkApp:
    """The console on a new session of the fast demo copy (simulated bench, seed 11)."""
    profile = fast_demo(tmp)

    async def factory(operator: str, resume: str | None):
        return await Session.new(
            profile,
            operator,
            sessions_dir=tmp / "sessions",
            simulate=True,
            faults=list(faults),
            seed=11,
            noise=noise,
        )

    return BenchwalkApp(factory, bench_name="fast demo", out_dir=tmp / "out", **kw)


async def start(pilot, app, name="AT"):
    await until(pilot, lambda: isinstance(app.screen, SafetyScreen), 5, "safety screen")
    await tap(pilot, "y")
    await until(
        pilot,
        lambda: (
            isinstance(app.screen, StartScreen)
            and app.focused is not None
            and app.focused.id == "operator"
        ),
        5,
        "start screen, name field focused",
    )
    await tap(pilot, *name, "enter")  # name, then Enter moves to the session list
    await until(
        pilot, lambda: app.focused is not None and app.focused.id == "sessions", 5, "session list"
    )
    await tap(pilot, "enter")  # "start a new session" is highlighted
    await until(pilot, lambda: isinstance(app.screen, MainScreen), 15, "main screen")
    main = app.screen
    await until(
        pilot, lambda: main.frame is not None and main.frame.snapshot is not None, 10, "first frame"
    )
    return main


DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"


class StillFeed:
    """One fixed frame, console-shaped; the screen never polls it (autopoll off)."""

    def __init__(self) -> None:
        self.profile = load_profile(DEMO)
        self.operator = "A. Tester"
        sw = {s.id: s.normal for s in self.profile.switches}
        snap = snapshot_from_sim(
            self.profile,
            sw,
            (parse_fault("ct-reversed:M2:B"),),
            np.random.default_rng(3),
            7,
            noise=False,
            t_mono=50.0,
            time_utc=datetime(2026, 12, 1, 12, 0, tzinfo=UTC),
        )
        step = StepInfo(
            index=4,
            total=15,
            step_id="pick-up-lateral",
            title="Close the lateral isolator SW3",
            instruction="Close SW3 by hand at the panel, then press O.",
            kind="manual",
            state="reviewing",
            expected={"CB1": "closed", "SW2": "closed", "SW3": "closed", "TIE": "open"},
            actual={"CB1": "closed", "SW2": "closed", "SW3": "closed", "TIE": "open"},
            overall="inconsistent",
            next_action="Checks failed: retake, or skip (press X to retake, S to skip)",
            captured=4,
            to_capture=4,
            allowed=frozenset({"retake", "skip", "note", "stop"}),  # as the runner's view has it
        )
        checks = (
            CheckResult(
                "phase.current_sequence",
                "M2",
                Status.FAIL,
                2.0,
                0.1,
                "1",
                "M2: negative-sequence current 200 % of positive: CT of phase B looks reversed.",
            ),
            CheckResult(
                "network.kcl_p",
                "B1",
                Status.WARN,
                210.0,
                260.0,
                "W",
                "B1: active power does not balance within 80 % of its limit.",
            ),
            CheckResult("meter.p_sum", "M1", Status.PASS),
        )
        self.still = Frame(snap, checks, step, (), 1.5)

    def frame(self) -> Frame:
        return self.still

    async def cycle(self) -> Frame:
        return self.still

    def log(self, text: str) -> None:
        pass

    async def close(self) -> None:
        pass


def still_app() -> BenchwalkApp:
    feed = StillFeed()
    return BenchwalkApp(
        lambda op, resume: feed, skip_intro=True, operator="A. Tester", autopoll=False
    )


async def show_still(pilot) -> None:
    app = pilot.app
    # the factory runs in a worker; wait (bounded) until the main screen is composed
    for _ in range(500):
        if isinstance(app.screen, MainScreen) and app.screen.query("#summary"):
            break
        await pilot.pause(0.01)
    app.screen.show_frame(app.bridge.frame())
    await pilot.pause()
