"""The caution every session starts with; nothing is polled or operated before it is acknowledged."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Label, Static

CAUTION_TEXT = """\
This console records meter readings while a network is switched. Switching live plant can kill.

\u2022 Qualified persons only: work only on equipment you are trained, authorised and fit to operate.
\u2022 The site's switching procedures, permits and lockout/tagout govern every operation; the sequence shown here is a measurement plan, not a switching programme.
\u2022 Local codes, regulations and licensed practice prevail over anything this tool says.
\u2022 This tool is no interlock and does not replace one. It may read wrong, late or not at all; prove dead with approved test equipment, never with this screen.
\u2022 Remote commands are sent only when the profile enables control and you confirm each one.
"""


class SafetyScreen(Screen[bool]):
    """Press Y to acknowledge (dismisses True); Ctrl+Q leaves without starting."""

    BINDINGS = [Binding("y", "acknowledge", "I acknowledge", id="safety.ack")]

    def compose(self) -> ComposeResult:
        with Vertical(id="safety-box"):
            yield Label("\u26a0  SAFETY  \u26a0", id="safety-title")
            with VerticalScroll():
                yield Static(CAUTION_TEXT, id="safety-text")
            yield Static(
                "Press Y to acknowledge and continue.   Ctrl+Q to leave.", id="safety-keys"
            )
        yield Footer()

    def action_acknowledge(self) -> None:
        self.dismiss(True)
