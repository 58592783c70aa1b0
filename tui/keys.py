"""The console's key map, defined once: main-screen bindings, the help screen and the command
palette all read it. Letters and F-keys only (ctrl+m/i/h are Enter/Tab/Backspace on classic
terminals)."""

from __future__ import annotations

from dataclasses import dataclass

from textual.binding import Binding


@dataclass(frozen=True)
class Key:
    key: str
    action: str
    label: str  # footer text
    help: str  # one sentence for the help screen and the command palette
    group: str
    footer: bool = True


KEYS: tuple[Key, ...] = (
    Key(
        "o",
        "operated",
        "Operated",
        "Confirm you have operated the switches this step asks for.",
        "step",
    ),
    Key(
        "r",
        "remote",
        "Remote",
        "Operate this step's remote switch: a caution, then A and Y to send.",
        "step",
    ),
    Key(
        "c",
        "capture",
        "Capture",
        "Start the capture (or capture anyway after the settle timeout).",
        "step",
    ),
    Key(
        "a",
        "accept",
        "Accept",
        "Accept the reviewed capture (a reason is asked when checks failed).",
        "step",
    ),
    Key("x", "retake", "Retake", "Discard the review and settle and capture again.", "step"),
    Key("s", "skip", "Skip", "Skip this step; a reason is required and journalled.", "step"),
    Key("g", "sign", "Sign", "Sign off a hold point with your name.", "step"),
    Key("n", "note", "Note", "Add a note to the journal (completes a note step).", "step"),
    Key("m", "next_meter", "Meter", "Select the next meter for phasors and trend.", "view"),
    Key("shift+m", "prev_meter", "Prev meter", "Select the previous meter.", "view", footer=False),
    Key(
        "v",
        "next_view",
        "View",
        "Show the next view (step, readings, bench, meter, log).",
        "view",
        footer=False,
    ),
    Key("1", "view('step')", "Step", "Show the step and checks view.", "view", footer=False),
    Key("2", "view('readings')", "Readings", "Show the live readings view.", "view", footer=False),
    Key("3", "view('bench')", "Bench", "Show the bench diagram.", "view", footer=False),
    Key(
        "4",
        "view('meter')",
        "Phasors",
        "Show phasors and trend of the selected meter.",
        "view",
        footer=False,
    ),
    Key("5", "view('log')", "Log", "Show the event log.", "view", footer=False),
    Key("u", "units", "Units", "Toggle bench SI / network scale / per-unit values.", "view"),
    Key(
        "t",
        "trend_key",
        "Trend qty",
        "Choose the quantity of the trend (P, Q, V, I, PF, f).",
        "view",
        footer=False,
    ),
    Key(
        "e", "export", "Export", "Export the dataset of this session now.", "session", footer=False
    ),
    Key("f1", "help", "Help", "Show every key.", "session"),
)


def bindings() -> list[Binding]:
    return [
        Binding(k.key, k.action, k.label, show=k.footer, id=f"bench.{k.action.split('(')[0]}")
        for k in KEYS
    ]


def display_key(key: str) -> str:
    return {"shift+m": "Shift+M", "f1": "F1"}.get(key, key.upper() if len(key) == 1 else key)
