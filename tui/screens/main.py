"""The bench screen: step, live readings, checks, bench, phasors and trend, event log.

The screen owns the poll worker (TEXTUAL_NOTES.md: a loop on the App raced screen teardown);
the worker only awaits the bridge and posts ``FrameReady``; the handler paints. At 80 columns
one view shows at a time (keys 1-5 or V); from 110x34 all views share the screen.
"""

from __future__ import annotations

import asyncio
import contextlib
import time
from collections import deque
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import ClassVar

from textual import work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Log, Static
from textual.worker import Worker, WorkerState, get_current_worker

from meas.errors import BenchwalkError
from meas.snapshot import Snapshot

from ..bridge import Bridge
from ..frame import Frame
from ..keys import COMMAND_OF, bindings
from ..messages import FrameReady, LogLines, PollTrouble
from ..units import UNIT_MODE_LABEL, UNIT_MODES, UnitMode
from ..widgets.bench import BenchView
from ..widgets.checks import ChecksPanel
from ..widgets.phasor import PhasorView
from ..widgets.readings import ReadingsGrid
from ..widgets.step import StepDetail, StepSummary
from ..widgets.trend import TREND_KEYS, TrendView
from .help import HelpScreen
from .prompt import Alert, TextPrompt
from .remote import RemoteConfirm

VIEWS = ("step", "readings", "bench", "meter", "log")
VIEW_TITLE = {
    "step": "1 Step",
    "readings": "2 Readings",
    "bench": "3 Bench",
    "meter": "4 Phasors",
    "log": "5 Log",
}
WIDE_MIN = (110, 34)


# what the technician is told once a step command is taken (journalled by the runner)
_DONE_WORDS = {
    "confirm_operation": "operation confirmed: verifying the switch status",
    "capture": "capture started: settling, then capturing",
    "retake": "retake started: settling again",
    "accept": "step accepted",
    "skip": "step skipped, reason journalled",
    "note": "note journalled",
    "sign": "hold point signed off",
}


class MainScreen(Screen):
    BINDINGS: ClassVar[list[BindingType]] = [*bindings()]

    def __init__(self, bridge: Bridge, *, autopoll: bool = True) -> None:
        super().__init__()
        self.bridge = bridge
        self.profile = bridge.profile
        self.autopoll = autopoll
        self.view = "step"
        self.unit_mode: UnitMode = "bench"
        self.meter_idx = 0
        self.trend_idx = 0
        self.frame: Frame | None = None
        self.history: deque[Snapshot] = deque(maxlen=400)
        self.latencies: deque[float] = deque(maxlen=2000)  # post -> painted, seconds
        self.frames_shown = 0
        self._alerted_stop = False
        self._auto_exported = False
        self._remote_busy = False  # a remote command is being sent; its worker reports the outcome
        self.exported: Path | None = None

    # ------------------------------------------------------------------ layout
    def compose(self) -> ComposeResult:
        with Vertical(id="top"):
            yield StepSummary(id="summary")
            yield Static("", id="notice")
            yield Static("", id="tabs")
        with Horizontal(id="body"):
            yield from self._columns()
        yield Footer(show_command_palette=False)

    def _columns(self) -> ComposeResult:
        with Vertical(id="col-left", classes="col"):
            with VerticalScroll(id="pane-step", classes="pane"):
                yield StepDetail(id="step-detail")
                yield ChecksPanel(id="checks")
            yield ReadingsGrid(self.profile, id="pane-readings", classes="pane")
            yield Log(id="pane-log", classes="pane", max_lines=2000)
        with Vertical(id="col-right", classes="col"):
            with VerticalScroll(id="pane-bench", classes="pane"):
                yield BenchView(self.profile, id="bench")
            with VerticalScroll(id="pane-meter", classes="pane"):
                yield PhasorView(self.profile, id="phasor")
                yield TrendView(self.profile, id="trend")

    def on_mount(self) -> None:
        for pane, title in VIEW_TITLE.items():
            self.query_one(f"#pane-{pane}").border_title = title
        self._apply_layout()
        if self.autopoll:
            self.poll()

    def on_resize(self) -> None:
        self._apply_layout()

    @property
    def wide(self) -> bool:
        w, h = self.app.size
        return w >= WIDE_MIN[0] and h >= WIDE_MIN[1]

    def _apply_layout(self) -> None:
        wide = self.wide
        self.set_class(wide, "wide")
        self.set_class(not wide, "narrow")
        for pane in VIEWS:
            self.query_one(f"#pane-{pane}").display = wide or pane == self.view
        left = {"step", "readings", "log"}
        self.query_one("#col-left").display = wide or self.view in left
        self.query_one("#col-right").display = wide or self.view not in left
        tabs = "  ".join(
            f"[reverse] {VIEW_TITLE[v]} [/]" if v == self.view else f" {VIEW_TITLE[v]} "
            for v in VIEWS
        )
        units = UNIT_MODE_LABEL[self.unit_mode]
        self.query_one("#tabs", Static).update(f"{tabs}  V=next  U={units}")
        self.query_one("#pane-readings").border_title = f"2 Readings ({units})"
        self.query_one("#tabs").display = not wide

    # ------------------------------------------------------------------ polling
    @work(exclusive=True, group="poller", exit_on_error=False)
    async def poll(self) -> None:
        worker = get_current_worker()
        pause = 0.5
        while not worker.is_cancelled:
            try:
                frame = await self.bridge.cycle()
            except BenchwalkError as exc:
                self.post_message(PollTrouble(str(exc)))
                await asyncio.sleep(pause)  # back off; the loop keeps the screen alive
                pause = min(pause * 2, 5.0)
                continue
            pause = 0.5
            if frame.events:
                self.post_message(LogLines(frame.events))
            self.post_message(FrameReady(frame, time.monotonic()))

    async def stop_polling(self) -> None:
        """Cancel the poll worker and wait until it has left the poller (bounded)."""
        for worker in self.workers.cancel_group(self, "poller"):
            with contextlib.suppress(Exception):
                await asyncio.wait_for(worker.wait(), 2.0)

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.worker.group == "poller" and event.state is WorkerState.ERROR:
            self.notice(f"\u2718 polling stopped: {event.worker.error}. Restarting.")
            self.set_timer(1.0, self.poll)
        elif event.state is WorkerState.ERROR:
            self.notice(f"\u2718 {event.worker.name} failed: {event.worker.error}")

    def on_frame_ready(self, message: FrameReady) -> None:
        self.show_frame(message.frame)
        posted = message.posted_mono
        # delay from snapshot to display: measured once the screen has been refreshed
        self.call_after_refresh(lambda: self.latencies.append(time.monotonic() - posted))

    def on_log_lines(self, message: LogLines) -> None:
        self.log_lines(message.lines)

    def on_poll_trouble(self, message: PollTrouble) -> None:
        self.notice(f"\u2718 {message.text}")
        self.log_lines((f"{time.strftime('%H:%M:%S')} poll: {message.text}",))

    # ------------------------------------------------------------------ painting
    def notice(self, text: str) -> None:
        self.query_one("#notice", Static).update(text)

    def log_lines(self, lines: Iterable[str]) -> None:
        log = self.query_one("#pane-log", Log)
        for line in lines:
            log.write_line(line)

    def show_frame(self, frame: Frame) -> None:
        """Paint one frame; every widget repaints only what changed."""
        old = self.frame
        self.frame = frame
        self.frames_shown += 1
        step = frame.step
        self.query_one(StepSummary).show(step)
        self.query_one(StepDetail).show(step)
        self.query_one(ChecksPanel).show(frame.checks, step.overall if step else "waiting")
        snap = frame.snapshot
        if snap is not None:
            self.history.append(snap)
            self.query_one(ReadingsGrid).update_snapshot(snap)
            self.query_one(BenchView).show(snap.switches)
        self._show_meter()
        if old is None or (
            old.step and step and (old.step.state, old.step.index) != (step.state, step.index)
        ):
            self.refresh_bindings()
        if (
            step is not None
            and step.message
            and (old is None or old.step is None or old.step.message != step.message)
        ):
            self.notice(f"\u2718 {step.message}")
        if step is not None and step.state == "finished" and not self._auto_exported:
            self._auto_exported = True  # the sequence is complete: write the dataset at once
            self._export()
        if (
            step is not None
            and step.state == "stopped"
            and not self._alerted_stop
            and not self._remote_busy
        ):
            self._alerted_stop = True
            msg = (
                getattr(self.bridge.runner, "message", "") if hasattr(self.bridge, "runner") else ""
            )
            self.app.push_screen(
                Alert(
                    "SEQUENCE STOPPED",
                    (msg or step.instruction)
                    + "\nThe session is saved; clear the cause, then resume it.",
                )
            )

    def _show_meter(self) -> None:
        meter_id = self.profile.meters[self.meter_idx].id
        snap = self.frame.snapshot if self.frame else None
        block = snap.meters.get(meter_id) if snap is not None else None
        self.query_one(PhasorView).show(meter_id, block, height=9 if self.wide else 11)
        key = TREND_KEYS[self.trend_idx]
        samples = [
            (s.t_mono, s.meters[meter_id].get(key)) for s in self.history if meter_id in s.meters
        ]
        window = self.frame.settle_window_s if self.frame else 2.0
        width = 36 if self.wide else 34
        self.query_one(TrendView).show(meter_id, key, samples, window, self.unit_mode, width=width)

    # ------------------------------------------------------------------ key gating
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """A step key is enabled (and shown in the footer) exactly when the runner's view
        allows its command now."""
        command = COMMAND_OF.get(action)
        if command is None:
            return True
        step = self.frame.step if self.frame else None
        return step is not None and command in step.allowed

    # ------------------------------------------------------------------ step actions
    def _run(self, name: str, *args: str) -> None:
        refusal = self.bridge.command(name, *args)
        self.notice(
            f"\u2718 {refusal}"
            if refusal
            else f"\u2714 {_DONE_WORDS.get(name, name.replace('_', ' '))}"
        )
        self._repaint_now()

    def _repaint_now(self) -> None:
        """Show the command's effect at once instead of at the next poll."""
        try:
            frame = self.bridge.frame()
        except Exception:  # noqa: BLE001 - a paint must never take the screen down
            return
        if frame.events:
            self.log_lines(frame.events)
        self.show_frame(frame)
        self.refresh_bindings()

    def action_operated(self) -> None:
        self._run("confirm_operation")

    def action_capture(self) -> None:
        self._run("capture")

    def action_retake(self) -> None:
        self._run("retake")

    def _run_with(self, name: str) -> Callable[[str | None], None]:
        """A prompt's callback: the command with the answer, nothing when it was cancelled."""

        def run(answer: str | None) -> None:
            if answer:
                self._run(name, answer)

        return run

    def action_accept(self) -> None:
        frame = self.frame
        if (
            frame is not None
            and frame.step is not None
            and any(r.status.value == "fail" for r in frame.checks)
        ):
            self.app.push_screen(
                TextPrompt(
                    "Accept with failing checks", "Checks failed. Why is this step acceptable?"
                ),
                self._run_with("accept"),
            )
            return
        self._run("accept")

    def action_skip(self) -> None:
        self.app.push_screen(
            TextPrompt("Skip step", "Why is this step skipped? (journalled)"),
            self._run_with("skip"),
        )

    def action_note(self) -> None:
        self.app.push_screen(TextPrompt("Note", "Note for the journal:"), self._run_with("note"))

    def action_sign(self) -> None:
        self.app.push_screen(
            TextPrompt(
                "Sign hold point", "Name of the person signing off:", value=self.bridge.operator
            ),
            self._run_with("sign"),
        )

    def action_remote(self) -> None:
        frame = self.frame
        step = frame.step if frame else None
        view = self.bridge.runner.view()
        todo = list(getattr(view, "remote_todo", ()))
        if frame is None or step is None or not todo:
            self.notice("\u2718 no remote operation in this step")
            return
        switch_id, state = todo[0]
        try:
            question = self.bridge.request_remote(switch_id, state)
        except BenchwalkError as exc:
            self.notice(f"\u2718 {exc}")
            return
        sw = self.profile.switch(switch_id)
        present = step.actual.get(switch_id) or (
            frame.snapshot.switches.get(switch_id, "unknown") if frame.snapshot else "unknown"
        )

        def sent(ok: bool | None) -> None:
            if ok:
                self.notice(f"\u2026 sending {switch_id} -> {state}; verifying its status")
                self._remote_busy = True
                self._send_remote(switch_id, state)
            else:
                self.notice(f"remote operation of {switch_id} cancelled: nothing sent")
                self.bridge.log(f"remote {switch_id} -> {state} cancelled")

        self.app.push_screen(RemoteConfirm(switch_id, sw.label, present, state, question), sent)

    @work(group="command", exit_on_error=False)
    async def _send_remote(self, switch_id: str, state: str) -> None:
        try:
            failure = await self.bridge.confirm_remote(switch_id, state)
        finally:
            self._remote_busy = False
        if failure:
            self._alerted_stop = True  # this alert says it; no second one for the stop
        self._repaint_now()
        if failure:
            self.notice(f"\u2718 REMOTE FAILED: {failure}")
            self.app.push_screen(Alert(f"REMOTE OPERATION OF {switch_id} FAILED", failure))
        else:
            self.notice(f"\u2714 {switch_id} {state}: command sent and its status followed")

    # ------------------------------------------------------------------ view actions
    def action_view(self, name: str) -> None:
        self.view = name
        self._apply_layout()
        if name == "log":  # lines written while hidden: show the newest
            self.query_one("#pane-log", Log).scroll_end(animate=False)

    def action_next_view(self) -> None:
        self.action_view(VIEWS[(VIEWS.index(self.view) + 1) % len(VIEWS)])

    def _select_meter(self, idx: int) -> None:
        self.meter_idx = idx % len(self.profile.meters)
        self.query_one(ReadingsGrid).select(self.profile.meters[self.meter_idx].id)
        self._show_meter()

    def action_next_meter(self) -> None:
        self._select_meter(self.meter_idx + 1)

    def action_prev_meter(self) -> None:
        self._select_meter(self.meter_idx - 1)

    def on_readings_grid_meter_selected(self, message: ReadingsGrid.MeterSelected) -> None:
        self.meter_idx = [m.id for m in self.profile.meters].index(message.meter_id)
        self._show_meter()

    def action_units(self) -> None:
        self.unit_mode = UNIT_MODES[(UNIT_MODES.index(self.unit_mode) + 1) % len(UNIT_MODES)]
        self.query_one(ReadingsGrid).set_mode(
            self.unit_mode, self.frame.snapshot if self.frame else None
        )
        self._show_meter()
        self._apply_layout()
        self.notice(f"values in {UNIT_MODE_LABEL[self.unit_mode]}")

    def action_trend_key(self) -> None:
        self.trend_idx = (self.trend_idx + 1) % len(TREND_KEYS)
        self._show_meter()

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen())

    def action_export(self) -> None:
        self._export()

    @work(group="command", exit_on_error=False)
    async def _export(self) -> None:
        self.notice("\u2026 exporting")
        try:
            path = await self.bridge.export()
        except BenchwalkError as exc:
            self.notice(f"\u2718 export failed: {exc}")
            return
        self.bridge.log(f"exported {path}")
        self.notice(f"\u2714 dataset exported to {path}")
        self.exported = path
