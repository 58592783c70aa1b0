"""The console App: safety caution, operator and session, then the bench screen.

``run_console`` is what ``benchwalk demo`` (and ``run``/``resume``) call, lazily, so the core
never imports textual. The App only wires screens together; sessions come from a factory, so
tests hand in their own.
"""

from __future__ import annotations

import asyncio
import contextlib
import inspect
import signal
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

from textual.app import App, SystemCommand
from textual.binding import Binding
from textual.screen import Screen

from meas.errors import BenchwalkError
from meas.verdict import EXIT_STOPPED

from .bridge import Bridge
from .commands.headless import resume_command
from .keys import KEYS, QUIT, SCREENSHOT
from .screens.main import MainScreen
from .screens.safety import SafetyScreen
from .screens.start import StartChoice, StartScreen
from .user_settings import load_settings, remember_theme
from .widgets.palette import css_variables, palette_for

# (operator, resume session id or None) -> a session (or an awaitable of one)
SessionFactory = Callable[[str, str | None], Any]


class BenchwalkApp(App[int]):
    CSS_PATH = "console.tcss"
    TITLE = "benchwalk"
    BINDINGS = [
        Binding(QUIT, "quit", "Quit", priority=True, id="app.quit"),
        Binding(SCREENSHOT, "screenshot", "Screenshot", show=False, id="app.screenshot"),
    ]

    def __init__(
        self,
        session_factory: SessionFactory,
        *,
        bench_name: str = "",
        list_sessions: Callable[[], list[tuple[str, str]]] | None = None,
        operator: str | None = None,
        resume: str | None = None,
        skip_intro: bool = False,
        autopoll: bool = True,
        out_dir: Path | None = None,
        profile_path: Path | None = None,
    ) -> None:
        super().__init__()
        self.profile_path = profile_path  # the start screen's campaign analysis reads it
        # where Ctrl+S saves screenshots (None: textual's default, the downloads folder)
        self.screenshot_dir: Path | None = None
        self.session_factory = session_factory
        self.bench_name = bench_name
        self.list_sessions = list_sessions or (lambda: [])
        self.operator = operator or ""
        self.resume = resume
        self.skip_intro = skip_intro
        self.autopoll = autopoll
        self.out_dir = out_dir
        self.bridge: Bridge | None = None
        self.exit_message = ""
        self.verdict_line = ""
        self.stop_signal = ""

    def get_css_variables(self) -> dict[str, str]:
        """The theme's variables plus ``$bw-*``: its state colours made readable on its
        background (``tui.widgets.palette``); recomputed on every theme change."""
        variables = super().get_css_variables()
        return {**variables, **css_variables(palette_for(self.current_theme))}

    def action_screenshot(self, filename: str | None = None, path: str | None = None) -> None:
        """textual's screenshot (an SVG of the screen), into ``screenshot_dir`` when set."""
        folder = path or (str(self.screenshot_dir) if self.screenshot_dir else None)
        self.deliver_screenshot(filename, folder)

    # ------------------------------------------------------------------ start-up
    def on_mount(self) -> None:
        self._restore_theme()
        # SIGTERM and SIGHUP (a closed terminal) end the console as Ctrl+Q does: the stop is
        # journalled and the resume command printed (Ctrl+C is a key inside the console)
        with contextlib.suppress(NotImplementedError, RuntimeError, ValueError):
            loop = asyncio.get_running_loop()
            for sig in (signal.SIGTERM, signal.SIGHUP):
                loop.add_signal_handler(sig, self._on_stop_signal, sig)
        if self.skip_intro:
            self.run_worker(self._open(StartChoice(self.operator, self.resume)), exclusive=True)
        else:
            self.push_screen(SafetyScreen(), self._after_safety)

    def _restore_theme(self) -> None:
        """The theme the person chose last time; every later choice is saved (tui.user_settings)."""
        saved = load_settings().theme
        if saved in self.available_themes:
            self.theme = saved
        self.theme_changed_signal.subscribe(self, lambda theme: remember_theme(theme.name))

    def _after_safety(self, ok: bool | None) -> None:
        if not ok:
            self.exit(1)
            return
        try:
            sessions = self.list_sessions()
        except BenchwalkError as exc:
            self.notify(str(exc), severity="error")
            sessions = []
        highlight = 0
        if self.resume:  # asked for on the command line: listed first after "new", highlighted
            sessions = [(self.resume, "(asked for)")] + [x for x in sessions if x[0] != self.resume]
            highlight = 1
        self.push_screen(
            StartScreen(
                self.bench_name,
                sessions,
                self.operator,
                highlight=highlight,
                profile_path=self.profile_path,
            )
        )

    def on_start_screen_chosen(self, message: StartScreen.Chosen) -> None:
        self.run_worker(self._open(message.choice), exclusive=True, group="open")

    async def _open(self, choice: StartChoice) -> None:
        try:
            session = self.session_factory(choice.operator, choice.resume)
            if inspect.isawaitable(session):
                session = await session
        except BenchwalkError as exc:
            self.exit_message = str(exc)
            self.exit(2)
            return
        if hasattr(session, "cycle"):  # already console-shaped (benchmarks, replays)
            self.bridge = session
        else:
            self.bridge = Bridge(session, operator=choice.operator, out_dir=self.out_dir)
        self.operator = choice.operator
        while len(self.screen_stack) > 1:
            self.pop_screen()
        await self.push_screen(MainScreen(self.bridge, autopoll=self.autopoll))

    @property
    def main_screen(self) -> MainScreen | None:
        for s in self.screen_stack:
            if isinstance(s, MainScreen):
                return s
        return None

    # ------------------------------------------------------------------ quit keeps the session
    def _on_stop_signal(self, sig: signal.Signals) -> None:
        self.stop_signal = sig.name
        self.run_worker(self.action_quit(), group="stop-signal")

    def session_exit(self) -> tuple[int, str]:
        """(exit code, verdict line) of the open session: the verdict's code once the sequence
        is finished, ``EXIT_STOPPED`` (resumable) before that; (0, "") with no session."""
        runner = getattr(self.bridge, "runner", None) if self.bridge is not None else None
        if runner is None or not hasattr(runner, "verdict"):
            return 0, ""
        verdict = runner.verdict()
        return (verdict.exit_code if runner.finished else EXIT_STOPPED), verdict.line

    async def action_quit(self) -> None:
        main = self.main_screen
        if main is not None:
            await main.stop_polling()
        code, self.verdict_line = self.session_exit()
        if self.bridge is not None:
            runner = getattr(self.bridge, "runner", None)
            if runner is not None and not runner.done:
                why = (
                    f"interrupted by {self.stop_signal}"
                    if self.stop_signal
                    else "the console was closed"
                )
                runner.stop(why)  # journalled; resume continues here
            try:
                await self.bridge.close()
            except BenchwalkError as exc:
                self.exit_message = str(exc)
        self.exit(code, return_code=code)  # run() returns it; run_console exits with it

    # ------------------------------------------------------------------ command palette
    def get_system_commands(self, screen: Screen) -> Iterable[SystemCommand]:
        yield from super().get_system_commands(screen)
        if isinstance(screen, MainScreen):
            for k in KEYS:
                name, _, arg = k.action.partition("(")
                method = getattr(screen, f"action_{name}")
                if arg:
                    value = arg.rstrip(")").strip("'\"")
                    yield SystemCommand(f"{k.label}", k.help, lambda m=method, v=value: m(v))
                else:
                    yield SystemCommand(k.label, k.help, method)


def run_console(
    profile_path: str | None = None,
    *,
    faults: list[str] | tuple[str, ...] = (),
    seed: int | None = None,
    operator: str | None = None,
    resume: str | None = None,
    sessions_dir: str | Path | None = None,
    out: str | Path | None = None,
    allow_changed_profile: bool = False,
    simulate: bool = True,
    as_built_seed: str | None = None,
    model_errors: tuple[str, ...] = (),
) -> int:
    """Run the console on a profile (``simulate``: on the simulated bench); returns the exit code."""
    from .launch import make_factory  # the session wiring; kept apart so tests can pass their own

    sdir = Path(sessions_dir) if sessions_dir else None
    factory, bench_name, lister = make_factory(
        profile_path,
        faults=faults,
        seed=seed,
        sessions_dir=sdir,
        simulate=simulate,
        allow_changed_profile=allow_changed_profile,
        as_built_seed=as_built_seed,
        model_errors=model_errors,
    )
    app = BenchwalkApp(
        factory,
        bench_name=bench_name,
        list_sessions=lister,
        operator=operator,
        resume=resume,
        out_dir=Path(out) if out else None,
        profile_path=Path(profile_path) if profile_path else None,
    )
    code = app.run()
    if app.exit_message:
        raise BenchwalkError(app.exit_message)
    if app.bridge is not None:
        sid = app.bridge.session.session_id
        if app.verdict_line:
            print(f"Session {sid}: {app.verdict_line}")
        if code == EXIT_STOPPED:
            print(
                f"Session {sid} saved; continue it with: "
                + resume_command(sid, sdir, headless=False)
            )
        if app.bridge.exported:
            print(f"Dataset: {app.bridge.exported}")
            if app.bridge.report:
                print(f"Report: {app.bridge.report}")
    return int(code or 0)
