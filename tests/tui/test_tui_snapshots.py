"""Snapshot tests of the main and help screens (pytest-textual-snapshot).

Deterministic: the demo profile, one noise-free simulated-bench snapshot with a fixed time, a
fixed step and check results, the poll worker off (``autopoll=False``). Regenerate with
``pytest tests/tui/test_tui_snapshots.py --snapshot-update`` and look at the SVGs.
"""

from __future__ import annotations

from support.console import show_still as _show
from support.console import still_app as _app


def test_main_screen_80x24(snap_compare):
    assert snap_compare(_app(), terminal_size=(80, 24), run_before=_show)


def test_main_screen_readings_view_80x24(snap_compare):
    assert snap_compare(_app(), terminal_size=(80, 24), run_before=_show, press=["2"])


def test_main_screen_120x40(snap_compare):
    assert snap_compare(_app(), terminal_size=(120, 40), run_before=_show)


def test_help_screen(snap_compare):
    assert snap_compare(_app(), terminal_size=(80, 24), run_before=_show, press=["f1"])


async def test_every_key_is_in_help_footer_map_and_command_palette():
    from tui.keys import KEYS
    from tui.screens.help import APP_KEYS, help_table

    app = _app()
    async with app.run_test(size=(80, 24)) as pilot:
        await _show(pilot)
        screen = app.screen
        titles = {c.title for c in app.get_system_commands(screen)}
        assert {k.label for k in KEYS} <= titles
        bound = {b.key for b in screen.BINDINGS}
        assert {k.key for k in KEYS} <= bound
        assert not bound & {"ctrl+m", "ctrl+i", "ctrl+h"}  # Enter, Tab, Backspace on old terminals
        # every key, the group titles and the keys that are not bench actions (palette, screenshot)
        assert help_table().row_count == len(KEYS) + 3 + len(APP_KEYS)
        # a palette command runs the same action as its key: "Units" cycles the unit mode
        units = next(c for c in app.get_system_commands(screen) if c.title == "Units")
        units.callback()
        assert screen.unit_mode == "network"
