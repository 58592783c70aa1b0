"""The console's key map, defined once: main-screen bindings, the help screen, the command
palette and every "press ..." hint read it. Letters and F-keys only (ctrl+m/i/h are
Enter/Tab/Backspace on classic terminals). A step key names the runner command it gives; the
main screen enables it exactly when the runner's view allows that command."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from textual.binding import Binding

# the remote modal's two deliberate keys, in order: arm (Prime), then send (Dispatch); neither
# means anything on the main screen, so a habit there cannot send a command. Armed, the modal
# disarms on any other key and after ARM_TIMEOUT_S seconds without the send key.
ARM_KEY, SEND_KEY = "p", "d"
ARM_TIMEOUT_S = 8.0


@dataclass(frozen=True)
class Key:
    key: str
    action: str
    label: str  # footer text
    help: str  # one sentence for the help screen and the command palette
    group: str
    footer: bool = True
    command: str = ""  # the runner command this key gives (meas.walk.states.COMMANDS), if any
    also: tuple[str, ...] = ()  # other keys bound to the same action (shown beside it)


KEYS: tuple[Key, ...] = (
    Key(
        "o",
        "operated",
        "Operated",
        "Confirm you have operated the switches this step asks for.",
        "step",
        command="confirm_operation",
    ),
    Key(
        "r",
        "remote",
        "Remote",
        f"Operate this step's remote switch: a caution, then {ARM_KEY.upper()} to arm and "
        f"{SEND_KEY.upper()} to send within {ARM_TIMEOUT_S:.0f} s.",
        "step",
        command="request_remote",
    ),
    Key(
        "c",
        "capture",
        "Capture",
        "Start the capture (or capture anyway after the settle timeout).",
        "step",
        command="capture",
    ),
    Key(
        "a",
        "accept",
        "Accept",
        "Accept the reviewed capture (a reason is asked when checks failed).",
        "step",
        command="accept",
    ),
    Key(
        "x",
        "retake",
        "Retake",
        "Discard the review and settle and capture again.",
        "step",
        command="retake",
    ),
    Key(
        "s",
        "skip",
        "Skip",
        "Skip this step; a reason is required and journalled.",
        "step",
        command="skip",
    ),
    Key("g", "sign", "Sign", "Sign off a hold point with your name.", "step", command="sign"),
    Key(
        "n",
        "note",
        "Note",
        "Add a note to the journal (completes a note step).",
        "step",
        command="note",
    ),
    Key("m", "next_meter", "Meter", "Select the next meter for phasors and trend.", "view"),
    # a terminal sends Shift+M as the character "M" (textual's key "M", never "shift+m")
    Key("M", "prev_meter", "Prev meter", "Select the previous meter.", "view", footer=False),
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
    Key(
        "k",
        "coverage",
        "Coverage",
        "Show, per meter, which errors the session so far can detect and the estimated gains.",
        "view",
    ),
    Key("question_mark", "help", "Help", "Show every key.", "session", also=("f1",)),
)


QUIT = "ctrl+q"  # the App's quit key (kept out of KEYS: it is not a screen action)
SCREENSHOT = "ctrl+s"  # the App's screenshot key (textual's screenshot action, every screen)
PALETTE = "ctrl+p"  # textual's command palette: every action by name, and the theme picker

# key action -> the runner command it gives (step keys only)
COMMAND_OF: dict[str, str] = {k.action: k.command for k in KEYS if k.command}
# key -> its action (to say why a step key that cannot act now does nothing)
ACTION_OF_KEY: dict[str, str] = {k.key: k.action for k in KEYS}


# Which footer items stay when the footer is too narrow for all (80 columns in review). Lower
# rank stays first: help and quit always (help lists every key), then the step's keys, then
# the views in this order; a dropped item's key still works and help still lists it.
_FOOTER_RANK = {"help": 0, "quit": 0, "coverage": 2, "next_meter": 3, "units": 4}


def footer_rank(action: str) -> int:
    """The footer rank of a binding's action (step keys 1, unranked views last)."""
    name = action.removeprefix("app.").split("(")[0]
    if name in COMMAND_OF:
        return 1
    return _FOOTER_RANK.get(name, 5)


def footer_fit(items: Sequence[tuple[str, int]], width: int) -> set[int]:
    """Which footer items fit in ``width`` cells: the positions of (action, cells) items kept,
    by rank (``footer_rank``) and then from the left; shown in their own order, so the footer
    never ends in a cut word."""
    order = sorted(range(len(items)), key=lambda i: (footer_rank(items[i][0]), i))
    kept: set[int] = set()
    used = 0
    for i in order:
        if used + items[i][1] <= width:
            kept.add(i)
            used += items[i][1]
    return kept


def _caps(key: str) -> tuple[str, ...]:
    """The key as Caps Lock sends it, where that is no key of its own (a bench laptop left in
    capitals must not make every step key silently dead)."""
    up = key.upper()
    if len(key) == 1 and key.islower() and up not in ACTION_OF_KEY:
        return (up,)
    return ()


# key as pressed, Caps Lock included -> its action
ACTION_OF_PRESSED: dict[str, str] = {
    **ACTION_OF_KEY,
    **{c: k.action for k in KEYS for c in _caps(k.key)},
}


def with_capitals(screen_bindings: Sequence[Binding]) -> list[Binding]:
    """A screen's bindings plus, hidden, each lowercase letter's capital bound to the same
    action (Caps Lock on), where the capital is not bound already."""
    taken = {b.key for b in screen_bindings}
    out = list(screen_bindings)
    for b in screen_bindings:
        up = b.key.upper()
        if len(b.key) == 1 and b.key.islower() and up not in taken:
            taken.add(up)
            out.append(Binding(up, b.action, b.description, show=False, id=f"{b.id}.caps"))
    return out


def bindings() -> list[Binding]:
    out = []
    for k in KEYS:
        name = k.action.split("(")[0]
        out.append(Binding(k.key, k.action, k.label, show=k.footer, id=f"bench.{name}"))
        out += [Binding(a, k.action, k.label, show=False, id=f"bench.{name}.{a}") for a in k.also]
    return with_capitals(out)


def display_key(key: str) -> str:
    if key.startswith("ctrl+"):
        return "Ctrl+" + display_key(key.removeprefix("ctrl+"))
    named = {"M": "Shift+M", "f1": "F1", "question_mark": "?", "escape": "Esc"}
    return named.get(key, key.upper() if len(key) == 1 else key)


def display_keys(k: Key) -> str:
    """A key and its aliases as shown ("? or F1")."""
    return " or ".join(display_key(x) for x in (k.key, *k.also))


def key_of(name: str) -> str:
    """The key bound to a runner command or a key action (as in ``KEYS``)."""
    return next(k.key for k in KEYS if name in (k.command, k.action))


def action_keys(action: str, settle_timed_out: bool = False, pending: bool = False) -> str:
    """The keys to press for the runner's next action (``RunnerView.action``), as shown;
    ``pending``: a remote command awaits its dialog's arm and send keys."""

    def k(name: str) -> str:
        return display_key(key_of(name))

    if action == "request_remote" and pending:
        return f"{display_key(ARM_KEY)} arm, then {display_key(SEND_KEY)} send in the remote dialog"
    if action == "retake" and settle_timed_out:
        return f"{k('capture')} capture anyway, {k('retake')} wait again, {k('skip')} skip"
    return {
        "confirm_operation": k("confirm_operation"),
        "request_remote": k("request_remote"),
        "capture": k("capture"),
        "accept": k("accept"),
        "accept_with_reason": f"{k('accept')} (with reason) or {k('retake')}",
        "retake": f"{k('retake')} (or {k('skip')} to skip)",
        "sign": k("sign"),
        "note": k("note"),
        "none": f"{k('export')} export, {display_key(QUIT)} quit",
    }.get(action, "")
