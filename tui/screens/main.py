"""The bench screen: step, live readings, checks, bench, phasors and trend, event log.

The screen owns the poll worker (TEXTUAL_NOTES.md: a loop on the App raced screen teardown);
the worker only awaits the bridge and posts ``FrameReady``; the handler paints. At 80 columns
one view shows at a time (keys 1-5 or V); from 110x34 all views share the screen.

Built in layers, one job each: ``layout`` (panes), ``painting`` (state and ``show_frame``),
``step_commands`` (the technician's step commands); this module adds the poll worker and the
view keys.
"""

from __future__ import annotations

import asyncio
import contextlib
import time
from dataclasses import replace
from typing import ClassVar

from rich.cells import cell_len
from textual import work
from textual.binding import ActiveBinding, BindingType
from textual.widgets import Log
from textual.worker import Worker, WorkerState, get_current_worker

from meas.errors import BenchwalkError

from ..keys import bindings, display_key, footer_fit, key_of
from ..messages import FrameReady, LogLines, PollTrouble
from ..units import UNIT_MODE_LABEL, UNIT_MODES
from ..widgets.readings import ReadingsGrid
from ..widgets.trend import TREND_KEYS
from .coverage import CoverageScreen
from .help import HelpScreen
from .layout import VIEWS, title_panes
from .step_commands import StepCommandScreen


class MainScreen(StepCommandScreen):
    BINDINGS: ClassVar[list[BindingType]] = [*bindings()]

    def on_mount(self) -> None:
        title_panes(self)
        self._apply_layout()
        if self.finished_at_open:
            self.notice(
                "this session is already finished: nothing to resume; press "
                f"{display_key(key_of('export'))} to write its dataset and report again"
            )
        if self.autopoll:
            self.poll()
        self.app.theme_changed_signal.subscribe(self, lambda _theme: self.repaint())

    def repaint(self) -> None:
        """Paint the last frame again (a new theme: every widget takes its new colours)."""
        self.query_one(ReadingsGrid).refresh()
        if self.frame is not None:
            self.paint(self.frame, count=False)  # paint only: no export, no alert

    def on_resize(self) -> None:
        self._apply_layout()
        self.refresh_bindings()  # the footer keeps what fits the new width
        if self.frame is not None:
            self.paint(self.frame, count=False)  # the step title: whole or cut, by the width

    @property
    def active_bindings(self) -> dict[str, ActiveBinding]:
        """textual's active bindings, with the footer items that do not fit the width hidden
        (``keys.footer_fit``: help and quit always stay). Only what the footer shows changes;
        every key still works, since key dispatch does not read this."""
        active = super().active_bindings
        shown = [(key, ab) for key, ab in active.items() if ab.binding.show]
        # a footer item is " key description " (FooterKey: key padding 0 1, description 0 1 0 0)
        cells = [
            cell_len(self.app.get_key_display(ab.binding)) + cell_len(ab.binding.description) + 3
            for _, ab in shown
        ]
        kept = footer_fit(
            [(ab.binding.action, n) for (_, ab), n in zip(shown, cells, strict=True)],
            self.app.size.width,
        )
        for i, (key, ab) in enumerate(shown):
            if i not in kept:
                active[key] = ab._replace(binding=replace(ab.binding, show=False))
        return active

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

    def action_coverage(self) -> None:
        self.app.push_screen(CoverageScreen(self.bridge))
