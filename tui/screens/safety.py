"""The caution every session starts with; nothing is polled or operated before it is acknowledged."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Label, Static

from meas.cautions import SAFETY_ACKNOWLEDGEMENT


class SafetyScreen(Screen[bool]):
    """Press Y to acknowledge (dismisses True); Ctrl+Q leaves without starting."""

    BINDINGS = [
        Binding("y", "acknowledge", "I acknowledge", id="safety.ack"),
        Binding("Y", "acknowledge", "I acknowledge", show=False, id="safety.ack.caps"),
    ]

    def compose(self) -> ComposeResult:
        with Vertical(id="safety-box"):
            yield Label("\u26a0  SAFETY  \u26a0", id="safety-title")
            with VerticalScroll():
                yield Static(SAFETY_ACKNOWLEDGEMENT, id="safety-text")
            yield Static(
                "Press Y to acknowledge and continue.   Ctrl+Q to leave.", id="safety-keys"
            )
        yield Footer()

    def action_acknowledge(self) -> None:
        self.dismiss(True)
