"""Snapshot tests of the main and help screens (pytest-textual-snapshot).

Deterministic: the demo profile, one noise-free simulated-bench snapshot with a fixed time, a
fixed step and check results, the poll worker off (``autopoll=False``). Regenerate with
``pytest tests/tui/test_tui_snapshots.py --snapshot-update`` and look at the SVGs.
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from meas.profile import load_profile
from meas.results import CheckResult, Status
from meas.sim.faults import parse_fault
from meas.sim.meters import snapshot_from_sim
from tui.app import BenchwalkApp
from tui.frame import Frame, StepInfo
from tui.screens.main import MainScreen

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


def _app() -> BenchwalkApp:
    feed = StillFeed()
    return BenchwalkApp(
        lambda op, resume: feed, skip_intro=True, operator="A. Tester", autopoll=False
    )


async def _show(pilot) -> None:
    app = pilot.app
    # the factory runs in a worker; wait (bounded) until the main screen is composed
    for _ in range(500):
        if isinstance(app.screen, MainScreen) and app.screen.query("#summary"):
            break
        await pilot.pause(0.01)
    app.screen.show_frame(app.bridge.frame())
    await pilot.pause()


def test_main_screen_80x24(snap_compare):
    assert snap_compare(_app(), terminal_size=(80, 24), run_before=_show)


def test_main_screen_readings_view_80x24(snap_compare):
    assert snap_compare(_app(), terminal_size=(80, 24), run_before=_show, press=["2"])


def test_main_screen_120x40(snap_compare):
    assert snap_compare(_app(), terminal_size=(120, 40), run_before=_show)


def test_help_screen(snap_compare):
    assert snap_compare(_app(), terminal_size=(80, 24), run_before=_show, press=["f1"])


async def test_every_key_is_in_help_footer_map_and_command_palette():
    from tui.keys import KEYS
    from tui.screens.help import APP_KEYS, help_table

    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _show(pilot)
        screen = app.screen
        titles = {c.title for c in app.get_system_commands(screen)}
        assert {k.label for k in KEYS} <= titles
        bound = {b.key for b in screen.BINDINGS}
        assert {k.key for k in KEYS} <= bound
        assert not bound & {"ctrl+m", "ctrl+i", "ctrl+h"}  # Enter, Tab, Backspace on old terminals
        # every key, the group titles and the keys that are not bench actions (palette, screenshot)
        assert help_table().row_count == len(KEYS) + 3 + len(APP_KEYS)
        # a palette command runs the same action as its key: "Units" cycles the unit mode
        units = next(c for c in app.get_system_commands(screen) if c.title == "Units")
        units.callback()
        assert screen.unit_mode == "network"
