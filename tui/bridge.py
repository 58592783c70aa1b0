"""The one place the console meets the session and runner: views in, decisions out.

``frame_from_view`` turns a ``meas.walk.view.RunnerView`` into the console's plain ``Frame``;
``Bridge`` wraps a session (poll one cycle, tick the runner) and forwards the technician's
commands, turning refusals (``BenchwalkError``) into one-line notices. Everything else in
``tui/`` sees only frames.
"""

from __future__ import annotations

import asyncio
import contextlib
import inspect
import time
from collections import deque
from collections.abc import AsyncGenerator, Callable, Sequence
from pathlib import Path
from typing import Any

from meas.errors import BenchwalkError
from meas.session import Session
from meas.snapshot import Snapshot
from meas.walk.runner import Runner

from .frame import Frame, StepInfo
from .keys import action_keys, display_key, key_of

LIVE_WINDOW = 4  # snapshots of the live configuration the coverage view adds (as the check does)
SWITCHING_STATES = ("operating", "verifying", "settling")  # runner states of a changing bench


def frame_from_view(
    view: Any,
    snapshot: Snapshot | None,
    events: tuple[str, ...] = (),
    hands: Sequence[tuple[str, str]] = (),
    simulated: bool = False,
) -> Frame:
    """A console frame from a RunnerView (duck-typed, so tests can hand-build either).

    ``hands``: on the simulated bench, the switches the next key also sets by hand
    (``Session.would_set_by_hand``), which the step panel names.
    """
    step = view.step
    action = getattr(view, "action", "none")
    # the keys go before the runner's own sentence so that a narrow terminal cuts the
    # sentence, never the key
    keys = action_keys(
        action,
        getattr(view, "settle_timed_out", False),
        pending=getattr(view, "pending_remote", None) is not None,
    )
    next_action = (f"press {keys} \u2502 " if keys else "") + view.next_action
    hint = ""
    if hands and action != "request_remote":
        hint = f"simulated bench: {keys} also sets {', '.join(s for s, _ in hands)} by hand for you"
    state = str(getattr(view.state, "value", view.state))
    finished = state in ("finished", "stopped")
    if step is None:
        info = StepInfo(
            index=view.total,
            total=view.total,
            step_id="",
            title="sequence over",
            instruction=getattr(view, "message", "") or "",
            kind="",
            state=state,
            overall="done" if state == "finished" else "inconsistent",
            next_action=next_action,
            finished=True,
            verdict=getattr(view, "verdict", ""),
            simulated=simulated,
        )
    else:
        policy = step.capture
        window = policy.settle.window_s if policy is not None else 2.0
        remote = tuple(s for s, _ in getattr(view, "remote_todo", ()))
        info = StepInfo(
            index=view.index + 1,
            total=view.total,
            step_id=step.id,
            title=step.title,
            instruction=step.instruction,
            kind=step.kind,
            state=state,
            expected=dict(view.expected),
            actual=dict(view.actual),
            settle=view.settle_progress if state == "settling" else None,
            overall="inconsistent" if state == "stopped" else view.overall,
            next_action=next_action,
            action=action,
            allowed=frozenset(getattr(view, "allowed", ())),
            message=getattr(view, "message", ""),
            remote_switches=remote,
            captured=view.captured,
            to_capture=view.capture_target if step.capture is not None else 0,
            finished=finished,
            flagged=tuple(view.mismatches) if hasattr(view, "mismatches") else None,
            to_operate=tuple(getattr(view, "to_operate", ())),
            hint=hint,
            verdict=getattr(view, "verdict", ""),
            simulated=simulated,
        )
        return Frame(snapshot, tuple(view.results), info, events, window)
    return Frame(snapshot, tuple(view.results), info, events)


class Bridge:
    """Console side of a ``meas.session.Session``: ``cycle()`` polls once and ticks the runner.

    It drives ``session.poller.run()`` itself (rather than ``Session.views()``) because the
    console needs each snapshot as well as the view; the runner journals every tick as usual
    and keeps being fed after the sequence ends, so the readings stay live.
    On the simulated bench (``session.bench``) the technician's hands are simulated too: the
    confirm keys first set the switches the step expects (all but those it commands remotely),
    as a person at the bench would, by the same rule as ``benchwalk demo --headless``
    (``meas.sim.hands``).
    """

    def __init__(self, session: Session, operator: str = "", out_dir: Path | None = None) -> None:
        self.session = session
        self.profile = session.profile
        self.operator = operator
        self.out_dir = out_dir
        self.exported: Path | None = None
        self.report: Path | None = None
        self._last_state: tuple[int, str] | None = None
        self._events: list[str] = []
        self._snapshots: AsyncGenerator[Snapshot, None] | None = None
        self.last_snapshot: Snapshot | None = None
        self.transitions = 0  # step or state changes seen; tests wait on it
        # the captured snapshots of each step in this console run (for the coverage view),
        # and the last few snapshots whatever their role (the live configuration)
        self._captured: dict[str, list[Snapshot]] = {}
        self._recent: deque[Snapshot] = deque(maxlen=LIVE_WINDOW)

    @property
    def simulated(self) -> bool:
        """The session runs on the simulated bench (marked on the main screen)."""
        return getattr(self.session, "bench", None) is not None

    @property
    def runner(self) -> Runner:
        return self.session.runner

    def log(self, text: str) -> None:
        self._events.append(f"{time.strftime('%H:%M:%S')} {text}")

    async def cycle(self) -> Frame:
        if self._snapshots is None:
            self._snapshots = self.session.poller.run(self.profile.poll.interval_s)
        snapshot = await anext(self._snapshots)
        await self.runner.tick(snapshot)
        self.last_snapshot = snapshot
        view = self.runner.view()
        self._note_capture(snapshot, view)
        return self.frame(view)

    def _note_capture(self, snapshot: Snapshot, view: Any) -> None:
        """Keep the snapshot if this tick took it as a capture (the step's capture count grew;
        a retake drops the step's earlier picks). Live snapshots are kept only once the
        readings are steady: a switching transient is no configuration to judge."""
        state = str(getattr(view.state, "value", view.state))
        if getattr(view, "overall", "") == "settling" or state in SWITCHING_STATES:
            self._recent.clear()
        else:
            self._recent.append(snapshot)
        step = getattr(view, "step", None)
        if step is None or getattr(step, "capture", None) is None:
            return
        n = int(getattr(view, "captured", 0))
        got = self._captured.setdefault(step.id, [])
        if n < len(got):
            del got[n:]
        if n > len(got):
            got.append(snapshot)

    def captures_so_far(self) -> tuple[list[list[Snapshot]], str]:
        """The estimator's input for the coverage view: one list of snapshots per captured
        step of this run, plus the live configuration when no captured step had it; and a
        sentence saying what that is."""
        steps = [list(v) for v in self._captured.values() if v]
        seen = {tuple(sorted(v[0].switches.items())) for v in steps}
        live = (
            [s for s in self._recent if s.switches == self._recent[-1].switches]
            if self._recent
            else []
        )
        words = f"from {len(steps)} captured step(s) of this console run"
        if live and tuple(sorted(live[-1].switches.items())) not in seen:
            steps.append(live)
            words += f" + {len(live)} steady live snapshot(s)"
        elif not live:
            words += " (live readings still settling: left out)"
        return steps, words

    def frame(self, view: Any = None) -> Frame:
        """The console's frame of the runner's view (``view``: one just taken this cycle)."""
        if view is None:
            view = self.runner.view()
        mark = (view.index, str(view.state))
        if mark != self._last_state:
            step = view.step
            title = f"step {view.index + 1} {step.id}" if step is not None else "sequence"
            self.log(f"{title}: {getattr(view.state, 'value', view.state)}")
            if view.message:
                self.log(view.message)
            self._last_state = mark
            self.transitions += 1
        events, self._events = tuple(self._events), []
        hands = self.session.would_set_by_hand(view, str(getattr(view, "action", "none")))
        return frame_from_view(
            view, self.last_snapshot, events, hands=hands, simulated=self.simulated
        )

    def _simulated_hands(self, command: str) -> None:
        """On the simulated bench, set by hand what ``command`` needs (``Session.set_by_hand``)."""
        for sid, state in self.session.set_by_hand(self.runner.view(), command):
            self.log(f"simulated bench: {sid} set {state} by hand")

    def command(self, name: str, *args: Any) -> str:
        """Run a synchronous runner command; returns '' or the refusal sentence."""
        self._simulated_hands(name)
        fn: Callable[..., Any] = getattr(self.runner, name)
        try:
            fn(*args)
        except BenchwalkError as exc:
            self.log(f"refused {name}: {exc}")
            return str(exc)
        self.log(f"{name}{(': ' + ' '.join(map(str, args))) if args else ''}")
        return ""

    def request_remote(self, switch_id: str, state: str) -> str:
        """The question to confirm; on the simulated bench, switches the step expects are set
        by hand first and the request waits for their status (refused with a sentence)."""
        set_now = self.session.set_by_hand(self.runner.view(), "request_remote")
        if set_now:
            names = ", ".join(f"{sid} {st}" for sid, st in set_now)
            self.log(f"simulated bench: {names} set by hand")
            raise BenchwalkError(
                f"simulated bench: {names} set by hand first; press "
                f"{display_key(key_of('request_remote'))} again once the status shows it"
            )
        return self.runner.request_remote(switch_id, state)

    def cancel_remote(self) -> None:
        """The remote dialog was closed without sending: the request is withdrawn."""
        cancel = getattr(self.runner, "cancel_remote", None)
        if cancel is not None:
            cancel()

    async def confirm_remote(self, switch_id: str, state: str) -> str:
        try:
            await self.runner.confirm_remote(switch_id, state, self.operator)
        except BenchwalkError as exc:
            self.log(f"remote {switch_id} {state} failed: {exc}")
            return str(exc)
        if self.runner.stopped:
            return self.runner.message or f"{switch_id} did not reach {state}"
        self.log(f"remote {switch_id} -> {state} sent")
        return ""

    async def export(self) -> Path:
        """Dataset and report into ``out_dir`` (default ``./benchwalk-<session>``), in a thread."""
        target = self.out_dir or Path(f"benchwalk-{self.session.session_id}")
        out = await asyncio.to_thread(self.session.export, target, True)
        # Session.export returns (dataset folder, report file); older builds the folder alone
        self.exported = Path(out[0] if isinstance(out, tuple) else out)
        self.report = Path(out[1]) if isinstance(out, tuple) and len(out) > 1 else None
        return self.exported

    async def close(self) -> None:
        if self._snapshots is not None:
            with contextlib.suppress(
                RuntimeError
            ):  # still inside a cancelled poll: the poller closes
                await self._snapshots.aclose()
            self._snapshots = None
        out = self.session.close()
        if inspect.isawaitable(out):
            await out
