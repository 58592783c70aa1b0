"""``Session``: one session's parts, built by ``new`` or ``resume``, run by ``views()``.

The package docstring (``meas.session``) says what is journalled and how the simulated bench
keeps time.
"""

from __future__ import annotations

import asyncio
import contextlib
import time
from collections.abc import AsyncIterator, Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..journal.sessions import resolve_session
from ..journal.store import Journal
from ..model import Profile, SwitchState
from ..profile import load_profile
from ..walk.runner import Runner
from ..walk.sequence import validate_sequence
from ..walk.states import StepOutcome
from ..walk.view import RunnerView
from .bench_clock import BenchDriver, bench_driver
from .settle import settle_factory
from .start import (
    as_built,
    bench_start_state,
    create_journal,
    prior_outcomes,
    resume_start,
    start_bench,
)

if TYPE_CHECKING:  # imported where used: a session loads only the parts it runs
    from ..poll.control import SwitchControl
    from ..poll.cycle import Poller
    from ..sim.bench import SimulatedBench


class Session:
    """Owns the parts of one session; build with ``new`` or ``resume``, end with ``close``."""

    def __init__(
        self,
        profile: Profile,
        journal: Journal,
        poller: Poller,
        runner: Runner,
        bench: SimulatedBench | None = None,
        control: SwitchControl | None = None,
        driver: BenchDriver | None = None,
    ) -> None:
        self.profile = profile
        self.journal = journal
        self.poller = poller
        self.runner = runner
        self.bench = bench
        self.control = control
        self.driver = driver  # the simulated bench's clock, advanced by the poll cycles
        self._closed = False
        self._feed: asyncio.Task[None] | None = None  # polls and ticks the runner for views()

    @property
    def session_id(self) -> str:
        return self.journal.session_id

    @property
    def path(self) -> Path:
        return self.journal.path

    # ------------------------------------------------------------------ building

    @classmethod
    async def new(
        cls,
        profile_path: str | Path,
        operator: str,
        *,
        sessions_dir: Path | None = None,
        session_id: str | None = None,
        simulate: bool = False,
        faults: Sequence[str] = (),
        seed: int | None = None,
        noise: bool = True,
        on_saved: Callable[[int, str, str], None] | None = None,
        live_every_s: float = 1.0,
        live_checks: bool = True,
        as_built_seed: int | str | None = None,
        model_errors: Sequence[str] = (),
        out_dir: Path | None = None,
    ) -> Session:
        """Start a new session (and, for a demo, the simulated bench) from a profile file.

        ``as_built_seed`` and ``model_errors`` run the simulated bench on a true network off
        the nameplate (``meas.sim.as_built``); ``out_dir`` is where the dataset and report
        will go. Both are checked now, before anything is measured.
        """
        profile = load_profile(profile_path)
        validate_sequence(profile)
        built = as_built(profile, simulate, as_built_seed, model_errors)
        if out_dir is not None:
            from ..dataset.outputs import check_output_folder

            check_output_folder(Path(out_dir))
        meta: dict[str, Any] = {"simulated": simulate, "faults": list(faults), "seed": seed}
        meta["noise"] = noise
        if built is not None:  # the true network the simulated bench runs
            meta["as_built"] = built.meta(model_errors)
        bench, live_profile = None, profile
        if simulate:
            bench, live_profile = await start_bench(profile, faults, seed, noise, built)
            for sw, state in bench_start_state(profile, 0).items():
                bench.operate_by_hand(sw, state)
        try:
            journal = create_journal(profile, operator, session_id, sessions_dir, meta)
            sid = journal.session_id
        except BaseException:
            if bench is not None:
                await bench.stop()
            raise
        journal.record_event(
            "session_started", f"session {sid} started", operator=operator, data=meta
        )
        return await cls._assemble(
            live_profile, journal, operator, 0, bench, on_saved, live_every_s, live_checks, {}
        )

    @classmethod
    async def resume(
        cls,
        session: str | Path,
        *,
        allow_changed_profile: bool = False,
        sessions_dir: Path | None = None,
        operator: str | None = None,
        profile_path: str | Path | None = None,
        on_saved: Callable[[int, str, str], None] | None = None,
        live_every_s: float = 1.0,
        live_checks: bool = True,
        out_dir: Path | None = None,
    ) -> Session:
        """Continue a session at the first step not yet accepted or skipped.

        The profile is read again from its file; when its sha256 differs from the one in
        the journal the resume is refused unless ``allow_changed_profile`` (and recorded).
        """
        journal = Journal.open(resolve_session(session, sessions_dir), for_writing=True)
        try:
            if out_dir is not None:
                from ..dataset.outputs import check_output_folder

                check_output_folder(Path(out_dir), journal.path, journal.session_id)
            profile, index, point = resume_start(
                journal, profile_path, allow_changed_profile, operator
            )
            op = operator or journal.operator
            meta = journal.meta
            bench, live_profile = None, profile
            if meta.get("simulated"):
                from ..sim.as_built import from_meta

                built = from_meta(profile, meta)  # the recorded true network, if any
                bench, live_profile = await start_bench(
                    profile,
                    meta.get("faults", ()),
                    meta.get("seed"),
                    meta.get("noise", True),
                    built,
                )
                for sid, state in bench_start_state(profile, index).items():
                    bench.operate_by_hand(sid, state)
            journal.record_event(
                "session_resumed", f"resumed at step {point}", step_id=point, operator=op
            )
        except BaseException:
            journal.close()
            raise
        return await cls._assemble(
            live_profile,
            journal,
            op,
            index,
            bench,
            on_saved,
            live_every_s,
            live_checks,
            prior_outcomes(journal, profile),
        )

    @classmethod
    async def _assemble(
        cls,
        profile: Profile,
        journal: Journal,
        operator: str,
        index: int,
        bench: SimulatedBench | None,
        on_saved: Callable[[int, str, str], None] | None,
        live_every_s: float,
        live_checks: bool,
        prior: dict[str, StepOutcome],
    ) -> Session:
        from ..checks import CheckEngine
        from ..poll.control import SwitchControl
        from ..poll.cycle import Poller

        driver = bench_driver(bench, profile.poll.interval_s)
        poller = Poller(profile, before_cycle=driver.before_cycle if driver else None)
        try:
            await poller.start()
            ident = await poller.identify()  # text registers: serial numbers, firmware
            if ident:
                journal.record_event(
                    "meters_identified",
                    "identification read from " + ", ".join(ident),
                    operator=operator,
                    data=ident,
                )
            control = None
            if profile.control.enabled:
                control = SwitchControl(profile, poller)
                if driver is not None:
                    control.clock, control.wait = driver.clock, driver.wait
            runner = Runner(
                profile,
                journal,
                checks=CheckEngine(profile).run,
                settle_factory=settle_factory(profile),
                control=control,
                operator=operator,
                start_index=index,
                live_every_s=live_every_s,
                live_checks=live_checks,
                on_saved=on_saved,
                prior_outcomes=prior,
                resumed=bool(journal.step_history()),
            )
        except BaseException:
            with contextlib.suppress(Exception):
                await poller.close()
            if bench is not None:
                await bench.stop()
            journal.close()
            raise
        return cls(profile, journal, poller, runner, bench, control, driver)

    # ------------------------------------------------------------------ running

    def would_set_by_hand(self, view: RunnerView, command: str) -> list[tuple[str, SwitchState]]:
        """What a hand at the simulated bench sets before ``command`` (none on a real bench)."""
        if self.bench is None:
            return []
        from ..sim.hands import to_set_by_hand

        return to_set_by_hand(view, command)

    def set_by_hand(self, view: RunnerView, command: str) -> list[tuple[str, SwitchState]]:
        """On the simulated bench, set by hand what ``command`` needs (the one rule, in
        ``meas.sim.hands``, for the console and the headless demo alike); returns what was set."""
        if self.bench is None:
            return []
        from ..sim.hands import set_by_hand

        return set_by_hand(view, self.bench, command)

    async def views(self) -> AsyncIterator[RunnerView]:
        """Poll, feed the runner, yield its picture; ends when the sequence is done.

        Polling, checks and journalling run in a task of their own: a caller that waits
        for a person (a prompt in headless mode) between two views never pauses them. A
        slow caller gets the newest picture; the runner itself sees every snapshot.
        """
        yield self.runner.view()
        if self.runner.done:
            return
        await self._stop_feed()  # an earlier views() left unfinished: one feeder at a time
        if self.driver is not None:
            async for view in self._lockstep_views(self.driver):
                yield view
            return
        ticked = asyncio.Event()  # set after every tick: the caller's cue for a new picture

        async def feed() -> None:
            async for snap in self.poller.run(self.profile.poll.interval_s):
                await self.runner.tick(snap)
                ticked.set()
                if self.runner.done:
                    return

        self._feed = feeder = asyncio.create_task(feed(), name="session poll and journal")
        try:
            while True:
                cue = asyncio.ensure_future(ticked.wait())
                await asyncio.wait({cue, feeder}, return_when=asyncio.FIRST_COMPLETED)
                if not cue.done():
                    cue.cancel()
                    feeder.result()  # the feed failed (a journal write, say): raise it here
                    if not ticked.is_set():
                        return
                ticked.clear()
                # the picture now, not when the tick ended: the caller's own commands since
                # then are in it
                yield self.runner.view()
                if self.runner.done:
                    return
        finally:
            await self._stop_feed()

    async def _lockstep_views(self, driver: BenchDriver) -> AsyncIterator[RunnerView]:
        """``views()`` on the simulated bench: one cycle (poll, tick) between two pictures,
        none while the caller acts, and whole cycles while a remote command is verified.

        The technician there is simulated and never waits for a person, so the lockstep never
        holds polling for a prompt. Cycles keep the poll interval on the wall clock (the
        simulated time then stays beside the real one; an overrun delays, never bursts).
        """
        interval = self.profile.poll.interval_s
        lock = asyncio.Lock()
        fresh = False  # a cycle ran since the last picture
        slot = time.monotonic()

        async def one_cycle() -> None:
            nonlocal fresh, slot
            async with lock:
                await asyncio.sleep(max(0.0, slot - time.monotonic()))
                slot = max(slot + interval, time.monotonic())
                snap = await self.poller.poll_once()
                await self.runner.tick(snap)
                fresh = True

        control = self.control
        if control is not None:
            pause, control.wait = control.wait, one_cycle
        driver.lockstep = True
        try:
            while True:
                if not fresh:
                    await one_cycle()
                fresh = False
                yield self.runner.view()
                if self.runner.done:
                    return
        finally:
            driver.lockstep = False
            if control is not None:
                control.wait = pause

    async def _stop_feed(self) -> None:
        feeder, self._feed = self._feed, None
        if feeder is not None and not feeder.done():
            feeder.cancel()
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await feeder

    def export(self, out_dir: str | Path, overwrite: bool = False) -> tuple[Path, Path]:
        """Write ``out_dir/dataset/`` and ``out_dir/report.html`` (+ ``.md``); returns both."""
        from ..dataset.export import export_session
        from ..dataset.outputs import check_report_target
        from ..report import write_report

        out = Path(out_dir)
        check_report_target(out / "report.html", out / "dataset")  # before anything is written
        dataset = export_session(
            self.journal.path, out / "dataset", overwrite=overwrite, replace_own=True
        )
        html, _md = write_report(dataset, out / "report.html")
        return dataset, html

    async def close(self) -> None:
        """Stop polling and the simulated bench; close the journal. Safe to call twice."""
        if self._closed:
            return
        self._closed = True
        try:
            await self._stop_feed()  # before the poller closes: it would start polling again
            with contextlib.suppress(Exception):
                await self.poller.close()
            if self.bench is not None:
                with contextlib.suppress(Exception):
                    await self.bench.stop()
        finally:
            self.journal.close()
