"""The caution every session starts with; nothing is polled or operated before it is acknowledged."""

from __future__ import annotations

from typing import ClassVar

from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical, VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Label, Static

from meas.cautions import SAFETY_ACKNOWLEDGEMENT

from ..keys import with_capitals


class SafetyScreen(Screen[bool]):
    """Press Y to acknowledge (dismisses True); Ctrl+Q leaves without starting."""

    BINDINGS: ClassVar[list[BindingType]] = [
        *with_capitals([Binding("y", "acknowledge", "I acknowledge", id="safety.ack")])
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
