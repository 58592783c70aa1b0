"""The current step: number of total, title, instruction, expected vs actual switches, next key."""

from __future__ import annotations

from rich.style import Style
from rich.text import Text
from textual.widgets import Static

from ..frame import StepInfo
from ..keys import display_key, key_of
from .checks import overall_text
from .palette import DEFAULT, Palette, palette_of


def verdict_style(line: str, pal: Palette = DEFAULT) -> Style:
    """The verdict's colour; the word carries the meaning, colour only repeats it."""
    if line.startswith("PASS with"):
        return pal.badge("warn")
    if line.startswith("PASS"):
        return pal.badge("ok")
    return pal.badge("error")


def step_headline(step: StepInfo | None, pal: Palette = DEFAULT) -> Text:
    """Where we are: the bench badge, step number and title, on one line (``StepHeadline``
    cuts a long title with an ellipsis; the step view then shows it whole)."""
    if step is None:
        return Text("no sequence loaded", style=pal.style("muted"))
    out = Text()
    if step.simulated:
        out.append(" SIMULATED BENCH ", style=pal.badge("sim"))
        out.append(" ")
    out.append(f" Step {step.index} of {step.total} ", style=pal.badge("plain"))
    out.append(f" {step.title}", style="bold")
    return out


def step_summary(step: StepInfo | None, pal: Palette = DEFAULT) -> Text:
    """Below the headline, in every view: the step's state (or the verdict) and what to press."""
    if step is None:
        return Text("")
    out = Text()  # wraps: the NEXT line is never cut off at 80 columns
    if step.finished and step.verdict:
        out.append(f" VERDICT {step.verdict} ", style=verdict_style(step.verdict, pal))
        # only the keys (tui.bridge puts them before the bar): the words repeat the verdict
        keys = (step.next_action or "-").split(" \u2502 ")[0]
        out.append("\n\u25b6 NEXT ", style=pal.badge("plain"))
        out.append(" " + keys, style="bold")
        return out
    out.append_text(overall_text(step.overall, pal))
    out.append(f"  state: {step.state}")
    if step.settle is not None and not step.finished:
        filled = int(round(10 * min(max(step.settle, 0.0), 1.0)))
        out.append(f"  settle [{'#' * filled}{'.' * (10 - filled)}]")
    if step.to_capture:
        out.append(f"  captured {step.captured}/{step.to_capture}")
    out.append("\n\u25b6 NEXT ", style=pal.badge("plain"))
    out.append(" " + (step.next_action or "-"), style="bold")
    return out


def step_detail(step: StepInfo | None, pal: Palette = DEFAULT, title: bool = False) -> Text:
    """Instruction and the switch table with every mismatch marked in words; ``title``: the
    step's title first (the headline had to cut it)."""
    if step is None:
        return Text("")
    out = Text()
    if title:
        out.append(step.title + "\n", style="bold")
    out.append(step.instruction.strip() + "\n")
    if step.expected:
        # matches share one line; a status read in the wrong state gets its own line; statuses
        # not read at all share one line, since they prove nothing either way
        flagged = set(step.mismatches)
        good = [sw for sw, want in step.expected.items() if step.actual.get(sw, "unknown") == want]
        on_word = [sw for sw in step.expected if sw not in good and sw not in flagged]
        unread = [
            sw
            for sw in step.expected
            if sw in flagged and step.actual.get(sw, "unknown") == "unknown"
        ]
        wrong = [sw for sw in step.expected if sw in flagged and sw not in unread]
        if good:
            out.append("\u2714 as expected: ", style=pal.style("ok"))
            out.append(", ".join(f"{sw} {step.expected[sw]}" for sw in good) + "\n")
        for sw in wrong:
            if step.state == "waiting" and sw in step.to_operate:  # not done yet, not wrong
                out.append("\u2192 TO OPERATE", style=pal.badge("plain"))
                out.append(
                    f" {sw}: reads {step.actual[sw]}, this step sets it {step.expected[sw]}\n"
                )
                continue
            out.append("\u2718 MISMATCH", style=pal.badge("error"))
            out.append(f" {sw}: expected {step.expected[sw]}, reads {step.actual[sw]}\n")
        if unread:
            out.append("? STATUS NOT READ", style=pal.badge("warn"))
            out.append(
                " "
                + ", ".join(f"{sw} (expected {step.expected[sw]})" for sw in unread)
                + ": no answer from the PLC; check the PLC and its link\n"
            )
        if on_word:
            out.append("\u2022 no status point, on your word: ", style=pal.style("muted"))
            out.append(", ".join(f"{sw} {step.expected[sw]}" for sw in on_word) + "\n")
    if step.hint:
        out.append(step.hint + "\n", style="italic")
    if step.remote_switches:
        out.append(
            "remote operation available: "
            + ", ".join(step.remote_switches)
            + f" (press {display_key(key_of('request_remote'))})\n",
            style="bold",
        )
    return out


def headline_fits(step: StepInfo | None, width: int) -> bool:
    """Whether the headline shows the whole title in ``width`` cells."""
    return step_headline(step).cell_len <= width


class StepHeadline(Static):
    """One line; a title too long for the width ends in an ellipsis instead of wrapping."""

    DEFAULT_CSS = (
        "StepHeadline { height: 1; width: 1fr; text-wrap: nowrap; text-overflow: ellipsis; }"
    )

    def __init__(self, **kw) -> None:
        super().__init__("", **kw)
        self._last: tuple[str, str] | None = None

    def show(self, step: StepInfo | None) -> None:
        pal = palette_of(self.app)
        text = step_headline(step, pal)
        if (text.plain, pal.name) != self._last:
            self._last = (text.plain, pal.name)
            self.update(text)


class StepSummary(Static):
    DEFAULT_CSS = "StepSummary { height: auto; max-height: 6; }"

    def __init__(self, **kw) -> None:
        super().__init__("", **kw)
        self._last: tuple[str, str] | None = None

    def show(self, step: StepInfo | None) -> None:
        pal = palette_of(self.app)
        text = step_summary(step, pal)
        if (text.plain, pal.name) != self._last:
            self._last = (text.plain, pal.name)
            self.update(text)


class StepDetail(Static):
    DEFAULT_CSS = "StepDetail { height: auto; }"

    def __init__(self, **kw) -> None:
        super().__init__("", **kw)
        self._last: tuple[str, str] | None = None

    def show(self, step: StepInfo | None, title: bool = False) -> None:
        pal = palette_of(self.app)
        text = step_detail(step, pal, title)
        if (text.plain, pal.name) != self._last:
            self._last = (text.plain, pal.name)
            self.update(text)
