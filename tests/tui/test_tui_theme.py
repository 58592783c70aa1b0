"""The console under a light and a dark theme: every colour is the theme's, and text is
readable on its background.

Readability is the WCAG 2.1 success criterion 1.4.3 (contrast, minimum): a contrast ratio of
at least 4.5:1 for normal text, with relative luminance and contrast ratio as WCAG 2.1 defines
them. The console is driven with the pilot on one fixed frame (``support.console.StillFeed``)
with M2 failing a check, M4 offline and M6 failing its link, and the styles asserted are those
of the rendered strips (segments), not of the code that builds them.
"""

from __future__ import annotations

from dataclasses import replace

import pytest
from rich.segment import Segment
from rich.style import Style
from support.console import StillFeed
from support.console import show_still as _show
from textual.color import Color
from textual.geometry import Region
from textual.theme import BUILTIN_THEMES

from meas.snapshot import CommState
from tui.app import BenchwalkApp
from tui.widgets.checks import ChecksPanel
from tui.widgets.palette import (
    MIN_CONTRAST,
    MIN_GRAPHIC_CONTRAST,
    contrast_ratio,
    palette_for,
    readable,
)
from tui.widgets.readings import ReadingsGrid
from tui.widgets.step import StepDetail, StepSummary

THEMES = ("textual-light", "textual-dark")


def _app() -> BenchwalkApp:
    feed = StillFeed()
    snap = feed.still.snapshot
    assert snap is not None
    meters = dict(snap.meters)
    meters["M4"] = replace(meters["M4"], state=CommState.OFFLINE)
    meters["M6"] = replace(meters["M6"], state=CommState.FAILING)
    feed.still = replace(feed.still, snapshot=replace(snap, meters=meters))
    return BenchwalkApp(
        lambda op, resume: feed, skip_intro=True, operator="A. Tester", autopoll=False
    )


def _colour(c) -> Color:
    assert c is not None, "a segment without a colour shows the terminal's own, not the theme's"
    return Color.from_rich_color(c)


def _fg_bg(style: Style) -> tuple[Color, Color]:
    fg, bg = _colour(style.color), _colour(style.bgcolor)
    return (bg, fg) if style.reverse else (fg, bg)


def _lines(widget) -> list[list[Segment]]:
    w, h = widget.size
    return [list(strip) for strip in widget.render_lines(Region(0, 0, w, h))]


def _segment(lines: list[list[Segment]], text: str) -> Segment:
    for line in lines:
        for seg in line:
            if text in seg.text:
                return seg
    raise AssertionError(f"{text!r} is not drawn")


def _row(lines: list[list[Segment]], meter: str) -> list[Segment]:
    for line in lines:
        if meter in "".join(s.text for s in line)[:8]:  # the pane's border, marks, the id
            return line
    raise AssertionError(f"no row for {meter}")


@pytest.mark.parametrize("theme", THEMES)
async def test_the_readings_grid_draws_states_in_the_themes_colours(theme):
    app = _app()
    async with app.run_test(size=(120, 40)) as pilot:
        app.theme = theme
        await _show(pilot)
        await pilot.pause()
        var = {
            k: Color.parse(v)
            for k, v in app.theme_variables.items()
            if k in ("background", "text-success", "text-error", "error")
        }
        grid = app.screen.query_one(ReadingsGrid)
        lines = _lines(grid)
        bg = var["background"]
        # an unselected, healthy row: the theme's background behind it, its "ok" in the theme's
        # success text colour (made readable where the theme's own falls short)
        m3 = _row(lines, "M3")
        ok = next(s for s in m3 if s.text.strip() == "ok")
        fg, seg_bg = _fg_bg(ok.style)
        assert seg_bg == bg
        assert fg == readable(var["text-success"], bg)
        if contrast_ratio(var["text-success"], bg) >= MIN_CONTRAST:
            assert fg == var["text-success"]  # unchanged where the theme's own is readable
        # a meter with a failing check: its mark and id in the theme's error text colour
        m2 = _row(lines, "M2")
        mark = next(s for s in m2 if "\u2718" in s.text)
        assert _fg_bg(mark.style)[0] == readable(var["text-error"], bg)
        # offline: the state word on the theme's error colour
        off = _segment(lines, "offline")
        fg, seg_bg = _fg_bg(off.style)
        assert seg_bg == var["error"]
        assert contrast_ratio(fg, seg_bg) >= MIN_CONTRAST
        failing = _segment(lines, "failing")
        assert _fg_bg(failing.style)[0] == readable(var["text-error"], bg)


@pytest.mark.parametrize("theme", THEMES)
async def test_every_character_of_the_bench_screen_is_readable(theme):
    app = _app()
    async with app.run_test(size=(120, 40)) as pilot:
        app.theme = theme
        await _show(pilot)
        await pilot.pause()
        checked = 0
        for cls in (ReadingsGrid, ChecksPanel, StepSummary, StepDetail):
            widget = app.screen.query_one(cls)
            for line in _lines(widget):
                for seg in line:
                    if not seg.text.strip() or seg.style is None:
                        continue
                    fg, bg = _fg_bg(seg.style)
                    ratio = contrast_ratio(fg, bg)
                    # border lines are graphics (WCAG 2.1 §1.4.11, 3:1); the rest is text
                    lines_only = all("\u2500" <= ch <= "\u257f" for ch in seg.text.strip())
                    need = MIN_GRAPHIC_CONTRAST if lines_only else MIN_CONTRAST
                    assert ratio >= need, (
                        f"{theme}: {cls.__name__} {seg.text!r} {fg.hex} on {bg.hex}: {ratio:.2f}"
                    )
                    checked += 1
        assert checked > 100


async def test_a_new_theme_repaints_the_grid_and_the_panels():
    app = _app()
    async with app.run_test(size=(120, 40)) as pilot:
        app.theme = "textual-dark"
        await _show(pilot)
        grid = app.screen.query_one(ReadingsGrid)
        dark_bg = _fg_bg(_segment(_lines(grid), "M3").style)[1]
        app.theme = "textual-light"
        await pilot.pause()
        await pilot.pause()
        light = palette_for(BUILTIN_THEMES["textual-light"])
        assert _fg_bg(_segment(_lines(grid), "M3").style)[1] == light.background != dark_bg
        checks = app.screen.query_one(ChecksPanel)
        fail = _segment(_lines(checks), "FAIL")
        assert _fg_bg(fail.style)[0] == light.error


def test_wcag_contrast_ratio_of_reference_colours():
    # WCAG 2.1 definitions: black on white is 21:1, a colour on itself 1:1; #767676 on white
    # is the lightest grey that passes 4.5:1 (4.54:1, a figure widely cited with WCAG 2.x;
    # from memory)
    white, black = Color(255, 255, 255), Color(0, 0, 0)
    assert contrast_ratio(black, white) == pytest.approx(21.0)
    assert contrast_ratio(white, white) == pytest.approx(1.0)
    assert contrast_ratio(Color.parse("#767676"), white) == pytest.approx(4.54, abs=0.01)
    assert contrast_ratio(Color.parse("#777777"), white) < MIN_CONTRAST


@pytest.mark.parametrize("name", sorted(n for n, t in BUILTIN_THEMES.items() if not t.ansi))
def test_every_builtin_themes_palette_reads_on_its_background(name):
    pal = palette_for(BUILTIN_THEMES[name])
    for role in ("foreground", "ok", "warn", "error", "accent", "muted"):
        assert contrast_ratio(getattr(pal, role), pal.background) >= MIN_CONTRAST, role
    for role in ("ok", "warn", "error", "sim", "plain"):
        style = pal.badge(role)
        fg, bg = _fg_bg(style)
        assert contrast_ratio(fg, bg) >= MIN_CONTRAST, role
