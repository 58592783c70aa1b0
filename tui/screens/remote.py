"""Remote switching: a modal naming the switch, its present and intended state, the caution,
and two deliberate keys in order (``ARM_KEY`` arms, then ``SEND_KEY`` sends; any other key,
or ``ARM_TIMEOUT_S`` without the send key, disarms)."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.events import Key
from textual.screen import ModalScreen
from textual.timer import Timer
from textual.widgets import Label, Static

from meas.cautions import REMOTE_COMMAND_CAUTION, SIMULATED_REMOTE_CAUTION

from ..keys import ARM_KEY, ARM_TIMEOUT_S, SEND_KEY, display_key


class RemoteConfirm(ModalScreen[bool]):
    """Dismisses True only after the arm key then the send key within ``ARM_TIMEOUT_S``;
    Escape cancels; any other key, or the timeout, disarms."""

    BINDINGS = [Binding("escape", "cancel", "Cancel", id="remote.cancel")]

    def __init__(
        self,
        switch_id: str,
        label: str,
        present: str,
        intended: str,
        question: str = "",
        simulated: bool = False,
        arm_timeout_s: float = ARM_TIMEOUT_S,
    ) -> None:
        super().__init__()
        self.switch_id = switch_id
        self.label = label
        self.present = present
        self.intended = intended
        self.question = question
        self.simulated = simulated
        self.arm_timeout_s = arm_timeout_s
        self.armed = False
        self.disarmed_by_timeout = 0
        self._timer: Timer | None = None

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
            caution = SIMULATED_REMOTE_CAUTION if self.simulated else REMOTE_COMMAND_CAUTION
            yield Static(caution, classes="caution")
            yield Static("", id="remote-keys", classes="modal-keys")

    def on_mount(self) -> None:
        self._show_keys()

    def _show_keys(self) -> None:
        keys = self.query_one("#remote-keys", Static)
        if self.armed:
            keys.update(
                f"ARMED. Press {display_key(SEND_KEY)} within {self.arm_timeout_s:.0f} s to send "
                f"{self.switch_id} -> {self.intended}.  Any other key disarms."
            )
        else:
            again = " (disarmed: time ran out)" if self.disarmed_by_timeout else ""
            keys.update(
                f"Press {display_key(ARM_KEY)} to arm (1 of 2){again}.  "
                "Esc = cancel, nothing is sent."
            )

    def _arm(self, on: bool) -> None:
        if self._timer is not None:
            self._timer.stop()
            self._timer = None
        self.armed = on
        if on:
            self._timer = self.set_timer(self.arm_timeout_s, self._time_out)

    def _time_out(self) -> None:
        self._timer = None
        if self.armed:
            self.armed = False
            self.disarmed_by_timeout += 1
            self._show_keys()

    def on_key(self, event: Key) -> None:
        event.stop()
        if event.key == "escape":
            self.dismiss(False)
            return
        event.prevent_default()
        key = event.key.lower() if len(event.key) == 1 else event.key  # Caps Lock on
        if not self.armed and key == ARM_KEY:
            self._arm(True)
        elif self.armed and key == SEND_KEY:
            self._arm(False)
            self.dismiss(True)
            return
        else:
            self._arm(False)
        self._show_keys()

    def action_cancel(self) -> None:
        self.dismiss(False)
