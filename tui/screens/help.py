"""Every key on one screen, grouped, from the same table the bindings are made of."""

from __future__ import annotations

from rich.table import Table
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Label, Static

from ..keys import KEYS, PALETTE, QUIT, SCREENSHOT, display_key, display_keys

GROUP_TITLE = {"step": "The step", "view": "Views", "session": "Session"}

# keys that are not bench-screen actions: (key as shown, what it does)
APP_KEYS = (
    ("up/down", "Move the meter selection in the readings view."),
    (
        display_key(PALETTE),
        "Command palette: every action by name, and Theme to pick a light or dark theme "
        "(kept for the next run).",
    ),
    (
        display_key(SCREENSHOT),
        "Save a screenshot of the screen (SVG, in your downloads folder; on every screen).",
    ),
    (display_key(QUIT), "Quit. The session stays in its journal and can be resumed."),
)


def help_table() -> Table:
    table = Table(box=None, show_header=False, padding=(0, 1), expand=False)
    table.add_column("key", style="bold", no_wrap=True)
    table.add_column("what")
    for group, title in GROUP_TITLE.items():
        table.add_row(f"[reverse] {title} [/reverse]", "")
        for k in KEYS:
            if k.group == group:
                table.add_row(display_keys(k), k.help)
    for key, what in APP_KEYS:
        table.add_row(key, what)
    return table


class HelpScreen(ModalScreen[None]):
    BINDINGS = [
        Binding("escape", "close", "Close", id="help.close"),
        Binding("f1", "close", "Close", show=False, id="help.f1"),
        Binding("question_mark", "close", "Close", show=False, id="help.question_mark"),
    ]

    def compose(self) -> ComposeResult:
        # the title and the close keys stay put; only the table scrolls (24 rows hold half of it)
        with Vertical(classes="modal-box help-box"):
            yield Label("Keys", classes="modal-title")
            with VerticalScroll():
                yield Static(help_table(), id="help-keys")
            yield Static("Esc or ? = close   \u2191\u2193 PgUp PgDn = scroll", classes="modal-keys")

    def action_close(self) -> None:
        self.dismiss(None)
