"""One-line text prompt (skip reason, note, signer's name) and a plain alert."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Label, Static


class TextPrompt(ModalScreen[str | None]):
    """Enter submits a non-empty answer, Escape cancels (returns None)."""

    BINDINGS = [Binding("escape", "cancel", "Cancel", id="prompt.cancel")]

    def __init__(self, title: str, question: str, placeholder: str = "", value: str = "") -> None:
        super().__init__()
        self.title_text = title
        self.question = question
        self.placeholder = placeholder
        self.value = value

    def compose(self) -> ComposeResult:
        with Vertical(id="prompt-box", classes="modal-box"):
            yield Label(self.title_text, classes="modal-title")
            yield Static(self.question)
            yield Input(value=self.value, placeholder=self.placeholder, id="prompt-input")
            yield Static("Enter = save   Esc = cancel", classes="modal-keys")

    def on_mount(self) -> None:
        self.query_one(Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        text = event.value.strip()
        if text:
            self.dismiss(text)
        else:
            self.query_one("#prompt-input", Input).placeholder = "cannot be empty"

    def action_cancel(self) -> None:
        self.dismiss(None)


class Alert(ModalScreen[None]):
    """A failure the technician must see and acknowledge (Enter or Escape)."""

    BINDINGS = [
        Binding("enter", "close", "OK", id="alert.ok"),
        Binding("escape", "close", "OK", show=False, id="alert.esc"),
    ]

    def __init__(self, title: str, body: str) -> None:
        super().__init__()
        self.title_text = title
        self.body = body

    def compose(self) -> ComposeResult:
        with Vertical(classes="modal-box alert-box"):
            yield Label(f"\u2718 {self.title_text}", classes="modal-title alert-title")
            yield Static(self.body)
            yield Static("Enter = acknowledge", classes="modal-keys")

    def action_close(self) -> None:
        self.dismiss(None)
