"""One session's wiring: poller, checks, journal and runner (and a simulated bench for demos).

Headless mode and the console both use it: ``async for view in session.views(): ...`` runs
the poll loop, feeds every snapshot to the runner (which journals it with its role) and
yields the runner's picture after each one; the caller reacts by calling runner commands.

What is journalled: every snapshot polled while a step operates, verifies, settles or
captures (roles ``settling`` / ``capture``, and ``live`` for the polls between two capture
picks); while waiting for the technician or reviewing, one ``live`` snapshot per
``live_every_s`` (default 1 s), so a long wait does not bloat the journal.

A demo session records in the journal meta that it ran on the simulated bench, with its
seed and faults, so ``resume`` can start the same bench again and bring its switches to
the configuration the sequence had reached. A bench run as built (``as_built_seed``,
``model_errors``: its true network off the nameplate, ``meas.sim.as_built``) also records the
seed and every applied value under ``as_built``; the profile keeps the nameplate model.
"""

from __future__ import annotations

import asyncio
import contextlib
import math
from collections.abc import AsyncIterator, Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .errors import BenchwalkError
from .journal.lock import SessionBusy
from .journal.sessions import new_session_id, resolve_session, session_path
from .journal.store import Journal, SessionExists
from .model import CapturePolicy, Profile, SwitchState
from .profile import load_profile
from .results import Status
from .snapshot import Snapshot
from .verdict import records_from_log, session_verdict
from .walk.runner import Runner
from .walk.sequence import (
    configuration_after,
    configuration_before,
    find_step,
    validate_sequence,
)
from .walk.states import StepOutcome
from .walk.view import RunnerView

if TYPE_CHECKING:  # imported where used: a session loads only the parts it runs
    from .checks.settle import SettleState
    from .poll.control import SwitchControl
    from .poll.cycle import Poller
    from .sim.as_built import AsBuilt
    from .sim.bench import SimulatedBench

SIM_OPERATOR = "simulated technician"


class _SettleAdapter:
    """Presents ``meas.checks.SettleDetector`` with the small interface the runner uses."""

    def __init__(self, profile: Profile, policy: CapturePolicy):
        from .checks.settle import SettleDetector

        self._det = SettleDetector(profile, policy.settle)
        self._window_s = policy.settle.window_s
        self._limit = policy.settle.rel_spread
        self._state: SettleState | None = None

    def update(self, snapshot: Snapshot) -> None:
        self._state = self._det.feed(snapshot)

    @property
    def settled(self) -> bool:
        return bool(self._state is not None and self._state.settled)

    @property
    def timed_out(self) -> bool:
        return bool(self._state is not None and self._state.timed_out)

    @property
    def elapsed_s(self) -> float:
        return float(self._state.elapsed_s) if self._state is not None else 0.0

    @property
    def settle_s(self) -> float:
        """When the readings became steady, seconds after settling began (elapsed until then)."""
        st = self._state
        if st is None:
            return 0.0
        return float(st.settle_time_s) if math.isfinite(st.settle_time_s) else float(st.elapsed_s)

    @property
    def worst(self) -> str:
        return str(self._state.worst) if self._state is not None else ""

    @property
    def progress(self) -> float:
        """0..1: the window filling, then how close the worst spread is to the limit."""
        st = self._state
        if st is None:
            return 0.0
        if st.settled:
            return 1.0
        fill = min(1.0, st.elapsed_s / self._window_s) if self._window_s > 0 else 1.0
        if not st.window_full:
            return 0.5 * fill
        closeness = self._limit / st.spread if st.spread > 0 else 1.0
        return 0.5 + 0.5 * min(1.0, closeness) * 0.99


def settle_factory(profile: Profile) -> Callable[[CapturePolicy], _SettleAdapter]:
    return lambda policy: _SettleAdapter(profile, policy)


def bench_start_state(profile: Profile, index: int) -> dict[str, SwitchState]:
    """Where the simulated bench starts for step ``index`` (new or resumed): a capture step
    finds the states it expects; a step that operates starts from the states before it
    (for the first step, the switches' normal states: nothing to set)."""
    if index < len(profile.steps) and profile.steps[index].kind == "capture":
        return dict(configuration_after(profile, index))
    return dict(configuration_before(profile, index))


def prior_outcomes(journal: Journal, profile: Profile) -> dict[str, StepOutcome]:
    """Outcomes of steps finished before a resume, from the step log (latest entry wins)."""
    out: dict[str, StepOutcome] = {}
    unverified = journal.unverified_by_step()
    for rec in records_from_log([s.id for s in profile.steps], journal.step_history()):
        if rec.outcome == "not_captured":
            continue
        status = Status.FAIL if rec.failed_checks else Status.PASS
        lines = tuple(unverified.get(rec.step_id, ()))
        out[rec.step_id] = StepOutcome(rec.step_id, rec.outcome, status, (), rec.reason, lines)
    return out


def session_state(path: Path) -> str:
    """One line for a session list: ``finished, VERDICT`` or ``unfinished at step X``.

    Read-only: listing sessions never writes to (or waits on) a journal.
    """
    from .journal import read

    try:
        conn = read.connect_read_only(path)
    except Exception:  # noqa: BLE001 - a list must show the other sessions anyway
        return "unreadable journal"
    try:
        info = read.read_session(conn)
        if info is None:
            return "empty journal"
        ids = [s["id"] for s in info.profile_dict.get("steps", [])]
        history = read.step_history(conn)
        point = read.resume_point(conn, ids)
        by_step = read.unverified_by_step(conn)
    except Exception:  # noqa: BLE001
        return "unreadable journal"
    finally:
        conn.close()
    records = records_from_log(ids, history)
    if point is None:
        unverified = [line for sid in ids for line in by_step.get(sid, [])]
        return f"finished, {session_verdict(records, unverified).word}"
    done = sum(1 for r in records if r.outcome != "not_captured")
    return f"unfinished at step {point} ({done} of {len(ids)} steps done)"


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
    ) -> None:
        self.profile = profile
        self.journal = journal
        self.poller = poller
        self.runner = runner
        self.bench = bench
        self.control = control
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
        built = _as_built(profile, simulate, as_built_seed, model_errors)
        if out_dir is not None:
            from .dataset.outputs import check_output_folder

            check_output_folder(Path(out_dir))
        meta: dict[str, Any] = {"simulated": simulate, "faults": list(faults), "seed": seed}
        meta["noise"] = noise
        if built is not None:  # the true network the simulated bench runs
            meta["as_built"] = built.meta(model_errors)
        bench, live_profile = None, profile
        if simulate:
            bench, live_profile = await _start_bench(profile, faults, seed, noise, built)
            for sw, state in bench_start_state(profile, 0).items():
                bench.operate_by_hand(sw, state)
        try:
            journal = _create_journal(profile, operator, session_id, sessions_dir, meta)
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
                from .dataset.outputs import check_output_folder

                check_output_folder(Path(out_dir), journal.path, journal.session_id)
            ppath = Path(profile_path or journal.profile_dict.get("path", ""))
            if not ppath.is_file():
                raise BenchwalkError(
                    f"{journal.path}: the profile {ppath} is not there any more; "
                    "give its new location with --profile"
                )
            profile = load_profile(ppath)
            if profile.sha256 != journal.profile_sha256:
                if not allow_changed_profile:
                    raise BenchwalkError(
                        f"{ppath} changed since session {journal.session_id} started "
                        f"(sha256 {journal.profile_sha256[:12]} -> {profile.sha256[:12]}); "
                        "check the change, then resume with --allow-changed-profile"
                    )
                journal.record_event(
                    "profile_changed",
                    f"resumed with a changed profile {ppath}",
                    operator=operator or journal.operator,
                    data={"old_sha256": journal.profile_sha256, "new_sha256": profile.sha256},
                )
            validate_sequence(profile)
            point = journal.resume_point()
            if point is None:
                index = len(profile.steps)
            else:
                try:
                    index = find_step(profile, point)
                except KeyError:
                    raise BenchwalkError(
                        f"step {point!r}, where session {journal.session_id} stopped, is not in "
                        f"{ppath} any more"
                    ) from None
            op = operator or journal.operator
            meta = journal.meta
            bench, live_profile = None, profile
            if meta.get("simulated"):
                from .sim.as_built import from_meta

                built = from_meta(profile, meta)  # the recorded true network, if any
                bench, live_profile = await _start_bench(
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
        from .checks import CheckEngine
        from .poll.control import SwitchControl
        from .poll.cycle import Poller

        poller = Poller(profile)
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
            control = SwitchControl(profile, poller) if profile.control.enabled else None
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
        return cls(profile, journal, poller, runner, bench, control)

    # ------------------------------------------------------------------ running

    def would_set_by_hand(self, view: RunnerView, command: str) -> list[tuple[str, SwitchState]]:
        """What a hand at the simulated bench sets before ``command`` (none on a real bench)."""
        if self.bench is None:
            return []
        from .sim.hands import to_set_by_hand

        return to_set_by_hand(view, command)

    def set_by_hand(self, view: RunnerView, command: str) -> list[tuple[str, SwitchState]]:
        """On the simulated bench, set by hand what ``command`` needs (the one rule, in
        ``meas.sim.hands``, for the console and the headless demo alike); returns what was set."""
        if self.bench is None:
            return []
        from .sim.hands import set_by_hand

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

    async def _stop_feed(self) -> None:
        feeder, self._feed = self._feed, None
        if feeder is not None and not feeder.done():
            feeder.cancel()
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await feeder

    def export(self, out_dir: str | Path, overwrite: bool = False) -> tuple[Path, Path]:
        """Write ``out_dir/dataset/`` and ``out_dir/report.html`` (+ ``.md``); returns both."""
        from .dataset.export import export_session
        from .dataset.outputs import check_report_target
        from .report import write_report

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


def as_built_line(
    profile_path: str | Path, as_built_seed: int | str | None, model_errors: Sequence[str]
) -> str | None:
    """Check the as-built options before anything starts; the line a command shows for them.

    None without them; ``BenchwalkError`` names a bad option."""
    built = _as_built(load_profile(profile_path), True, as_built_seed, model_errors)
    return None if built is None else built.summary()


def _as_built(
    profile: Profile, simulate: bool, seed: int | str | None, model_errors: Sequence[str]
) -> AsBuilt | None:
    if seed is None and not model_errors:
        return None
    if not simulate:
        raise BenchwalkError("--as-built and --model-error apply to the simulated bench only")
    from .sim.as_built import from_options

    return from_options(profile, seed, model_errors)


def _create_journal(
    profile: Profile,
    operator: str,
    session_id: str | None,
    sessions_dir: Path | None,
    meta: dict[str, Any],
) -> Journal:
    """A new journal under a given id, or a fresh id unique in the folder: two sessions
    started in the same second get ``ID``, ``ID-2``, ... (the session lock settles a race)."""
    if session_id is not None:
        path = session_path(session_id, sessions_dir)
        return Journal.create(path, profile, operator=operator, session_id=session_id, meta=meta)
    base = new_session_id(profile.bench.name)
    for n in range(1, 1000):
        sid = base if n == 1 else f"{base}-{n}"
        path = session_path(sid, sessions_dir)
        if path.exists():
            continue
        try:
            return Journal.create(path, profile, operator=operator, session_id=sid, meta=meta)
        except (SessionExists, SessionBusy):
            continue
    raise BenchwalkError(f"{path.parent}: too many sessions started in the same second")


async def _start_bench(
    profile: Profile,
    faults: Sequence[str],
    seed: int | None,
    noise: bool,
    built: AsBuilt | None = None,
) -> tuple[SimulatedBench, Profile]:
    from .profile.settings import seed_problem
    from .sim.bench import SimulatedBench
    from .sim.faults import parse_fault, validate_faults

    if seed is not None and (why := seed_problem(seed)):
        raise BenchwalkError(f"seed: {why}")
    parsed = tuple(parse_fault(f) for f in faults)
    validate_faults(profile, parsed)
    kwargs: dict[str, Any] = {"faults": parsed, "port_map": "free", "noise": noise}
    if seed is not None:
        kwargs["seed"] = seed
    if built is not None:
        from .sim.as_built import readings_on

        kwargs["readings"] = readings_on(built.profile(profile))
    bench = SimulatedBench(profile, **kwargs)
    live = await bench.start()
    return bench, live


def validate_start(
    profile_path: str | Path | None,
    *,
    faults: Sequence[str] = (),
    resume: str | None = None,
    sessions_dir: Path | None = None,
) -> None:
    """Check what starting a session needs (the journal to resume, the profile, the simulated
    faults) before any screen opens: a ``BenchwalkError`` line instead of three screens."""
    if resume:
        resolve_session(resume, sessions_dir)
    profile = load_profile(profile_path) if profile_path else None
    if faults:
        from .sim.faults import parse_fault, validate_faults

        parsed = tuple(parse_fault(f) for f in faults)
        if profile is not None:
            validate_faults(profile, parsed)
