"""Every key on one screen, grouped, from the same table the bindings are made of."""

from __future__ import annotations

from rich.table import Table
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Label, Static

from ..keys import KEYS, QUIT, display_key

GROUP_TITLE = {"step": "The step", "view": "Views", "session": "Session"}


def help_table() -> Table:
    table = Table(box=None, show_header=False, padding=(0, 1), expand=False)
    table.add_column("key", style="bold", no_wrap=True)
    table.add_column("what")
    for group, title in GROUP_TITLE.items():
        table.add_row(f"[reverse] {title} [/reverse]", "")
        for k in KEYS:
            if k.group == group:
                table.add_row(display_key(k.key), k.help)
    table.add_row("up/down", "Move the meter selection in the readings view.")
    table.add_row("Ctrl+P", "Command palette: every action by name.")
    table.add_row(display_key(QUIT), "Quit. The session stays in its journal and can be resumed.")
    return table


class HelpScreen(ModalScreen[None]):
    BINDINGS = [
        Binding("escape", "close", "Close", id="help.close"),
        Binding("f1", "close", "Close", show=False, id="help.f1"),
    ]

    def compose(self) -> ComposeResult:
        with VerticalScroll(classes="modal-box help-box"):
            yield Label("Keys", classes="modal-title")
            yield Static(help_table())
            yield Static("Esc = close", classes="modal-keys")

    def action_close(self) -> None:
        self.dismiss(None)
