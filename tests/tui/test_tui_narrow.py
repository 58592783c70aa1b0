"""The console at 80x24 (the smallest terminal it promises, docs/console.md): nothing is cut
mid-word, wrapped into the next line or pushed out of sight.

Every check reads the screen as drawn: textual's ``App.export_screenshot`` (an SVG), turned
back into one string per terminal row. The frame is the fixed console-shaped one of
``support.console.StillFeed`` (demo profile, simulated-bench snapshot), with the step state
and title the demo walk shows (its step 10 title; its review state allows accept, retake, skip
and note).
"""

from __future__ import annotations

import html
import re
from dataclasses import replace

import numpy as np
import pytest
from support.console import StillFeed, show_still, until

from meas.sim.meters import snapshot_from_sim
from meas.verdict import StepRecord, session_verdict
from tui.app import BenchwalkApp
from tui.keys import KEYS
from tui.screens.coverage import CoverageScreen
from tui.screens.help import HelpScreen
from tui.screens.main import MainScreen
from tui.screens.summary import WalkSummary
from tui.widgets.step import StepDetail, step_detail
from tui.widgets.trend import TREND_KEYS, TREND_LABEL, trend_text

# the demo's step 10 (profiles_demo/feeder_bench.sequence.toml): 89 cells with the bench badge
LONG_TITLE = "Open the lateral isolator SW3: load bank 2 onto the tie"
REVIEW = frozenset({"accept", "retake", "skip", "note", "stop"})  # the demo's review state

# rich's SVG export (textual's screenshot): one <text> per run of a row, placed at x pixels
_TEXT = re.compile(
    r'<text class="terminal-[0-9-]*r\d+" x="([0-9.]+)" y="[0-9.]+" textLength="[0-9.]+" '
    r'clip-path="url\(#terminal-[0-9-]*line-(\d+)\)">([^<]*)</text>'
)
_CLIP = re.compile(r'<clipPath id="terminal-[0-9-]*clip-terminal">\s*<rect [^>]*width="([0-9.]+)"')


def screen_lines(app) -> list[str]:
    """The screen as drawn, one string per row (trailing blanks dropped)."""
    width, height = app.size
    svg = app.export_screenshot()
    match = _CLIP.search(svg)
    assert match, "the screenshot's layout is not the one this reader knows"
    cell = float(match.group(1)) / width  # the SVG's width of one terminal cell
    rows = [[" "] * width for _ in range(height)]
    for x, line, text in _TEXT.findall(svg):
        col = round(float(x) / cell)
        for i, ch in enumerate(html.unescape(text).replace("\xa0", " ")):
            if col + i < width:
                rows[int(line)][col + i] = ch
    return ["".join(r).rstrip() for r in rows]


class _Feed(StillFeed):
    """The still frame with another step state or title, and one capture for the coverage."""

    def __init__(self, **step) -> None:
        super().__init__()
        self.still = replace(self.still, step=replace(self.still.step, **step))
        sw = {s.id: s.normal for s in self.profile.switches}
        healthy = snapshot_from_sim(
            self.profile, sw, (), np.random.default_rng(3), 7, noise=False, t_mono=50.0
        )
        self.captures = [[healthy]]

    def captures_so_far(self):
        return self.captures, "one capture of the healthy bench"


def _app(**step) -> BenchwalkApp:
    feed = _Feed(**step)
    return BenchwalkApp(lambda op, r: feed, skip_intro=True, operator="A. Tester", autopoll=False)


@pytest.mark.parametrize("width", [60, 80, 100, 120])
async def test_the_footer_never_ends_in_a_cut_word_and_always_shows_help_and_quit(width):
    app = _app(allowed=REVIEW)
    async with app.run_test(size=(width, 24)) as pilot:
        await show_still(pilot)
        footer = screen_lines(app)[-1]
        # help and quit, whole, at the right end (where a too-long footer was cut)
        assert footer.endswith("? Help  ^q Quit"), footer
        assert len(footer) <= width
        # the step's keys come before the views: all four from 60 columns on
        for item in ("a Accept", "x Retake", "s Skip", "n Note"):
            assert f" {item} " in footer + " ", (item, footer)
        views = [f" {k.key} {k.label} " for k in KEYS if k.footer and k.group == "view"]
        shown = [v for v in views if v in footer + " "]
        if width >= 100:  # room for every key
            assert shown == views, footer
        else:  # fewer, never a part of one: each view key is there whole or not at all
            assert len(shown) < len(views)
            for v in views:
                key = v.split()[0]
                assert v in footer + " " or f" {key} " not in footer + " ", (v, footer)


async def test_a_view_key_dropped_from_the_80_column_footer_still_works():
    app = _app(allowed=REVIEW)
    async with app.run_test(size=(80, 24)) as pilot:
        await show_still(pilot)
        assert " u Units " not in screen_lines(app)[-1]
        await pilot.press("u")
        assert app.screen.unit_mode == "network"
        assert "U=network scale" in screen_lines(app)[4]  # the tabs line says so


async def test_a_long_step_title_stays_on_one_line_and_the_step_view_shows_it_whole():
    app = _app(title=LONG_TITLE, simulated=True)
    async with app.run_test(size=(80, 24)) as pilot:
        await show_still(pilot)
        lines = screen_lines(app)
        assert lines[0].startswith(" SIMULATED BENCH   Step 4 of 15  Open the lateral")
        assert lines[0].endswith("\u2026") and len(lines[0]) == 80, lines[0]
        # the state line is the next row, not the rest of the title
        assert lines[1].startswith(" \u2718 INCONSISTENT   state: reviewing"), lines[1]
        assert lines[2].startswith("\u25b6 NEXT"), lines[2]
        assert LONG_TITLE in lines  # the step view: the title whole, on its own line
    app = _app(title=LONG_TITLE, simulated=True)
    async with app.run_test(size=(100, 30)) as pilot:
        await show_still(pilot)
        lines = screen_lines(app)
        assert lines[0].endswith(LONG_TITLE)
        detail = app.screen.query_one(StepDetail).content.plain
        assert LONG_TITLE not in detail  # not twice when the headline holds it


async def test_help_at_80x24_keeps_its_close_keys_in_sight_while_the_table_scrolls():
    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await show_still(pilot)
        await pilot.press("f1")
        assert isinstance(app.screen, HelpScreen)
        lines = screen_lines(app)
        assert any("Esc or ? = close" in line for line in lines), "\n".join(lines)
        # the table is longer than the screen: its last row is out of sight until scrolled
        assert not any("Quit. The session stays" in line for line in lines)
        await pilot.press("pagedown", "pagedown", "pagedown")
        lines = screen_lines(app)
        assert any("Esc or ? = close" in line for line in lines)
        # the last row of the table is reached by scrolling
        assert any("Quit. The session stays" in line for line in lines), "\n".join(lines)


async def test_the_end_of_walk_summary_at_80x24_shows_its_verdict_and_keys_with_15_steps():
    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await show_still(pilot)
        records = [StepRecord(s.id, "skipped", "test walk") for s in app.bridge.profile.steps]
        assert len(records) == 15
        verdict = session_verdict(records)
        await app.push_screen(WalkSummary(records, verdict.line, True))
        await pilot.pause()
        text = "\n".join(screen_lines(app))
        assert f"VERDICT {verdict.line[:40]}" in text, text
        assert "Enter = back to the bench" in text, text


async def test_the_coverage_legend_fits_the_80_column_view_without_a_wrapped_word():
    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await show_still(pilot)
        await pilot.press("k")
        view = app.screen
        assert isinstance(view, CoverageScreen)
        await until(pilot, lambda: view.runs >= 1 and view.final, 60, "the estimate")
        await pilot.pause()
        lines = screen_lines(app)
        text = "\n".join(lines)
        assert any(
            "\u00b1x % smallest ratio error detected  no / . not detectable" in s for s in lines
        ), text
        assert any("! gain beyond class" in s for s in lines), text
        assert isinstance(app.screen_stack[-2], MainScreen)


def test_the_step_view_names_the_remote_key_as_the_footer_and_help_show_it():
    step = replace(StillFeed().still.step, remote_switches=("CB1",))
    assert "remote operation available: CB1 (press R)" in step_detail(step).plain.splitlines()


def test_the_trend_title_names_the_quantity_in_words_and_fits_its_pane():
    feed = StillFeed()
    block = feed.still.snapshot.meters["M1"]
    for key in TREND_KEYS:
        samples = [(50.0, block.get(key))]
        first = trend_text(feed.profile, "M1", key, samples, 1.5, "bench").plain.splitlines()[0]
        assert first == f"trend M1 {TREND_LABEL[key]}  (T = next)"
        assert len(first) <= 36  # the trend pane's text width in the wide layout (120x40)
    assert TREND_LABEL["p.T"] == "P total"  # ".T" is the three-phase total, not the T key
