"""The end-of-walk summary: every step's outcome and the session verdict, once, at the end."""

from __future__ import annotations

from collections.abc import Sequence

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Label, Static

from meas.verdict import OUTCOME_WORDS, StepRecord

from ..widgets.palette import DEFAULT, Palette, palette_of
from ..widgets.step import verdict_style

# outcome -> symbol and the palette role that repeats it in colour
_MARK = {
    "passed": ("\u2714", "ok"),
    "accepted_with_failures": ("!", "warn"),
    "skipped": ("\u2718", "error"),
    "not_captured": ("\u2026", "error"),
}


def summary_text(records: Sequence[StepRecord], simulated: bool, pal: Palette = DEFAULT) -> Text:
    """One line per step: mark, id, outcome in words, reason."""
    out = Text()
    if simulated:
        out.append(" SIMULATED BENCH ", style=pal.badge("sim"))
        out.append("\n")
    for r in records:
        sym, role = _MARK[r.outcome]
        style = pal.style(role, bold=role != "ok")
        out.append(f"{sym} ", style=style)
        out.append(f"{r.step_id:<20} ", style="bold")
        out.append(OUTCOME_WORDS[r.outcome], style=style)
        if r.reason:
            out.append(f"  ({r.reason})")
        out.append("\n")
    out.rstrip()
    return out


def verdict_text(verdict_line: str, pal: Palette = DEFAULT) -> Text:
    """The session verdict, below the step list so a long walk never scrolls it away."""
    return Text(f" VERDICT {verdict_line} ", style=verdict_style(verdict_line, pal))


class WalkSummary(ModalScreen[None]):
    """Shown when the sequence ends; Enter or Escape returns to the bench screen."""

    BINDINGS = [
        Binding("enter", "close", "OK", id="summary.ok"),
        Binding("escape", "close", "OK", show=False, id="summary.esc"),
    ]

    def __init__(self, records: Sequence[StepRecord], verdict_line: str, simulated: bool) -> None:
        super().__init__()
        self.records = tuple(records)
        self.verdict_line = verdict_line
        self.simulated = simulated

    def compose(self) -> ComposeResult:
        pal = palette_of(self.app)
        # the title, the verdict and the keys stay put; only the step list scrolls
        with Vertical(classes="modal-box summary-box"):
            yield Label("END OF THE WALK", classes="modal-title")
            with VerticalScroll():
                yield Static(summary_text(self.records, self.simulated, pal))
            yield Static(verdict_text(self.verdict_line, pal), classes="verdict")
            yield Static(
                "Enter = back to the bench (the dataset is being exported)   \u2191\u2193 = scroll",
                classes="modal-keys",
            )

    def action_close(self) -> None:
        self.dismiss(None)
