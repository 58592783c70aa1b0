"""Live readings, one row per meter, drawn through textual's Line API with cached rows.

DataTable re-renders every visible cell on each update (TEXTUAL_NOTES.md: ~33 % CPU for 50
rows at 5 Hz); here each row is one cached ``Strip`` rebuilt only when its text changes, and
only changed lines are refreshed, so 32 meters at 5 updates per second stay cheap.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from rich.segment import Segment
from rich.style import Style
from textual.binding import Binding
from textual.geometry import Region, Size
from textual.message import Message
from textual.strip import Strip
from textual.widget import Widget

from meas.model import Profile
from meas.snapshot import CommState, MeterBlock, Snapshot

from ..units import UnitMode, eng, scale_factor, unit_label
from .palette import Palette, palette_of

# a cached line: the header ("header", width, mode) or a meter row (id, cells, selected, width,
# failing), each with the styles it was drawn in (the theme and the widget's colours)
_StripKey = tuple[object, ...]

COMM_TEXT = {
    CommState.OK: "ok",
    CommState.DEGRADED: "~ degraded",
    CommState.FAILING: "! failing",
    CommState.OFFLINE: "\u2298 offline",
}
# (header, width) of each column after the selection marker
COLUMNS = (
    ("meter", 6),
    ("comm", 10),
    ("V LL avg", 9),
    ("I avg", 8),
    ("P", 9),
    ("Q", 10),
    ("PF", 6),
    ("f", 9),
)


@dataclass(frozen=True)
class GridStyles:
    """The grid's styles for one theme and widget background (``palette``'s colours)."""

    header: Style
    normal: Style
    selected: Style
    ident: Style
    failing: Style  # the id of a meter with a failing check
    dim: Style  # values of a meter whose link is failing or offline
    comm: dict[CommState | None, Style]


def grid_styles(pal: Palette, base: Style) -> GridStyles:
    """Styles from the theme palette over the widget's own colours (``base``): every segment
    carries the theme's foreground and background, so a light theme gives a light grid."""
    normal = base + Style(color=pal.foreground.rich_color)
    return GridStyles(
        header=normal + Style(bold=True, underline=True),
        normal=normal,
        selected=Style(
            color=pal.background.rich_color, bgcolor=pal.foreground.rich_color, bold=True
        ),
        ident=normal + Style(bold=True),
        failing=normal + pal.style("error", bold=True),
        dim=normal + pal.style("muted"),
        comm={
            CommState.OK: normal + pal.style("ok"),
            CommState.DEGRADED: normal + pal.style("warn", bold=True),
            CommState.FAILING: normal + pal.style("error", bold=True),
            CommState.OFFLINE: pal.badge("error"),
            None: normal + pal.style("muted"),
        },
    )


# Below this share of the meter's rated current its PF and current angles are noise: shown
# blank, not as a number (common practice; measuring ranges of PF usually start near 1 % of
# the rated current, from memory of IEC 61557-12).
PF_MIN_I_FRAC = 0.01


def current_threshold(profile: Profile, meter_id: str) -> float:
    """Primary amps below which a meter's PF and current phasors are not shown."""
    m = profile.meter(meter_id)
    # the rated current as the checks take it (meas/checks/layout.py): the CT primary, else
    # the bench's per-unit current at the zone's voltage
    v_ll = profile.zone_of_bus(m.bus).bench_v_ll
    rated = m.ct_primary_a or profile.bench.s_base_va / (math.sqrt(3.0) * v_ll)
    return PF_MIN_I_FRAC * float(rated)


def below_threshold(profile: Profile, meter_id: str, block: MeterBlock) -> bool:
    """Every phase current under the threshold (or unread): PF and angles mean nothing."""
    limit = current_threshold(profile, meter_id)
    vals = [block.get(f"i.{p}") for p in "ABC"]
    good = [abs(v) for v in vals if math.isfinite(v)]
    return not good or max(good) < limit


def per_phase_lines(profile: Profile, meter_id: str, block: MeterBlock | None) -> list[str]:
    """The selected meter's values per phase (a reversed CT shows only per phase)."""
    if block is None:
        return [f"{meter_id}: no reading yet"]
    dead = below_threshold(profile, meter_id, block)
    out = [f"{meter_id} per phase       A          B          C"]
    for label, key, unit in (
        ("V LN", "v_ln", "V"),
        ("I", "i", "A"),
        ("P", "p", "W"),
        ("Q", "q", "var"),
        ("PF", "pf", ""),
    ):
        if key == "pf" and dead:
            cells = ["--".rjust(10)] * 3
        else:
            cells = [eng(block.get(f"{key}.{p}"), unit, 10) for p in "ABC"]
        out.append(f"  {label:<14}" + " ".join(cells))
    return out


def _mean(block: MeterBlock, keys: tuple[str, ...]) -> float:
    vals = [block.get(k) for k in keys]
    vals = [v for v in vals if math.isfinite(v)]
    return sum(vals) / len(vals) if vals else math.nan


def row_cells(
    profile: Profile, meter_id: str, block: MeterBlock | None, mode: UnitMode
) -> tuple[str, ...]:
    """The text of one row: meter, comm state, V, I, P, Q, PF, f (fixed widths)."""
    widths = [w for _, w in COLUMNS]
    if block is None:
        cells = [meter_id, "no data"] + ["--"] * 6
        return tuple(
            c.rjust(w) if i > 1 else c.ljust(w)
            for i, (c, w) in enumerate(zip(cells, widths, strict=True))
        )
    bus = profile.meter(meter_id).bus

    def show(key: str, value: float, width: int) -> str:
        return eng(value * scale_factor(profile, bus, key, mode), unit_label(key, mode), width)

    v = _mean(block, ("v_ll.AB", "v_ll.BC", "v_ll.CA"))
    i = _mean(block, ("i.A", "i.B", "i.C"))
    return (
        meter_id[: widths[0]].ljust(widths[0]),
        COMM_TEXT[block.state].ljust(widths[1]),
        show("v_ll.AB", v, widths[2]),
        show("i.A", i, widths[3]),
        show("p.T", block.get("p.T"), widths[4]),
        show("q.T", block.get("q.T"), widths[5]),
        (
            "--".rjust(widths[6])
            if below_threshold(profile, meter_id, block)
            else eng(block.get("pf.T"), "", widths[6])
        ),
        eng(block.get("f.T"), "Hz", widths[7]),
    )


class ReadingsGrid(Widget, can_focus=True):
    """Per-meter readings; up/down selects a meter (posts ``MeterSelected``)."""

    DEFAULT_CSS = "ReadingsGrid { height: auto; min-height: 4; }"
    BINDINGS = [
        Binding("up", "move(-1)", "prev meter", show=False),
        Binding("down", "move(1)", "next meter", show=False),
    ]

    class MeterSelected(Message):
        def __init__(self, meter_id: str) -> None:
            self.meter_id = meter_id
            super().__init__()

    def __init__(
        self, profile: Profile, *, id: str | None = None, classes: str | None = None
    ) -> None:
        super().__init__(id=id, classes=classes)
        self.profile = profile
        self.meter_ids = [m.id for m in profile.meters]
        self.mode: UnitMode = "bench"
        self.selected = 0
        self.top = 0  # first meter row shown
        self._cells: dict[str, tuple[str, ...]] = {}
        self._strips: dict[_StripKey, Strip] = {}
        self._styles: tuple[tuple[str, Style], GridStyles] | None = None
        self._states: dict[str, CommState | None] = {}
        self.failing: frozenset[str] = frozenset()  # meters with a failing check, marked
        self._detail: list[str] = []  # the selected meter per phase, below the rows
        self.rebuilt_rows = 0  # rows whose text changed (benchmark and tests read it)

    def get_content_height(self, container: Size, viewport: Size, width: int) -> int:
        return len(self.meter_ids) + 1 + (len(self._detail) + 1 if self._detail else 0)

    def _rows_shown(self) -> int:
        """Meter rows that fit (the header takes one line); every row when they all fit."""
        h = self.size.height
        return len(self.meter_ids) if h <= 1 else max(1, h - 1)

    def _clamp_top(self) -> None:
        self.top = max(0, min(self.top, len(self.meter_ids) - self._rows_shown()))

    def on_resize(self) -> None:
        self._clamp_top()
        self.refresh()

    def set_failing(self, meters: frozenset[str]) -> None:
        """Mark the meters with a failing check (a ``\u2718`` beside the id, in the theme's error colour)."""
        if meters != self.failing:
            changed = meters ^ self.failing
            self.failing = meters
            for idx, mid in enumerate(self.meter_ids):
                if mid in changed:
                    self._refresh_meter_line(idx)

    def set_detail(self, lines: list[str]) -> None:
        if lines != self._detail:
            grew = len(lines) != len(self._detail)
            self._detail = lines
            if grew:
                self.refresh(layout=True)
            else:
                self.refresh()

    def get_content_width(self, container: Size, viewport: Size) -> int:
        return 2 + sum(w for _, w in COLUMNS) + len(COLUMNS) - 1

    # -- data in -------------------------------------------------------------------------
    def update_snapshot(self, snapshot: Snapshot) -> None:
        """Recompute row texts; refresh only rows whose text changed."""
        for idx, mid in enumerate(self.meter_ids):
            block = snapshot.meters.get(mid)
            cells = row_cells(self.profile, mid, block, self.mode)
            if self._cells.get(mid) != cells:
                self._cells[mid] = cells
                self._states[mid] = None if block is None else block.state
                self.rebuilt_rows += 1
                self._refresh_meter_line(idx)

    def set_mode(self, mode: UnitMode, snapshot: Snapshot | None) -> None:
        self.mode = mode
        self._strips.clear()
        if snapshot is not None:
            self.update_snapshot(snapshot)
        self.refresh()

    def select(self, meter_id: str) -> None:
        if meter_id in self.meter_ids:
            self._set_selected(self.meter_ids.index(meter_id))

    @property
    def selected_meter(self) -> str:
        return self.meter_ids[self.selected]

    def action_move(self, delta: int) -> None:
        self._set_selected((self.selected + delta) % len(self.meter_ids))
        self.post_message(self.MeterSelected(self.selected_meter))

    def _set_selected(self, idx: int) -> None:
        old = self.selected
        self.selected = idx
        rows = self._rows_shown()
        if idx < self.top:
            self.top = idx
            self.refresh()
        elif idx >= self.top + rows:
            self.top = idx - rows + 1
            self.refresh()
        elif self.top > 0 and len(self.meter_ids) <= rows:
            self.top = 0  # everything fits: never scroll rows out of sight
            self.refresh()
        else:
            self._refresh_meter_line(old)
            self._refresh_meter_line(idx)

    def _refresh_meter_line(self, idx: int) -> None:
        y = idx - self.top + 1
        if 1 <= y < self.size.height:
            self.refresh(Region(0, y, self.size.width, 1))

    # -- Line API ------------------------------------------------------------------------
    def styles_now(self) -> GridStyles:
        """The grid's styles for the current theme and this widget's colours (cached)."""
        pal = palette_of(self.app)
        base = self.rich_style
        key = (pal.name, base)
        if self._styles is None or self._styles[0] != key:
            self._styles = (key, grid_styles(pal, base))
            self._strips.clear()
        return self._styles[1]

    def render_line(self, y: int) -> Strip:
        width = self.size.width
        st = self.styles_now()
        if y == 0:
            head: _StripKey = ("header", width, self.mode)
            if head not in self._strips:
                text = "  " + " ".join(
                    h.rjust(w) if i > 1 else h.ljust(w) for i, (h, w) in enumerate(COLUMNS)
                )
                self._strips[head] = Strip([Segment(text[:width], st.header)]).extend_cell_length(
                    width, st.normal
                )
            return self._strips[head]
        idx = self.top + y - 1
        shown = min(len(self.meter_ids) - self.top, self._rows_shown())
        if idx >= len(self.meter_ids) or y > shown:
            extra = y - shown - 2  # one blank line, then the selected meter per phase
            if 0 <= extra < len(self._detail):
                return Strip([Segment(self._detail[extra][:width], st.normal)]).extend_cell_length(
                    width, st.normal
                )
            return Strip.blank(width, st.normal)
        mid = self.meter_ids[idx]
        cells = self._cells.get(mid) or row_cells(self.profile, mid, None, self.mode)
        selected = idx == self.selected
        failing = mid in self.failing
        key: _StripKey = (mid, cells, selected, width, failing)
        strip = self._strips.get(key)
        if strip is None:
            strip = self._build(st, cells, self._states.get(mid), selected, width, failing)
            self._strips = {k: v for k, v in self._strips.items() if k[0] != mid}
            self._strips[key] = strip
        return strip

    @staticmethod
    def _build(
        st: GridStyles,
        cells: tuple[str, ...],
        state: CommState | None,
        selected: bool,
        width: int,
        failing: bool = False,
    ) -> Strip:
        """One meter row. The selected row is drawn inverted, but a failing or offline link
        and a failing meter keep their own colours (their symbols say it as well)."""
        base = st.selected if selected else st.normal
        dim = state in (CommState.FAILING, CommState.OFFLINE)
        value_style = base if selected or not dim else st.dim
        comm_style = st.comm.get(state, st.comm[None])
        if selected and state in (CommState.OK, CommState.DEGRADED, None):
            comm_style = base
        mark = ("\u25b6" if selected else " ") + ("\u2718" if failing else " ")
        id_style = st.failing if failing else (base if selected else st.ident)
        segs = [Segment(mark, id_style), Segment(cells[0], id_style)]
        segs.append(Segment(" ", base))
        segs.append(Segment(cells[1], comm_style))
        for c in cells[2:]:
            segs.append(Segment(" ", base))
            segs.append(Segment(c, value_style))
        return Strip(segs).crop(0, width).extend_cell_length(width, base)
