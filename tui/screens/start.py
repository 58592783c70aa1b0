"""Operator name and session: start a new one or resume a listed one.

Below the list, what the profile's sequence will calibrate (the pre-campaign analysis of
``benchwalk campaign``), computed in a thread worker so the screen opens at once.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Footer, Input, Label, OptionList, Static
from textual.widgets.option_list import Option
from textual.worker import Worker, WorkerState

from meas.calib.design import CampaignPlan, plan_campaign
from meas.errors import BenchwalkError
from meas.profile import load_profile

from ..widgets.campaign import campaign_text
from ..widgets.palette import palette_of

NEW = "__new__"


@dataclass(frozen=True)
class StartChoice:
    operator: str
    resume: str | None  # session id, None = new session


class StartScreen(Screen[StartChoice]):
    """Type the name, pick new or a session to resume, press Enter on the list.

    The choice is posted (``Chosen``) and the screen stays up, saying what it is doing, until
    the session is open and the App replaces it with the bench screen.
    """

    class Chosen(Message):
        def __init__(self, choice: StartChoice) -> None:
            self.choice = choice
            super().__init__()

    BINDINGS = [Binding("escape", "focus_name", "Edit name", id="start.name")]

    def __init__(
        self,
        bench: str,
        sessions: list[tuple[str, str]],
        operator: str = "",
        highlight: int = 0,
        profile_path: Path | None = None,
    ) -> None:
        super().__init__()
        self.profile_path = profile_path
        self.plan: CampaignPlan | None = None
        self.plan_error = ""
        self.highlight = highlight
        self.bench = bench
        self.sessions = sessions
        self.operator = operator

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="start-box"):  # a short terminal scrolls, nothing is cut
            yield Label(f"benchwalk  \u2014  {self.bench}", id="start-title")
            yield Static("Operator name (recorded with every decision):")
            yield Input(value=self.operator, placeholder="your name", id="operator")
            yield Static("Session:")
            options = [Option("\u25b6 start a new session", id=NEW)]
            options += [
                Option(f"\u21bb resume {sid}  {desc}", id=sid) for sid, desc in self.sessions
            ]
            yield OptionList(*options, id="sessions")
            yield Static("", id="start-error", classes="error-line")
            yield Static(
                "Enter on the name moves to the list; Enter on the list starts.",
                classes="modal-keys",
            )
            if self.profile_path is not None:
                yield Static("", id="campaign", classes="campaign")
        yield Footer()

    def on_mount(self) -> None:
        self.query_one("#sessions", OptionList).highlighted = self.highlight
        target = "#sessions" if self.operator else "#operator"
        self.query_one(target).focus()
        if self.profile_path is not None:
            box = self.query_one("#campaign", Static)
            box.border_title = "what this sequence will calibrate"
            box.border_subtitle = f"full table: benchwalk campaign {self.profile_path.name}"
            box.update("\u2026 working out which model parameters the sequence measures")
            self._plan(self.profile_path)

    @work(thread=True, exclusive=True, group="campaign", exit_on_error=False)
    def _plan(self, path: Path) -> CampaignPlan:
        return plan_campaign(load_profile(path))

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.worker.group != "campaign" or not self.is_mounted:
            return
        box = self.query_one("#campaign", Static)
        if event.state is WorkerState.SUCCESS:
            self.plan = event.worker.result
            assert self.plan is not None
            box.update(campaign_text(self.plan, palette_of(self.app)))
        elif event.state is WorkerState.ERROR:
            err = event.worker.error
            self.plan_error = str(err) if isinstance(err, BenchwalkError) else repr(err)
            box.update(f"no campaign analysis: {self.plan_error}")

    def action_focus_name(self) -> None:
        self.query_one("#operator", Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.query_one("#sessions", OptionList).focus()

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        name = self.query_one("#operator", Input).value.strip()
        if not name:
            self.query_one("#start-error", Static).update("\u2718 enter your name first")
            self.query_one("#operator", Input).focus()
            return
        sid = event.option.id
        what = "starting a new session" if sid == NEW else f"resuming {sid}"
        self.query_one("#start-error", Static).update(f"\u2026 {what}: connecting to the meters")
        self.post_message(self.Chosen(StartChoice(name, None if sid == NEW else sid)))
