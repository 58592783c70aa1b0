"""Remote switching: a modal naming the switch, its present and intended state, the caution,
and two deliberate keys in order (A arms, then Y sends; anything else disarms)."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.events import Key
from textual.screen import ModalScreen
from textual.widgets import Label, Static

from meas.cautions import REMOTE_COMMAND_CAUTION

from ..keys import ARM_KEY, SEND_KEY, display_key


class RemoteConfirm(ModalScreen[bool]):
    """Dismisses True only after A then Y; Escape or any other key after A disarms."""

    BINDINGS = [Binding("escape", "cancel", "Cancel", id="remote.cancel")]

    def __init__(
        self, switch_id: str, label: str, present: str, intended: str, question: str = ""
    ) -> None:
        super().__init__()
        self.switch_id = switch_id
        self.label = label
        self.present = present
        self.intended = intended
        self.question = question
        self.armed = False

    def compose(self) -> ComposeResult:
        with Vertical(classes="modal-box remote-box"):
            yield Label(f"REMOTE OPERATION  {self.switch_id}  {self.label}", classes="modal-title")
            t = Text()
            t.append("present state:  ", style="bold")
            t.append(f"{self.present.upper()}\n")
            t.append("intended state: ", style="bold")
            t.append(f"{self.intended.upper()}\n", style="bold reverse")
            if self.question:
                t.append(self.question + "\n")
            yield Static(t)
            yield Static(REMOTE_COMMAND_CAUTION, classes="caution")
            yield Static("", id="remote-keys", classes="modal-keys")

    def on_mount(self) -> None:
        self._show_keys()

    def _show_keys(self) -> None:
        keys = self.query_one("#remote-keys", Static)
        if self.armed:
            keys.update(
                f"ARMED. Press {display_key(SEND_KEY)} to send {self.switch_id} -> {self.intended}.  "
                "Any other key disarms."
            )
        else:
            keys.update(
                f"Press {display_key(ARM_KEY)} to arm (1 of 2).  Esc = cancel, nothing is sent."
            )

    def on_key(self, event: Key) -> None:
        event.stop()
        if event.key == "escape":
            self.dismiss(False)
            return
        event.prevent_default()
        if not self.armed and event.key == ARM_KEY:
            self.armed = True
        elif self.armed and event.key == SEND_KEY:
            self.dismiss(True)
            return
        else:
            self.armed = False
        self._show_keys()

    def action_cancel(self) -> None:
        self.dismiss(False)
