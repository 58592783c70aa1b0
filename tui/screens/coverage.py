"""The coverage view: per meter, which errors the session so far can detect, and its gains.

The estimate (``meas.estimate.Estimator(profile).run(captures)``, the public API) runs in a
thread worker when the view opens or on R, so the poll loop and the keys never wait for it;
the captures are the bridge's (``Bridge.captures_so_far``), taken on the UI thread first.
First the linearized estimate (one fit, about a second); when it names a fault, the exact one
(refits without the named meter, seconds more) follows, since the other meters' gains of the
first fit are disturbed by the fault.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, ClassVar

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Label, Static
from textual.worker import Worker, WorkerState, get_current_worker

from meas.errors import BenchwalkError
from meas.estimate import Estimate, Estimator
from meas.model import Profile
from meas.snapshot import Snapshot

from ..keys import with_capitals
from ..widgets.coverage import coverage_text
from ..widgets.palette import palette_of

# one per profile object and mode (building one is the cheap part)
_ESTIMATORS: dict[tuple[int, bool], Estimator] = {}


def estimate_coverage(
    profile: Profile, captures: Sequence[Sequence[Snapshot]], exact: bool = False
) -> Estimate:
    """The joint estimate of the captures (``exact=False``: linearized identification, one
    fit, no refits)."""
    est = _ESTIMATORS.get((id(profile), exact))
    if est is None or est.profile is not profile:
        est = _ESTIMATORS[(id(profile), exact)] = Estimator(profile, exact=exact)
    return est.run(captures)


class CoverageScreen(ModalScreen[None]):
    BINDINGS: ClassVar[list[BindingType]] = [
        *with_capitals(
            [
                Binding("escape", "close", "Close", id="coverage.close"),
                Binding("k", "close", "Close", show=False, id="coverage.k"),
                Binding("r", "refresh_estimate", "Estimate again", id="coverage.refresh"),
            ]
        )
    ]

    def __init__(self, bridge: Any) -> None:
        super().__init__()
        self.bridge = bridge
        self.profile: Profile = bridge.profile
        self.estimate: Estimate | None = None
        self.source = ""
        self.error = ""
        self.runs = 0  # estimates finished (tests wait on it)
        self.used: list[list[Snapshot]] = []  # the captures of the last estimate
        self.final = False  # the estimate shown is the last one this request gives

    def compose(self) -> ComposeResult:
        with Vertical(classes="modal-box coverage-box"):
            yield Label("Coverage: what the session so far can verify", classes="modal-title")
            with VerticalScroll():
                yield Static("", id="coverage-body")
            yield Static(
                "R = estimate again with the newest captures   Esc = close", classes="modal-keys"
            )

    def on_mount(self) -> None:
        self.action_refresh_estimate()

    def action_close(self) -> None:
        self.dismiss(None)

    def action_refresh_estimate(self) -> None:
        get = getattr(self.bridge, "captures_so_far", None)
        captures, self.source = get() if get is not None else ([], "no captures in this console")
        self.error = ""
        self.final = False
        self._paint(busy=True)
        if not captures:
            self.error = "nothing captured yet and no live readings: nothing to estimate from"
            self._paint()
            return
        self.used = captures
        self._run(captures)

    @work(thread=True, exclusive=True, group="coverage", exit_on_error=False)
    def _run(self, captures: list[list[Snapshot]]) -> None:
        fast = estimate_coverage(self.profile, captures)
        refine = bool(fast.converged and fast.findings)
        self.app.call_from_thread(self._done, fast, not refine)
        if refine and not get_current_worker().is_cancelled:
            self.app.call_from_thread(
                self._done, estimate_coverage(self.profile, captures, True), True
            )

    def _done(self, e: Estimate, final: bool) -> None:
        self.estimate = e
        self.final = final
        self.runs += 1
        self._paint(busy=not final)

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.worker.group != "coverage":
            return
        if event.state is WorkerState.ERROR:
            err = event.worker.error
            why = str(err) if isinstance(err, BenchwalkError) else f"{type(err).__name__}: {err}"
            self.error = f"the estimate failed: {why}"
            self.final = True
            self.runs += 1
            self._paint()

    def _paint(self, busy: bool = False) -> None:
        meters = [m.id for m in self.profile.meters]
        pal = palette_of(self.app)
        note = ""
        if busy and self.estimate is not None:
            note = (
                " (a fault is named: refitting without it\u2026)"
                if self.estimate.findings
                else " (estimating again\u2026)"
            )
        text = coverage_text(self.estimate, meters, self.source + note, pal, busy=busy)
        if self.error:
            text.append(f"\n\u2718 {self.error}", style=pal.style("error", bold=True))
        self.query_one("#coverage-body", Static).update(text)
