"""What the bench screen shows and how it paints a frame; commands and polling build on it.

``show_frame`` is the one way a frame reaches the widgets, whether the poll worker brought it
or a command just changed the runner; every widget repaints only what changed.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterable
from pathlib import Path

from textual.app import ComposeResult
from textual.screen import Screen
from textual.widgets import Log, Static

from meas.snapshot import Snapshot

from ..bridge import Bridge
from ..frame import Frame
from ..units import UnitMode
from ..widgets.bench import BenchView
from ..widgets.checks import ChecksPanel
from ..widgets.phasor import PhasorView
from ..widgets.readings import ReadingsGrid, per_phase_lines
from ..widgets.step import StepDetail, StepHeadline, StepSummary, headline_fits
from ..widgets.trend import TREND_KEYS, TrendView
from .layout import apply_layout, compose_panes, is_wide


class PaintedScreen(Screen):
    """The screen's state (view, units, selected meter, history) and its painting."""

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
        runner = getattr(bridge, "runner", None)
        # a finished session opened again: its dataset is re-exported only when asked (E)
        self.finished_at_open = bool(runner is not None and getattr(runner, "finished", False))
        self._auto_exported = self.finished_at_open
        self._remote_busy = False  # a remote command is being sent; its worker reports the outcome
        self.exported: Path | None = None
        self._notice = ""  # the notice line's text

    # ------------------------------------------------------------------ layout
    def compose(self) -> ComposeResult:
        yield from compose_panes(self.profile)

    @property
    def wide(self) -> bool:
        return is_wide(self.app.size)

    def _apply_layout(self) -> None:
        apply_layout(self, self.view, self.unit_mode, self.wide)

    # ------------------------------------------------------------------ painting
    def notice(self, text: str) -> None:
        self._notice = text
        self.query_one("#notice", Static).update(text)

    def log_lines(self, lines: Iterable[str]) -> None:
        log = self.query_one("#pane-log", Log)
        for line in lines:
            log.write_line(line)

    def show_frame(self, frame: Frame) -> None:
        """Paint one frame; every widget repaints only what changed."""
        self.paint(frame)

    def paint(self, frame: Frame, count: bool = True) -> None:
        """Paint ``frame`` (``count``: a new frame, not the last one painted again, as after
        a change of theme)."""
        old = self.frame
        self.frame = frame
        self.frames_shown += count
        step = frame.step
        self.query_one(StepHeadline).show(step)
        self.query_one(StepSummary).show(step)
        # a title the headline had to cut is shown whole in the step view
        self.query_one(StepDetail).show(step, not headline_fits(step, self.app.size.width))
        self.query_one(ChecksPanel).show(frame.checks, step.overall if step else "waiting")
        snap = frame.snapshot
        grid = self.query_one(ReadingsGrid)
        meters = set(grid.meter_ids)
        grid.set_failing(
            frozenset(
                r.subject for r in frame.checks if r.status.value == "fail" and r.subject in meters
            )
        )
        if snap is not None and count:
            self.history.append(snap)
            grid.update_snapshot(snap)
            self.query_one(BenchView).show(snap.switches)
        self._show_meter()
        if old is None or (
            old.step and step and (old.step.state, old.step.index) != (step.state, step.index)
        ):
            self.refresh_bindings()
        if old is not None and old.step and step and old.step.index != step.index:
            self.notice("")  # a new step: the last step's notice no longer holds
        before = old.step.message if old is not None and old.step is not None else ""
        if step is not None and step.message and step.message != before:
            self.notice(f"\u2718 {step.message}")
        elif (
            step is not None and before and not step.message and self._notice == f"\u2718 {before}"
        ):
            self.notice("")  # the runner's complaint no longer holds: do not leave it up

    def _show_meter(self) -> None:
        meter_id = self.profile.meters[self.meter_idx].id
        snap = self.frame.snapshot if self.frame else None
        block = snap.meters.get(meter_id) if snap is not None else None
        self.query_one(PhasorView).show(meter_id, block, height=9 if self.wide else 11)
        self.query_one(ReadingsGrid).set_detail(per_phase_lines(self.profile, meter_id, block))
        key = TREND_KEYS[self.trend_idx]
        samples = [
            (s.t_mono, s.meters[meter_id].get(key)) for s in self.history if meter_id in s.meters
        ]
        window = self.frame.settle_window_s if self.frame else 2.0
        width = 36 if self.wide else 34
        self.query_one(TrendView).show(meter_id, key, samples, window, self.unit_mode, width=width)
