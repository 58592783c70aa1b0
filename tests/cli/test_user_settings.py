"""Console settings persist per user: the theme chosen in one run is the theme of the next."""

from __future__ import annotations

import asyncio
import time

from tui.app import BenchwalkApp
from tui.user_settings import Settings, load_settings, save_settings, settings_path


def test_settings_round_trip_and_defaults_on_a_bad_file(tmp_path):
    path = tmp_path / "s.toml"
    assert load_settings(path) == Settings()  # missing file: defaults
    assert save_settings(Settings(theme="nord"), path)
    assert load_settings(path).theme == "nord"
    path.write_text("theme = [unclosed")
    assert load_settings(path) == Settings()


async def _until(cond, timeout: float = 10.0) -> None:
    deadline = time.monotonic() + timeout
    while not cond():
        assert time.monotonic() < deadline, "condition not reached"
        await asyncio.sleep(0.02)


async def test_console_restores_and_saves_the_theme():
    path = settings_path()  # $BENCHWALK_CONFIG, the test's own (tests/conftest.py)
    save_settings(Settings(theme="textual-light"), path)
    app = BenchwalkApp(lambda operator, resume: None)
    async with app.run_test() as pilot:
        assert app.theme == "textual-light"
        app.theme = "nord"
        await pilot.pause()
        await _until(lambda: load_settings(path).theme == "nord")
