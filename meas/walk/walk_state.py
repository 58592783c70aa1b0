"""The walk's state: where it is in the sequence, what it has recorded, the questions asked
of it (records, verdict, expected and actual switches, the view) and the bookkeeping of one
step (enter, advance, journal).

The transitions on each polled snapshot are ``meas.walk.machine.StepMachine``'s, built on this
class; the technician's commands are ``meas.walk.runner.Runner``'s, built on that.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from ..errors import BenchwalkError
from ..model import Profile, Step, SwitchState
from ..results import CheckResult
from ..snapshot import Snapshot
from ..verdict import StepRecord, Verdict, session_verdict
from .capture import CaptureBook
from .holds import hold_issues, hold_scope
from .live import LiveWatch
from .ports import CheckFn, JournalSink, Settle, SettleFactory, SwitchOperator
from .remote import RemoteOps
from .sequence import configurations
from .states import State, StepOutcome
from .status import mismatch_text, mismatches
from .view import RunnerView, view_of


class WalkState:
    """One session's walk through ``profile.steps``: state, bookkeeping and the questions
    asked of it; ``StepMachine`` moves it on each snapshot."""

    def __init__(
        self,
        profile: Profile,
        journal: JournalSink,
        *,
        checks: CheckFn,
        settle_factory: SettleFactory,
        control: SwitchOperator | None = None,
        operator: str = "",
        start_index: int = 0,
        live_every_s: float = 1.0,
        live_checks: bool = True,
        history: int = 64,
        on_saved: Callable[[int, str, str], None] | None = None,
        prior_outcomes: dict[str, StepOutcome] | None = None,
        resumed: bool = False,
    ) -> None:
        if not profile.steps:
            raise BenchwalkError(
                f"{profile.path}: the profile has no steps; name a [sequence] file"
            )
        self.profile = profile
        self.configs = configurations(profile)  # what each step must find, computed once
        self.journal = journal
        self._checks = checks
        self._settle_factory = settle_factory
        self.control = control
        self.operator = operator
        self.live_every_s = live_every_s
        self.live_checks = live_checks  # False: check only captured snapshots (headless)
        self.on_saved = on_saved
        self.outcomes: dict[str, StepOutcome] = dict(prior_outcomes or {})
        self.strict_unverified = False  # unverified readings fail the exit code (--strict)
        self.book = CaptureBook(history)
        self.live = LiveWatch(profile, settle_factory)  # gates the live noise/frozen checks
        self.live_results: list[CheckResult] = []
        self.last: Snapshot | None = None
        self._last_live_t = float("-inf")
        self.index = start_index
        # a resumed session's first step: a remote command may have been sent before the stop
        self._resumed_step: int | None = start_index if resumed else None
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

    def hold_scope(self) -> tuple[str, ...]:
        """The steps the current hold point covers (``meas.walk.holds``)."""
        return hold_scope(self.profile, self.index)

    def hold_issues(self) -> tuple[str, ...]:
        """Steps in the hold point's scope that did not pass, one line each (to acknowledge)."""
        return hold_issues(self.profile, self.index, self.outcomes)

    def records(self) -> list[StepRecord]:
        """Every step's record in sequence order; a step without an outcome is not captured."""
        return [
            self.outcomes[s.id].record()
            if s.id in self.outcomes
            else StepRecord(s.id, "not_captured")
            for s in self.profile.steps
        ]

    def verdict(self, unverified: Sequence[str] | None = None) -> Verdict:
        """The session verdict (``meas.verdict.session_verdict``) of the steps so far.

        Unverified readings are those the steps' final reviews could not verify against the
        network model, unless given; ``strict_unverified`` makes them fail the exit code."""
        if unverified is None:
            unverified = [u for o in self.outcomes.values() for u in o.unverified]
        return session_verdict(
            self.records(), unverified, stopped=self.stopped, strict=self.strict_unverified
        )

    def expected(self) -> dict[str, SwitchState]:
        """The switch states the current step must find (its full configuration)."""
        return dict(self.configs[self.index]) if self.index < len(self.configs) else {}

    def actual(self) -> dict[str, str]:
        """The switch status of the latest snapshot (empty before the first poll)."""
        return dict(self.last.switches) if self.last is not None else {}

    def mismatches(self) -> list[str]:
        return mismatches(self.profile, self.expected(), self.actual())

    def view(self) -> RunnerView:
        return view_of(self)

    # ------------------------------------------------------------------ step bookkeeping

    def _reset_step(self) -> None:
        self.settle: Settle | None = None
        self._verify_deadline: float | None = None
        self._unread_since: float | None = None  # first snapshot whose switch status was unread
        self._settle_t0: float | None = None
        self._step_t0 = float("-inf")  # when the step's operation was confirmed
        self.book.reset()
        self.remote = RemoteOps()

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
        return self.last.t_mono if self.last is not None else 0.0

    def _mismatch_text(self, bad: list[str]) -> str:
        return mismatch_text(self.expected(), self.actual(), bad)

    def _journal(self, kind: str, message: str, **data: object) -> None:
        """An event of the current step, by the operator."""
        self.journal.record_event(
            kind,
            message,
            step_id=self.step.id if self.step else None,
            operator=self.operator,
            data=data or None,
        )

    def _record(self, snapshot: Snapshot, role: str) -> int:
        step = self.step
        row = self.journal.record_snapshot(snapshot, step_id=step.id if step else None, role=role)
        self.book.saved(snapshot, row)
        if self.on_saved is not None:
            self.on_saved(row, step.id if step else "", role)
        return row

    def _require(self, *states: State, what: str) -> Step:
        step = self.step
        if step is None or self.state not in states:
            now = "the sequence is over" if step is None else f"the step is {self.state.value}"
            raise BenchwalkError(f"cannot {what} now: {now}")
        return step
