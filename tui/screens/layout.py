"""The bench screen's panes and how they share the terminal.

At 80 columns one view shows at a time (keys 1-5 or V); from 110x34 all views share the screen.
The ids and classes here are the ones ``console.tcss`` styles.
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.geometry import Size
from textual.screen import Screen
from textual.widgets import Footer, Log, Static

from meas.model import Profile

from ..units import UNIT_MODE_LABEL, UnitMode
from ..widgets.bench import BenchView
from ..widgets.checks import ChecksPanel
from ..widgets.phasor import PhasorView
from ..widgets.readings import ReadingsGrid
from ..widgets.step import StepDetail, StepHeadline, StepSummary
from ..widgets.trend import TrendView

VIEWS = ("step", "readings", "bench", "meter", "log")
VIEW_TITLE = {
    "step": "1 Step",
    "readings": "2 Readings",
    "bench": "3 Bench",
    "meter": "4 Phasors",
    "log": "5 Log",
}
WIDE_MIN = (110, 34)
_LEFT = {"step", "readings", "log"}  # the views of the left column


def compose_panes(profile: Profile) -> ComposeResult:
    """Step headline and summary, notice and tabs on top; two columns of panes; the footer."""
    with Vertical(id="top"):
        yield StepHeadline(id="headline")
        yield StepSummary(id="summary")
        yield Static("", id="notice")
        yield Static("", id="tabs")
    with Horizontal(id="body"):
        with Vertical(id="col-left", classes="col"):
            with VerticalScroll(id="pane-step", classes="pane"):
                yield StepDetail(id="step-detail")
                yield ChecksPanel(id="checks")
            yield ReadingsGrid(profile, id="pane-readings", classes="pane")
            yield Log(id="pane-log", classes="pane", max_lines=2000)
        with Vertical(id="col-right", classes="col"):
            with VerticalScroll(id="pane-bench", classes="pane"):
                yield BenchView(profile, id="bench")
            with VerticalScroll(id="pane-meter", classes="pane"):
                yield PhasorView(profile, id="phasor")
                yield TrendView(profile, id="trend")
    yield Footer(show_command_palette=False)


def is_wide(size: Size) -> bool:
    """Whether the terminal is big enough for every view at once."""
    w, h = size
    return w >= WIDE_MIN[0] and h >= WIDE_MIN[1]


def title_panes(screen: Screen) -> None:
    for pane, title in VIEW_TITLE.items():
        screen.query_one(f"#pane-{pane}").border_title = title


def apply_layout(screen: Screen, view: str, unit_mode: UnitMode, wide: bool) -> None:
    """Show every pane (wide) or only ``view`` (narrow), and the tabs line of the narrow layout."""
    screen.set_class(wide, "wide")
    screen.set_class(not wide, "narrow")
    for pane in VIEWS:
        screen.query_one(f"#pane-{pane}").display = wide or pane == view
    screen.query_one("#col-left").display = wide or view in _LEFT
    screen.query_one("#col-right").display = wide or view not in _LEFT
    tabs = "  ".join(
        f"[reverse] {VIEW_TITLE[v]} [/]" if v == view else f" {VIEW_TITLE[v]} " for v in VIEWS
    )
    units = UNIT_MODE_LABEL[unit_mode]
    screen.query_one("#tabs", Static).update(f"{tabs}  V=next  U={units}")
    screen.query_one("#pane-readings").border_title = f"2 Readings ({units})"
    screen.query_one("#tabs").display = not wide
