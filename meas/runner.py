"""The switching-sequence state machine that the console and headless mode both drive.

The runner knows steps, switch states, settle and checks; it knows nothing of Modbus or of
screens. Whoever owns the poll loop feeds it every snapshot; the technician's decisions
arrive as commands. Every decision is journalled with operator and time.

Public API (console and headless mode; ``meas.session.Session`` builds one for you)::

    runner = Runner(profile, journal, checks=CheckEngine(profile).run,
                    settle_factory=meas.session.settle_factory(profile),
                    control=SwitchControl(profile, poller), operator="A. Tech",
                    start_index=0,            # resume: index of the first unfinished step
                    live_checks=True,         # False: check only captured snapshots (headless)
                    on_saved=None)            # callback(row, step_id, role) per journalled snapshot
    await runner.tick(snapshot)              # every polled snapshot, in order
    runner.view() -> RunnerView              # read-only picture for the screen

    # commands; each raises BenchwalkError with a sentence to show when not allowed now
    runner.confirm_operation()               # manual step: "I have operated it"
    runner.request_remote(switch_id, state) -> str   # 1st deliberate step: returns the question
    await runner.confirm_remote(switch_id, state, operator)  # 2nd step: sends the command
    runner.capture()                         # start a capture step / capture after settle timeout
    runner.retake()                          # reviewing (or settle timed out) -> settling again
    runner.skip(reason)                      # skip the current step, reason required
    runner.accept(reason=None)               # reviewing -> accepted (reason if checks failed, gate allow)
    runner.sign(name)                        # hold step: named sign-off
    runner.note(text)                        # note step: completes it; any other time: journal note
    runner.stop(reason)                      # end the session here; resumable at this step

    runner.done / runner.finished / runner.stopped   # sequence over / completed / stopped early
    runner.outcomes -> dict[step_id, StepOutcome]     # per step: outcome, worst status, failures
    runner.verdict() -> Status                        # FAIL if any step ended with failing checks

What a step must find: its full configuration (``meas.sequence.configurations``): the states
it names plus those earlier steps left, verified on every switch with a status point.

Step states (``State``): ``waiting`` (for the technician) -> ``operating`` (remote command
sent) -> ``verifying`` (switch status against expectation, within control.verify_timeout_s)
-> ``settling`` -> ``capturing`` (N snapshots at the policy interval, checks on each) ->
``reviewing`` -> ``accepted`` | ``skipped``; ``retake()`` records ``retaken`` and returns to
``settling``. A remote status mismatch ends the sequence in ``stopped``; a manual one (the
switch not as expected when verification times out) returns to ``waiting`` with a message,
as does a switch changing while settling or capturing. A remote command is refused while
any other switch differs from the expectation. Steps without a capture policy go from
``verifying`` to ``reviewing`` with no results. Hold steps wait for ``sign(name)``, note
steps for ``note(text)``. The review judges each (check, subject) by its median status over
the N captures (``median_per_subject``); captures are checked against history from the
steady window only.

``RunnerView.action`` names what the technician does next, one of ``ACTIONS``: the console
maps it to a key, headless mode to a prompt.

Journal roles: snapshots during operating, verifying and settling are ``settling``, the N
picked during capturing are ``capture`` (with their check results), everything else is
``live``, thinned to one per ``live_every_s`` while waiting or reviewing.
"""

from __future__ import annotations

import inspect
from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from enum import StrEnum
from typing import Any, Protocol

from .checks import sort_results
from .errors import BenchwalkError
from .model import CapturePolicy, Profile, Step
from .results import STATUS_RANK, CheckResult, Status, overall
from .sequence import configurations
from .snapshot import Snapshot


class State(StrEnum):
    WAITING = "waiting"
    OPERATING = "operating"
    VERIFYING = "verifying"
    SETTLING = "settling"
    CAPTURING = "capturing"
    REVIEWING = "reviewing"
    ACCEPTED = "accepted"
    SKIPPED = "skipped"
    STOPPED = "stopped"
    FINISHED = "finished"


ACTIONS = (
    "confirm_operation",
    "request_remote",
    "capture",
    "wait",
    "accept",
    "accept_with_reason",
    "retake",
    "sign",
    "note",
    "none",
)


class Settle(Protocol):
    """What the runner needs from a settle detector (see ``meas.checks``)."""

    def update(self, snapshot: Snapshot) -> None: ...
    @property
    def settled(self) -> bool: ...
    @property
    def timed_out(self) -> bool: ...
    @property
    def elapsed_s(self) -> float: ...
    @property
    def settle_s(self) -> float: ...  # how long settling took (when steady), for the journal
    @property
    def worst(self) -> str: ...  # "<meter>:<quantity>" furthest from steady
    @property
    def progress(self) -> float: ...


CheckFn = Callable[[Snapshot, Sequence[Snapshot]], list[CheckResult]]
SettleFactory = Callable[[CapturePolicy], Settle]


@dataclass(frozen=True)
class StepOutcome:
    step_id: str
    outcome: str  # "accepted" | "skipped"
    status: Status  # worst check status of the final capture (PASS when none)
    failures: tuple[CheckResult, ...] = ()
    reason: str = ""


@dataclass(frozen=True)
class RunnerView:
    """Everything a screen shows about the sequence, as plain values."""

    index: int  # 0-based index of the current step
    total: int
    step: Step | None
    state: State
    expected: dict[str, str]
    actual: dict[str, str]
    mismatches: tuple[str, ...]  # switch ids whose status differs from expectation
    settle_progress: float  # 0..1
    settle_elapsed_s: float
    settle_timed_out: bool
    captured: int
    capture_target: int
    results: tuple[CheckResult, ...]  # latest, failures first
    overall: str  # "settling" | "consistent" | "inconsistent" | "waiting"
    next_action: str  # what to do next, in words
    action: str  # one of ACTIONS
    pending_remote: tuple[str, str] | None = None  # (switch, state) awaiting confirm_remote
    remote_todo: tuple[tuple[str, str], ...] = ()  # remote operations of this step not yet done
    message: str = ""  # last notice (e.g. why verification failed)
    operator: str = ""
    polled: bool = False  # a snapshot has been fed; before that switch states are unknown
    to_operate: tuple[
        str, ...
    ] = ()  # switches a manual or remote step changes from the step before


HISTORY_CHECKS = frozenset(
    {"quality.noise", "quality.frozen"}
)  # checks that read earlier snapshots


def _settling_na(r: CheckResult) -> CheckResult:
    return CheckResult(
        r.check,
        r.subject,
        Status.NA,
        unit=r.unit,
        message="not judged while the readings settle after switching",
    )


def median_per_subject(batches: Sequence[Sequence[CheckResult]]) -> list[CheckResult]:
    """One result per (check, subject): the median by severity over the capture snapshots.

    A persistent fault (a reversed CT) fails every capture and so the step; one noisy
    excursion in N captures does not, since limits are set at about 95 % coverage (k = 2)
    and a step runs well over a hundred checks per snapshot. Every per-snapshot result
    stays in the journal and the dataset.
    """
    groups: dict[tuple[str, str], list[CheckResult]] = {}
    for batch in batches:
        for r in batch:
            groups.setdefault((r.check, r.subject), []).append(r)
    out = []
    for rs in groups.values():
        ranked = sorted(rs, key=lambda r: STATUS_RANK[r.status])  # worst first
        out.append(ranked[len(ranked) // 2])
    return out


class Runner:
    """One session's walk through ``profile.steps``; see the module docstring."""

    def __init__(
        self,
        profile: Profile,
        journal: Any,
        *,
        checks: CheckFn,
        settle_factory: SettleFactory,
        control: Any = None,
        operator: str = "",
        start_index: int = 0,
        live_every_s: float = 1.0,
        live_checks: bool = True,
        history: int = 64,
        on_saved: Callable[[int, str, str], None] | None = None,
        prior_outcomes: dict[str, StepOutcome] | None = None,
    ) -> None:
        if not profile.steps:
            raise BenchwalkError(
                f"{profile.path}: the profile has no steps; name a [sequence] file"
            )
        self.profile = profile
        self._configs = configurations(profile)  # what each step must find, computed once
        self.journal = journal
        self._checks = checks
        self._settle_factory = settle_factory
        self.control = control
        self.operator = operator
        self.live_every_s = live_every_s
        self.live_checks = live_checks  # False: check only captured snapshots (headless)
        self._tick_results: list[CheckResult] | None = None
        self.on_saved = on_saved
        self.outcomes: dict[str, StepOutcome] = dict(prior_outcomes or {})
        self._history: deque[Snapshot] = deque(maxlen=history)
        self._row_of: dict[tuple[int, float], int] = {}  # (seq, t_mono) -> journal row
        self._tick_history: list[Snapshot] = []
        self._last: Snapshot | None = None
        self._last_live_t = float("-inf")
        # live checks that read the history (noise, frozen) wait for the readings to settle
        # after any switching seen in the status, by the same criterion as a capture
        self._known_switches: dict[str, str] = {}
        self._live_settle: Settle | None = None
        self._live_steady_t0 = float("-inf")
        self._live_results: list[CheckResult] = []
        self.index = start_index
        self.state = State.WAITING
        self.message = ""
        self._reset_step()
        if self.index >= len(profile.steps):
            self.state = State.FINISHED
        else:
            self._enter_step()

    # ------------------------------------------------------------------ properties

    @property
    def step(self) -> Step | None:
        return self.profile.steps[self.index] if self.index < len(self.profile.steps) else None

    @property
    def finished(self) -> bool:
        return self.state is State.FINISHED

    @property
    def stopped(self) -> bool:
        return self.state is State.STOPPED

    @property
    def done(self) -> bool:
        return self.state in (State.FINISHED, State.STOPPED)

    def skipped_steps(self) -> list[str]:
        """Steps left without acceptance: the record is incomplete even when nothing failed."""
        return [o.step_id for o in self.outcomes.values() if o.outcome == "skipped"]

    def verdict(self) -> Status:
        """FAIL when any step ended with failing checks (accepted under gate allow, or skipped)."""
        return overall([CheckResult("step", o.step_id, o.status) for o in self.outcomes.values()])

    def expected(self) -> dict[str, str]:
        """The switch states the current step must find (its full configuration)."""
        return dict(self._configs[self.index]) if self.index < len(self._configs) else {}

    # ------------------------------------------------------------------ step bookkeeping

    def _reset_step(self) -> None:
        self._settle: Settle | None = None
        self._verify_deadline: float | None = None
        self._unread_since: float | None = None  # first snapshot whose switch status was unread
        self._captures: list[tuple[int, list[CheckResult]]] = []
        self._last_capture_t = float("-inf")
        self._settle_t0: float | None = None
        self._steady_t0 = float("-inf")
        self._review: list[CheckResult] = []
        self._pending: tuple[str, str] | None = None
        self._done_remote: set[str] = set()
        self._operating = False

    def _enter_step(self) -> None:
        step = self.step
        assert step is not None
        self._reset_step()
        self.state = State.WAITING
        self.journal.record_step(
            step.id,
            "waiting",
            operator=self.operator,
            expected_switches=self.expected(),
        )

    def _advance(self) -> None:
        self.index += 1
        if self.index >= len(self.profile.steps):
            self.state = State.FINISHED
            self.journal.record_event("finished", "sequence completed", operator=self.operator)
            return
        self._enter_step()

    def _now(self) -> float:
        return self._last.t_mono if self._last is not None else 0.0

    def _actual(self) -> dict[str, str]:
        return dict(self._last.switches) if self._last is not None else {}

    def _mismatches(self) -> list[str]:
        actual = self._actual()
        out = []
        for sid, want in self.expected().items():
            sw = self.profile.switch(sid)
            got = actual.get(sid, "unknown")
            if sw.status is None and got == "unknown":
                continue  # no status point: cannot be verified, the technician's word stands
            if got != want:
                out.append(sid)
        return out

    def _unread(self, switch_ids: Sequence[str]) -> bool:
        """True when none of these statuses was read (the PLC did not answer), as opposed to
        read in the wrong state."""
        actual = self._actual()
        return all(actual.get(s, "unknown") == "unknown" for s in switch_ids)

    def _status_hold(self, snapshot: Snapshot) -> str | None:
        """Settling and capturing: ``"changed"``, ``"unread"`` (hold this snapshot) or None.

        A status read as the wrong state is a change of configuration. A status that could not
        be read (the PLC missed a poll) proves nothing either way: the snapshot is kept but not
        captured, and only a loss lasting past ``control.verify_timeout_s`` sends the step back.
        """
        bad = self._mismatches()
        if not bad:
            if self._unread_since is not None:
                self._unread_since = None
                self.message = ""
            return None
        if not self._unread(bad):
            self._unread_since = None
            self._config_changed()
            return "changed"
        if self._unread_since is None:
            self._unread_since = snapshot.t_mono
            self.message = f"status of {', '.join(bad)} not read: captures held until it is"
            self.journal.record_event(
                "status_unread",
                self.message,
                step_id=self.step.id if self.step else None,
                operator=self.operator,
            )
        elif snapshot.t_mono - self._unread_since > self.profile.control.verify_timeout_s:
            lost_s = snapshot.t_mono - self._unread_since
            self._unread_since = None
            text = ", ".join(bad)
            self.journal.record_event(
                "status_lost",
                f"status of {text} unread for {lost_s:.1f} s",
                step_id=self.step.id if self.step else None,
                operator=self.operator,
            )
            self.message = (
                f"status of {text} not read for {lost_s:.1f} s: check the PLC and its link, "
                "then confirm again"
            )
            self._captures = []
            self.state = State.WAITING
        return "unread"

    def _record(self, snapshot: Snapshot, role: str) -> int:
        step = self.step
        row = self.journal.record_snapshot(snapshot, step_id=step.id if step else None, role=role)
        self._row_of[(snapshot.seq, snapshot.t_mono)] = row
        if len(self._row_of) > 4 * (self._history.maxlen or 64):
            live = {(h.seq, h.t_mono) for h in self._history}
            self._row_of = {k: v for k, v in self._row_of.items() if k in live}
        if self.on_saved is not None:
            self.on_saved(row, step.id if step else "", role)
        return row

    def _remote_todo(self) -> list[tuple[str, str]]:
        step = self.step
        if step is None or step.kind != "remote":
            return []
        return [(s, v) for s, v in step.operate.items() if s not in self._done_remote]

    def _require(self, *states: State, what: str) -> Step:
        step = self.step
        if step is None or self.state not in states:
            now = "the sequence is over" if step is None else f"the step is {self.state.value}"
            raise BenchwalkError(f"cannot {what} now: {now}")
        return step

    # ------------------------------------------------------------------ the poll feed

    async def tick(self, snapshot: Snapshot) -> None:
        """Advance on one polled snapshot; records it in the journal with its role."""
        self._last = snapshot
        self._history.append(snapshot)
        if self.done:
            return
        self._follow_switching(snapshot)
        self._tick_results: list[CheckResult] | None = None
        if self.live_checks:
            self._live_results = self._results_for(snapshot)
        st = self.state
        if st in (State.OPERATING, State.VERIFYING, State.SETTLING):
            self._record(snapshot, "settling")
        if st is State.VERIFYING:
            self._tick_verify(snapshot)
        elif st is State.SETTLING:
            self._tick_settle(snapshot)
        elif st is State.CAPTURING:
            self._tick_capture(snapshot)
        elif st in (State.WAITING, State.REVIEWING) and (
            snapshot.t_mono - self._last_live_t >= self.live_every_s
        ):
            self._last_live_t = snapshot.t_mono
            self._record(snapshot, "live")

    def _follow_switching(self, snapshot: Snapshot) -> None:
        """Restart the live settle watch when a switch is seen in a new (known) state."""
        changed = False
        for sid, st in snapshot.switches.items():
            if st == "unknown":
                continue  # an unread status proves no operation
            if self._known_switches.get(sid, st) != st:
                changed = True
            self._known_switches[sid] = st
        if changed:
            step = self.step
            policy = (step.capture if step is not None else None) or next(
                (s.capture for s in self.profile.steps if s.capture is not None), CapturePolicy()
            )
            self._live_settle = self._settle_factory(policy)
            self._live_steady_t0 = float("inf")
        live = self._live_settle
        if live is None:
            return
        live.update(snapshot)
        if live.settled:
            self._live_steady_t0 = snapshot.t_mono - live.elapsed_s + live.settle_s
            self._live_settle = None
        elif live.timed_out:  # never steady: judge from here on rather than never
            self._live_steady_t0 = snapshot.t_mono
            self._live_settle = None

    def _results_for(self, snapshot: Snapshot) -> list[CheckResult]:
        """Check results for this tick's snapshot, computed at most once per tick."""
        if self._tick_results is None:
            history = list(self._history)[:-1]
            if self.state is State.CAPTURING:
                # judge captures against the steady stretch only: a switching transient in the
                # history would read as noise or disagreement
                history = [h for h in history if h.t_mono >= self._steady_t0]
                results = self._checks(snapshot, history)
            else:
                history = [h for h in history if h.t_mono >= self._live_steady_t0]
                results = self._checks(snapshot, history)
                if self._live_settle is not None:
                    results = [
                        _settling_na(r)
                        if r.check in HISTORY_CHECKS and r.status is Status.NA
                        else r
                        for r in results
                    ]
            self._tick_results = results
            self._tick_history = history
        return self._tick_results

    def _tick_verify(self, snapshot: Snapshot) -> None:
        step = self.step
        assert step is not None
        if self._verify_deadline is None:
            self._verify_deadline = snapshot.t_mono + self.profile.control.verify_timeout_s
        bad = self._mismatches()
        if not bad:
            self.journal.record_step(
                step.id,
                "verified",
                operator=self.operator,
                actual_switches=self._actual(),
                expected_switches=self.expected(),
            )
            self.message = ""
            self._start_settle()
            return
        if snapshot.t_mono < self._verify_deadline:
            return
        text = self._mismatch_text(bad)
        if step.kind == "remote":
            self._stop(f"switch status does not match after the remote command: {text}")
        else:
            self.journal.record_event(
                "mismatch",
                text,
                step_id=step.id,
                operator=self.operator,
                data={"actual": self._actual(), "expected": self.expected()},
            )
            todo = (
                "check the PLC and its link"
                if self._unread(bad)
                else "set the switches as instructed"
            )
            self.message = f"{text}; {todo}, then confirm again"
            self._verify_deadline = None
            self.state = State.WAITING

    def _mismatch_text(self, bad: Sequence[str]) -> str:
        actual, want = self._actual(), self.expected()
        return ", ".join(
            f"{s} not read, expected {want[s]}"
            if actual.get(s, "unknown") == "unknown"
            else f"{s} is {actual[s]}, expected {want[s]}"
            for s in bad
        )

    def _start_settle(self) -> None:
        step = self.step
        assert step is not None
        if step.capture is None:
            self._review = []
            self.state = State.REVIEWING
            self.journal.record_step(step.id, "reviewing", operator=self.operator, outcome="pass")
            return
        self._settle = self._settle_factory(step.capture)
        self._settle_t0 = None
        self._unread_since = None
        self._captures = []
        self._last_capture_t = float("-inf")
        self.state = State.SETTLING
        self.journal.record_step(step.id, "settling", operator=self.operator)

    def _tick_settle(self, snapshot: Snapshot) -> None:
        step = self.step
        assert step is not None and self._settle is not None
        hold = self._status_hold(snapshot)
        if hold == "changed" or self.state is not State.SETTLING:
            return
        was_timed_out = self._settle.timed_out
        if self._settle_t0 is None:
            self._settle_t0 = snapshot.t_mono
        self._settle.update(snapshot)
        if self._settle.settled:
            self._steady_t0 = self._settle_t0 + self._settle.settle_s
            self.journal.record_step(
                step.id, "capturing", operator=self.operator, settle_s=self._settle.settle_s
            )
            self.state = State.CAPTURING
            self._tick_results = None  # judge this snapshot again, on the steady history
            self._tick_capture(snapshot)
        elif self._settle.timed_out and not was_timed_out:
            worst = self._settle.worst
            self.message = (
                f"not settled after {self._settle.elapsed_s:.1f} s"
                + (f" (least steady: {worst})" if worst else "")
                + ": wait again (retake), capture anyway, or skip with a reason"
            )
            self.journal.record_event(
                "settle_timeout",
                self.message,
                step_id=step.id,
                operator=self.operator,
                data={"elapsed_s": self._settle.elapsed_s, "worst": worst},
            )

    def _tick_capture(self, snapshot: Snapshot) -> None:
        step = self.step
        assert step is not None and step.capture is not None
        hold = self._status_hold(snapshot)
        if hold == "changed" or self.state is not State.CAPTURING:
            return
        policy = step.capture
        slack = 0.5 * self.profile.poll.interval_s
        if hold == "unread" or snapshot.t_mono - self._last_capture_t < policy.interval_s - slack:
            self._record(snapshot, "live")
            return
        row = self._record(snapshot, "capture")
        results = self._live_results = self._results_for(snapshot)
        self.journal.record_checks(row, step.id, results)
        # the exact history these checks saw, so an offline re-check can replay it
        used = [self._row_of.get((h.seq, h.t_mono)) for h in self._tick_history]
        self.journal.record_event(
            "check_history",
            f"checks of snapshot {row} used {len(used)} earlier snapshots",
            step_id=step.id,
            data={"snapshot": row, "history": used},
        )
        self._captures.append((row, results))
        self._last_capture_t = snapshot.t_mono
        if len(self._captures) >= policy.snapshots:
            self._review = median_per_subject([r for _, r in self._captures])
            status = overall(self._review)
            self.state = State.REVIEWING
            self.journal.record_step(
                step.id,
                "reviewing",
                operator=self.operator,
                outcome=status.value,
                actual_switches=self._actual(),
                expected_switches=self.expected(),
            )

    def _config_changed(self) -> None:
        step = self.step
        assert step is not None
        text = self._mismatch_text(self._mismatches())
        self.journal.record_event("config_changed", text, step_id=step.id, operator=self.operator)
        self.message = (
            f"switch state changed during the step ({text}); restore it and confirm again"
        )
        self._captures = []
        self.state = State.WAITING

    def _stop(self, reason: str) -> None:
        step = self.step
        self.message = reason
        if step is not None:
            self.journal.record_step(
                step.id,
                "stopped",
                operator=self.operator,
                reason=reason,
                actual_switches=self._actual(),
                expected_switches=self.expected(),
            )
        self.journal.record_event(
            "stopped", reason, step_id=step.id if step else None, operator=self.operator
        )
        self.state = State.STOPPED

    # ------------------------------------------------------------------ commands

    def confirm_operation(self) -> None:
        """The technician says the manual operation of this step is done."""
        step = self._require(State.WAITING, what="confirm an operation")
        if step.kind != "manual":
            raise BenchwalkError(
                f"step {step.id} is a {step.kind} step: nothing to confirm by hand"
            )
        self.journal.record_event(
            "operation_confirmed",
            f"{step.id}: operation confirmed",
            step_id=step.id,
            operator=self.operator,
            data={"operate": dict(step.operate)},
        )
        self._begin_verify()

    def _begin_verify(self) -> None:
        self.message = ""
        self._verify_deadline = None
        self.state = State.VERIFYING

    def request_remote(self, switch_id: str, state: str) -> str:
        """First of two deliberate steps; returns the question to put to the technician."""
        step = self._require(State.WAITING, what="request a remote operation")
        if not self.profile.control.enabled:
            raise BenchwalkError(
                "control is disabled in the profile ([control] enabled = false): operate by hand"
            )
        if self.control is None:
            raise BenchwalkError("no switch control is connected in this session")
        try:
            sw = self.profile.switch(switch_id)
        except KeyError:
            raise BenchwalkError(f"there is no switch {switch_id} in the profile") from None
        if sw.operation != "remote" or sw.command_coil is None:
            raise BenchwalkError(f"{switch_id} ({sw.label}) is operated by hand, not by command")
        if step.kind != "remote" or step.operate.get(switch_id) != state:
            raise BenchwalkError(f"step {step.id} does not call for {switch_id} {state}")
        if switch_id in self._done_remote:
            raise BenchwalkError(f"{switch_id} was already operated in this step")
        if self._last is None:
            raise BenchwalkError("no switch status read yet: wait for the first poll")
        todo = {s for s, _ in self._remote_todo()}
        others = [s for s in self._mismatches() if s not in todo]
        if others:
            raise BenchwalkError(
                f"the bench is not as this step expects ({self._mismatch_text(others)}): "
                + (
                    "no command is sent while switch status cannot be read; check the PLC and its link"
                    if self._unread(others)
                    else "set it right before sending a command"
                )
            )
        self._pending = (switch_id, state)
        self.journal.record_event(
            "remote_requested",
            f"{switch_id} -> {state} requested",
            step_id=step.id,
            operator=self.operator,
            data={"switch": switch_id, "state": state},
        )
        verb = "Close" if state == "closed" else "Open"
        return f"{verb} {switch_id} ({sw.label}) by remote command? Confirm to send."

    async def confirm_remote(self, switch_id: str, state: str, operator: str) -> None:
        """Second deliberate step: send the command, then verify status on the next snapshots."""
        step = self._require(State.WAITING, what="send a remote command")
        if self._pending != (switch_id, state):
            raise BenchwalkError(f"request {switch_id} {state} first, then confirm it")
        if not operator.strip():
            raise BenchwalkError("a remote command needs the name of the person confirming it")
        self._pending = None
        self.state = State.OPERATING
        self.journal.record_event(
            "remote_confirmed",
            f"{switch_id} -> {state} confirmed",
            step_id=step.id,
            operator=operator,
            data={"switch": switch_id, "state": state},
        )
        try:
            result = self.control.operate(switch_id, state, confirmed_by=operator)
            if inspect.isawaitable(result):
                result = await result
        except BenchwalkError as exc:
            self.state = State.WAITING
            self.message = str(exc)
            raise
        ok = bool(getattr(result, "ok", False))
        msg = getattr(result, "message", "") or ""
        self.journal.record_event(
            "remote_result",
            f"{switch_id} -> {state}: {'ok' if ok else 'failed'} {msg}".strip(),
            step_id=step.id,
            operator=operator,
            data={"ok": ok, "final_status": str(getattr(result, "final_status", ""))},
        )
        if not ok:
            self._stop(f"remote command {switch_id} {state} failed: {msg or 'no detail'}")
            return
        self._done_remote.add(switch_id)
        if self._remote_todo():
            self.state = State.WAITING
        else:
            self._begin_verify()

    def capture(self) -> None:
        """Start a capture step, or capture after the settle timeout (recorded as such)."""
        step = self._require(State.WAITING, State.SETTLING, what="capture")
        if self.state is State.WAITING:
            if step.kind != "capture":
                raise BenchwalkError(f"step {step.id} starts with its {step.kind} operation")
            self.journal.record_event(
                "capture_started",
                f"{step.id}: capture started",
                step_id=step.id,
                operator=self.operator,
            )
            self._begin_verify()
            return
        assert self._settle is not None
        if not self._settle.timed_out:
            raise BenchwalkError(
                "still settling: wait, or capture once the settle timeout has passed"
            )
        self.journal.record_event(
            "captured_unsettled",
            f"{step.id}: captured before the readings settled",
            step_id=step.id,
            operator=self.operator,
            data={"elapsed_s": self._settle.elapsed_s},
        )
        self.journal.record_step(
            step.id,
            "capturing",
            operator=self.operator,
            settle_s=self._settle.elapsed_s,
            reason="captured after settle timeout",
        )
        self._steady_t0 = self._now()
        self.state = State.CAPTURING

    def retake(self) -> None:
        """Discard the review (it stays in the journal) and settle and capture again."""
        step = self._require(State.REVIEWING, State.SETTLING, what="retake")
        if step.capture is None:
            raise BenchwalkError(f"step {step.id} captures nothing to retake")
        self.journal.record_step(
            step.id, "retaken", operator=self.operator, outcome=overall(self._review).value
        )
        self._start_settle()

    def skip(self, reason: str) -> None:
        """Leave the step without accepting it; the reason is journalled."""
        step = self._require(
            State.WAITING,
            State.VERIFYING,
            State.SETTLING,
            State.CAPTURING,
            State.REVIEWING,
            what="skip",
        )
        if not reason or not reason.strip():
            raise BenchwalkError("give a reason to skip this step")
        status = overall(self._review)
        self.journal.record_step(
            step.id, "skipped", outcome=status.value, operator=self.operator, reason=reason.strip()
        )
        self._conclude(step, "skipped", status, reason.strip())

    def accept(self, reason: str | None = None) -> None:
        """Accept the reviewed captures; failing checks need gate allow and a reason."""
        step = self._require(State.REVIEWING, what="accept")
        status = overall(self._review)
        if status is Status.FAIL:
            if step.gate == "block":
                raise BenchwalkError(
                    f"checks failed and step {step.id} does not allow accepting failures: "
                    "retake, or skip with a reason"
                )
            if not reason or not reason.strip():
                raise BenchwalkError("checks failed: give a reason to accept this step anyway")
        self.journal.record_step(
            step.id,
            "accepted",
            outcome=status.value,
            operator=self.operator,
            reason=(reason or "").strip() or None,
            actual_switches=self._actual(),
            expected_switches=self.expected(),
        )
        self._conclude(step, "accepted", status, (reason or "").strip())

    def _conclude(self, step: Step, outcome: str, status: Status, reason: str) -> None:
        failures = tuple(r for r in self._review if r.status is Status.FAIL)
        self.outcomes[step.id] = StepOutcome(step.id, outcome, status, failures, reason)
        self.state = State.ACCEPTED if outcome == "accepted" else State.SKIPPED
        self._advance()

    def sign(self, name: str) -> None:
        """Named sign-off of a hold point."""
        step = self._require(State.WAITING, what="sign")
        if step.kind != "hold":
            raise BenchwalkError(f"step {step.id} is not a hold point")
        if not name or not name.strip():
            raise BenchwalkError("a hold point needs the name of the person signing it off")
        self.journal.record_step(
            step.id,
            "accepted",
            outcome="signed",
            operator=name.strip(),
            reason=f"signed off by {name.strip()}",
        )
        self._conclude(step, "accepted", Status.PASS, f"signed off by {name.strip()}")

    def note(self, text: str) -> None:
        """Completes a note step; at any other time adds a note to the journal."""
        if not text or not text.strip():
            raise BenchwalkError("the note is empty")
        step = self.step
        self.journal.record_event(
            "note", text.strip(), step_id=step.id if step else None, operator=self.operator
        )
        if step is not None and step.kind == "note" and self.state is State.WAITING:
            self.journal.record_step(
                step.id, "accepted", outcome="noted", operator=self.operator, reason=text.strip()
            )
            self._conclude(step, "accepted", Status.PASS, text.strip())

    def stop(self, reason: str) -> None:
        """End the session at this step; ``Session.resume`` continues here."""
        if self.done:
            return
        self._stop(reason or "stopped by the technician")

    # ------------------------------------------------------------------ the picture

    def view(self) -> RunnerView:
        step = self.step
        expected = self.expected()
        actual = {k: v for k, v in self._actual().items() if k in expected} if expected else {}
        mism = tuple(self._mismatches()) if step is not None else ()
        settle = self._settle
        policy = step.capture if step is not None else None
        if self.state in (State.REVIEWING,):
            results = tuple(sort_results(self._review))
        else:
            results = tuple(sort_results(self._live_results))
        action, words = self._next()
        return RunnerView(
            index=self.index,
            total=len(self.profile.steps),
            step=step,
            state=self.state,
            expected=expected,
            actual=actual,
            mismatches=mism,
            settle_progress=(
                1.0
                if settle is not None and settle.settled
                else (settle.progress if settle is not None else 0.0)
            ),
            settle_elapsed_s=settle.elapsed_s if settle is not None else 0.0,
            settle_timed_out=bool(settle is not None and settle.timed_out),
            captured=len(self._captures),
            capture_target=policy.snapshots if policy is not None else 0,
            results=results,
            overall=self._overall(results),
            next_action=words,
            action=action,
            pending_remote=self._pending,
            remote_todo=tuple(self._remote_todo()),
            message=self.message,
            operator=self.operator,
            polled=self._last is not None,
            to_operate=self._to_operate(),
        )

    def _to_operate(self) -> tuple[str, ...]:
        step = self.step
        if step is None or step.kind not in ("manual", "remote"):
            return ()
        now = self._configs[self.index]
        before = self._configs[self.index - 1] if self.index > 0 else {}
        return tuple(sid for sid, st in now.items() if before.get(sid) != st or sid in step.operate)

    def _overall(self, results: Sequence[CheckResult]) -> str:
        if self.state in (State.OPERATING, State.VERIFYING, State.SETTLING):
            return "settling"
        if self.state is State.WAITING and self._live_settle is not None:
            return "settling"  # a switch was seen operating: the readings are still moving
        if self._last is None or self.done:
            return "waiting"
        return "inconsistent" if overall(list(results)) is Status.FAIL else "consistent"

    def _next(self) -> tuple[str, str]:
        step = self.step
        st = self.state
        if st is State.FINISHED:
            skipped = self.skipped_steps()
            if skipped:
                return "none", (
                    f"The sequence is complete, but incomplete as a record: {len(skipped)} "
                    f"step(s) skipped ({', '.join(skipped)})."
                )
            return "none", "The sequence is complete."
        if st is State.STOPPED:
            return "none", f"Stopped: {self.message}. Resume the session when the cause is cleared."
        assert step is not None
        if st is State.WAITING:
            if step.kind == "hold":
                return "sign", "Hold point: the responsible person signs off by name."
            if step.kind == "note":
                return "note", "Write the note this step asks for."
            if step.kind == "capture":
                return "capture", "Check the bench is as instructed, then start the capture."
            todo = self._remote_todo()
            if todo:
                sid, want = todo[0]
                if self._pending:
                    return "request_remote", f"Confirm the remote command {sid} {want}, or cancel."
                verb = "close" if want == "closed" else "open"
                return "request_remote", f"Request the remote command to {verb} {sid}."
            return "confirm_operation", "Operate the switches as instructed, then confirm."
        if st is State.OPERATING:
            return "wait", "Remote command sent: waiting for the switch to report."
        if st is State.VERIFYING:
            return "wait", "Checking switch status against the step's expectation."
        if st is State.SETTLING:
            if self._settle is not None and self._settle.timed_out:
                return "retake", "Not settled: wait again (retake), capture anyway, or skip."
            return "wait", "Waiting for the readings to settle."
        if st is State.CAPTURING:
            return "wait", "Capturing snapshots."
        status = overall(self._review)
        if status is Status.FAIL:
            if step.gate == "allow":
                return "accept_with_reason", "Checks failed: retake, or accept with a reason."
            return "retake", "Checks failed: find the cause and retake, or skip with a reason."
        return "accept", "Checks passed: accept the step."


__all__ = ["ACTIONS", "Runner", "RunnerView", "State", "StepOutcome", "median_per_subject"]
