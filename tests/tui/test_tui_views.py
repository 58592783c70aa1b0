"""The help, screenshot, coverage and start-screen campaign views, driven with the pilot.

The coverage view runs on the compressed demo (``support.console.fast_demo``: the demo's own
steps, switches, maps and meters on the simulated bench, real Modbus on loopback) and is
compared with ``meas.estimate`` run on the very captures the view used; the campaign summary
is the demo's, with and without the steps that load the tie (CALIBRATION_NOTES.md §4.8 [C]).
"""

from __future__ import annotations

import re
from dataclasses import replace
from pathlib import Path

import pytest
from support.console import fast_demo, make_app, start, tap, until
from support.console import show_still as _show
from support.console import still_app as _app
from textual.widgets import Static

from meas.estimate import Estimator
from meas.profile import load_profile
from tui.app import BenchwalkApp
from tui.keys import ARM_KEY, KEYS, SEND_KEY, display_keys
from tui.screens.coverage import CoverageScreen
from tui.screens.help import HelpScreen
from tui.screens.main import MainScreen
from tui.screens.remote import RemoteConfirm
from tui.screens.safety import SafetyScreen
from tui.screens.start import StartScreen

DEMO_DIR = Path(__file__).resolve().parents[2] / "profiles_demo"
TIE_STEPS = ("close-tie", "transfer-lb2", "restore-lateral")


def _plain(screen, selector: str) -> str:
    content = screen.query_one(selector, Static).content
    return getattr(content, "plain", str(content))


async def test_question_mark_opens_help_listing_every_key_the_screenshot_and_the_theme_picker():
    app = _app()
    async with app.run_test(size=(100, 30)) as pilot:
        await _show(pilot)
        await pilot.press("question_mark")
        assert isinstance(app.screen, HelpScreen)
        table = app.screen.query_one("#help-keys", Static).content
        rows = {
            (str(k), str(w))
            for k, w in zip(table.columns[0].cells, table.columns[1].cells, strict=True)
        }
        keys = {k for k, _ in rows}
        assert {display_keys(k) for k in KEYS} <= keys
        shot = next(w for k, w in rows if k == "Ctrl+S")
        assert "screenshot" in shot.lower()
        assert any(k == "Ctrl+P" and "Theme" in w for k, w in rows)
        assert any(k == "Ctrl+Q" for k, _ in rows)
        # the screenshot key is bound on the App (every screen), and ? toggles the help
        assert any(b.key == "ctrl+s" and b.action == "screenshot" for b in app.BINDINGS)
        await pilot.press("question_mark")
        assert isinstance(app.screen, MainScreen)


async def test_ctrl_s_saves_a_screenshot_of_the_screen(tmp_path):
    app = _app()
    async with app.run_test(size=(100, 30)) as pilot:
        await _show(pilot)
        app.screenshot_dir = tmp_path
        await pilot.press("ctrl+s")
        await until(pilot, lambda: list(tmp_path.glob("*.svg")), 10, "screenshot file")
        svg = next(tmp_path.glob("*.svg")).read_text()
        assert svg.startswith("<svg") and "lateral" in svg  # the step title, as drawn


async def _walk_until(pilot, app, done) -> None:
    """Walk the fast demo by keys (as a technician would) until ``done()``."""
    runner = app.bridge.runner
    for _ in range(40):
        if done():
            return
        v = runner.view()
        seen, a = app.bridge.transitions, v.action
        if a == "confirm_operation":
            await tap(pilot, "o")
        elif a == "capture":
            await tap(pilot, "c")
        elif a == "request_remote":
            await tap(pilot, "r")
            await until(pilot, lambda: isinstance(app.screen, RemoteConfirm), 5, "remote modal")
            await tap(pilot, ARM_KEY, SEND_KEY)
        elif a == "accept":
            await tap(pilot, "a")
        await until(
            pilot,
            lambda s=seen, a=a: app.bridge.transitions > s or runner.view().action != a or done(),
            15,
            f"progress after {a} at {v.step.id if v.step else '-'}",
        )
    raise AssertionError(f"walk stopped with captures of {list(app.bridge._captured)}")


def _captured(app, step: str) -> bool:
    return bool(app.bridge._captured.get(step))


@pytest.mark.slow  # walks steps on the simulated bench, or a second campaign analysis
async def test_coverage_view_shows_the_estimators_coverage_and_gains_without_stopping_polling(
    tmp_path,
):
    app = make_app(tmp_path, noise=False)
    async with app.run_test(size=(100, 30)) as pilot:
        main = await start(pilot, app)
        await _walk_until(pilot, app, lambda: _captured(app, "energize-trunk-1"))
        await tap(pilot, "k")
        await until(pilot, lambda: isinstance(app.screen, CoverageScreen), 5, "coverage view")
        view = app.screen
        frames = main.frames_shown
        await until(pilot, lambda: view.final, 90, "the coverage estimate")
        assert not view.error, view.error
        e = view.estimate
        assert e is not None and e.converged, e
        text = _plain(view, "#coverage-body")
        assert re.search(r"\d+ captured step\(s\) of this console run", text)
        # the same figures as the estimator gives on the same captures (public API)
        assert len(view.used) >= 2
        again = Estimator(app.bridge.profile, exact=False).run(view.used)
        if again.findings:  # the view then shows the exact estimate (refits without the meter)
            again = Estimator(app.bridge.profile, exact=True).run(view.used)
        rows = {line.split()[0]: line for line in text.splitlines() if re.match(r"M\d ", line)}
        assert set(rows) == {m.id for m in app.bridge.profile.meters}
        for m in rows:
            if m not in again.meters:  # no readings of it in these captures
                assert "no readings in these steps" in rows[m]
                continue
            vt = again.coverage_of(m, "vt_ratio")
            assert vt is not None
            want = f"\u00b1{vt.min_factor * 100:.1f} %" if vt.detectable else "no"
            assert rows[m].split()[1] == want.split()[0], (m, rows[m], vt)
            g = again.gain(m, "voltage")
            if g is not None and g.std < 0.9 * g.prior_std:
                assert f"{g.value:.3f}\u00b1{g.std:.3f}" in rows[m]
        assert sum(1 for c in again.coverage if c.detectable) > 0
        assert len(again.meters) >= 2
        # every undetectable error kind is listed with the estimator's reason
        for c in again.coverage:
            if not c.detectable:
                assert c.reason.partition(": ")[2] in text
        # the poll loop kept painting frames while the estimate ran and the view is open
        await until(pilot, lambda: main.frames_shown > frames + 2, 10, "frames while open")
        await tap(pilot, "escape")
        await until(pilot, lambda: isinstance(app.screen, MainScreen), 5, "back to the bench")


@pytest.mark.slow  # walks steps on the simulated bench, or a second campaign analysis
async def test_coverage_view_names_a_wrong_vt_ratio_on_its_meter(tmp_path):
    # vt-ratio:M2:1.1 is the test's own injected fault: M2's voltages read 10 % high. Once the
    # trunk is energized M1, M2 and M3 all see bus voltages the model ties together.
    app = make_app(tmp_path, faults=("vt-ratio:M2:1.1",), noise=False)
    async with app.run_test(size=(100, 30)) as pilot:
        await start(pilot, app)
        await _walk_until(pilot, app, lambda: _captured(app, "energize-trunk-1"))
        await tap(pilot, "k")
        await until(pilot, lambda: isinstance(app.screen, CoverageScreen), 5, "coverage view")
        view = app.screen
        await until(pilot, lambda: view.runs >= 1, 60, "the first coverage estimate")
        # the linearized estimate names the fault first; the exact one follows on its own
        assert view.estimate.findings
        await until(pilot, lambda: view.final, 90, "the exact coverage estimate")
        assert view.runs == 2
        text = _plain(view, "#coverage-body")
        vt = view.estimate.coverage_of("M2", "vt_ratio")
        assert vt is not None and vt.detectable
        g = view.estimate.gain("M2", "voltage")
        assert g is not None and g.value > 1.03
        row = next(x for x in text.splitlines() if x.startswith("M2 "))
        assert f"{g.value:.3f}\u00b1{g.std:.3f} !" in row
        named = [f for f in view.estimate.findings if f.meters == ("M2",)]
        assert named and "VT ratio" in named[0].sentence
        assert named[0].sentence in text
        # one fault, one meter: no other meter's gain is shown beyond its class
        others = [x for x in text.splitlines() if re.match(r"M[13-8] ", x)]
        assert others and not any("!" in x for x in others), others


def _without_tie(tmp: Path) -> Path:
    """The demo profile with its sequence less the steps that load the tie."""
    seq = (DEMO_DIR / "feeder_bench.sequence.toml").read_text()
    head, *blocks = seq.split("[[step]]")
    keep = [b for b in blocks if not any(f'id = "{s}"' in b for s in TIE_STEPS)]
    (tmp / "feeder_bench.sequence.toml").write_text(head + "".join("[[step]]" + b for b in keep))
    out = tmp / "feeder_bench.toml"
    out.write_text((DEMO_DIR / "feeder_bench.toml").read_text())
    assert {s.id for s in load_profile(out).steps}.isdisjoint(TIE_STEPS)
    return out


def _plain_if_mounted(screen) -> str:
    """The campaign box's text, or "" while the screen is still mounting its children."""
    from textual.css.query import NoMatches

    try:
        return _plain(screen, "#campaign")
    except NoMatches:
        return ""


async def _campaign_text(tmp: Path, profile: Path) -> tuple[str, bool]:
    app = BenchwalkApp(lambda op, r: None, bench_name="demo", profile_path=profile)
    async with app.run_test(size=(100, 30)) as pilot:
        await until(pilot, lambda: isinstance(app.screen, SafetyScreen), 15, "safety screen")
        await tap(pilot, "Y")  # Caps Lock on: the capital acknowledges too
        await until(pilot, lambda: isinstance(app.screen, StartScreen), 15, "start screen")
        screen = app.screen
        await until(
            pilot,
            lambda: screen.plan is not None or "working out" in _plain_if_mounted(screen),
            15,
            "the campaign box",
        )
        at_once = screen.plan is None  # the screen is up and usable while the analysis runs
        await until(
            pilot,
            lambda: app.focused is not None and app.focused.id == "operator",
            15,
            "the name field focused",
        )
        await until(pilot, lambda: screen.plan is not None or screen.plan_error, 90, "campaign")
        assert not screen.plan_error, screen.plan_error
        return _plain(screen, "#campaign"), at_once


async def test_start_screen_shows_the_tie_prior_only_and_proposes_a_step_that_loads_it(tmp_path):
    text, at_once = await _campaign_text(tmp_path, _without_tie(tmp_path))
    assert at_once  # the screen opened before the analysis finished
    prior = next(x for x in text.splitlines() if x.startswith("? prior only:"))
    assert "L4.r_ohm" in prior and "L4.x_ohm" in prior
    assert re.search(r"to measure L4\.\w+, add a step after step [\w-]+: .*close TIE", text), text


@pytest.mark.slow  # walks steps on the simulated bench, or a second campaign analysis
async def test_start_screen_of_the_demo_as_written_measures_the_tie(tmp_path):
    text, _ = await _campaign_text(tmp_path, fast_demo(tmp_path))
    assert "L4.r_ohm" not in text
    assert re.search(r"prior only: .*L1\.b_us", text)  # LV line charging never is (§0.3 [C])
    assert "most informative added step: after step" in text


async def test_a_runner_complaint_leaves_the_notice_line_once_it_no_longer_holds():
    app = _app()
    async with app.run_test(size=(100, 30)) as pilot:
        await _show(pilot)
        main = app.screen
        still = app.bridge.still
        said = "status of SW3 not read: captures held until it is"
        main.show_frame(replace(still, step=replace(still.step, message=said)))
        assert said in _plain(main, "#notice")
        main.show_frame(replace(still, step=replace(still.step, message="")))
        assert _plain(main, "#notice") == ""
        # a notice of the console's own (not the runner's complaint) stays
        main.notice("values in per-unit")
        main.show_frame(replace(still, step=replace(still.step, message="")))
        assert _plain(main, "#notice") == "values in per-unit"
